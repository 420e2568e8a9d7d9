"""Writing result files atomically: a temporary file in the same folder, then a rename.

The temporary file is named ``.<target>.wirestate-partial-<pid>-<random>.tmp`` so that a
file left behind by a killed run is plainly disposable, and the next write to the same
target removes such files whose process no longer runs (issue 10.15).
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

#: marks wirestate's temporary files; the process id follows it
PARTIAL_MARK = ".wirestate-partial-"


def write_atomic(path: str | Path, data: str | bytes, *, make_parents: bool = False) -> None:
    """Write ``data`` to ``path`` so that readers see the old file or the new one, never a part.

    The temporary file lives in the destination folder (same file system, so ``os.replace``
    is atomic on POSIX and Windows) and is removed if anything fails. A missing folder is an
    error (``FileNotFoundError``) unless ``make_parents`` is set: a mistyped path should not
    quietly create folders.
    """
    with open_atomic(
        path, "wb" if isinstance(data, bytes) else "w", make_parents=make_parents
    ) as handle:
        handle.write(data)


@contextlib.contextmanager
def open_atomic(
    path: str | Path, mode: str = "w", *, make_parents: bool = False
) -> Iterator[IO[Any]]:
    """A file handle whose content replaces ``path`` only when the ``with`` block ends
    without an exception (for results written in pieces, such as a streamed CSV)."""
    path = Path(path)
    if make_parents:
        path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_partials(path)
    fd, temp = tempfile.mkstemp(
        prefix=f".{path.name}{PARTIAL_MARK}{os.getpid()}-", suffix=".tmp", dir=path.parent
    )
    try:
        try:
            # mkstemp makes 0600; give the mode a plain open() would, or keep the old file's
            os.fchmod(fd, _mode_for(path))
        except BaseException:
            os.close(fd)
            raise
        options = {} if "b" in mode else {"encoding": "utf-8", "newline": ""}
        with os.fdopen(fd, mode, **options) as handle:
            yield handle
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temp)
        raise


def remove_stale_partials(path: str | Path) -> list[Path]:
    """Remove temporary files of earlier writes to ``path`` whose process has ended.

    Returns the files removed. Files of running processes (another write in progress) and
    files that merely look alike are kept.
    """
    path = Path(path)
    removed = []
    folder = path.parent if str(path.parent) else Path(".")
    with contextlib.suppress(OSError):
        for candidate in folder.glob(f".{_glob_escape(path.name)}{PARTIAL_MARK}*.tmp"):
            pid_text = candidate.name[len(path.name) + 1 + len(PARTIAL_MARK) :].split("-")[0]
            if not pid_text.isdigit() or _is_running(int(pid_text)):
                continue
            with contextlib.suppress(OSError):
                candidate.unlink()
                removed.append(candidate)
    return removed


def _glob_escape(name: str) -> str:
    return "".join(f"[{c}]" if c in "*?[" else c for c in name)


def _is_running(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True  # exists but belongs to someone else
    return True


def _mode_for(path: Path) -> int:
    try:
        return path.stat().st_mode & 0o7777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask
