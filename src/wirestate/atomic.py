"""Writing result files atomically: a temporary file in the same folder, then a rename."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


def write_atomic(path: str | Path, data: str | bytes, *, make_parents: bool = False) -> None:
    """Write ``data`` to ``path`` so that readers see the old file or the new one, never a part.

    The temporary file lives in the destination folder (same file system, so ``os.replace``
    is atomic on POSIX and Windows) and is removed if anything fails. A missing folder is an
    error (``FileNotFoundError``) unless ``make_parents`` is set: a mistyped path should not
    quietly create folders.
    """
    path = Path(path)
    if make_parents:
        path.parent.mkdir(parents=True, exist_ok=True)
    mode = "wb" if isinstance(data, bytes) else "w"
    fd, temp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        try:
            # mkstemp makes 0600; give the mode a plain open() would, or keep the old file's
            os.fchmod(fd, _mode_for(path))
        except BaseException:
            os.close(fd)
            raise
        with os.fdopen(fd, mode, **({} if mode == "wb" else {"encoding": "utf-8"})) as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(temp)
        raise


def _mode_for(path: Path) -> int:
    try:
        return path.stat().st_mode & 0o7777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask
