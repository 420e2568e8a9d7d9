"""Finding the machine's C compiler, and building and loading small C kernels.

The compiler is found as users expect: the ``CC`` environment variable (which may carry
options, e.g. ``"ccache gcc"``), then ``cc`` on the ``PATH``. FMU export
(:mod:`wirestate.export.build`) and the switched engine's event kernel share this lookup.

A kernel is compiled once into a per-user cache folder (``$XDG_CACHE_HOME/wirestate/native``,
else ``~/.cache/wirestate/native``; ``WIRESTATE_NATIVE_CACHE`` overrides it), under a name
keyed by the SHA-256 of its source, the flags and the compiler command, so an edited
source or another compiler builds anew and nothing stale is loaded. The shared object is
written to a temporary file in that folder and renamed into place, so a concurrent run or
a killed build never leaves a partial library under the final name.

``WIRESTATE_NO_NATIVE=1`` (any value but empty or ``0``) keeps every kernel unloaded: the
pure-Python paths run, as on a machine without a compiler (the tests use it to run both).
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import shlex
import shutil
import subprocess
import tempfile
from importlib import resources
from pathlib import Path

#: set to a non-empty value other than ``0`` to run the pure-Python paths
NO_NATIVE_VARIABLE = "WIRESTATE_NO_NATIVE"
#: overrides the cache folder of compiled kernels
CACHE_VARIABLE = "WIRESTATE_NATIVE_CACHE"
#: ISO C, no fused multiply-adds (products and sums must round as numpy's do),
#: position-independent shared object
KERNEL_FLAGS = ("-std=c99", "-O2", "-fPIC", "-shared", "-ffp-contract=off")


class NoCompilerError(LookupError):
    """No usable C compiler; the message says why (completed by the caller's advice)."""


def find_c_compiler(environ: dict[str, str] | None = None) -> list[str]:
    """The C compiler command: ``$CC`` (split like a shell word list), then ``cc``.

    Raises
    ------
    NoCompilerError
        When ``CC`` names no program, or neither it nor ``cc`` exists.
    """
    env = os.environ if environ is None else environ
    path = env.get("PATH", os.defpath)
    given = env.get("CC", "").strip()
    if given:
        words = shlex.split(given)
        if shutil.which(words[0], path=path) is None:
            raise NoCompilerError(f"CC={given!r} names no program on the PATH")
        return words
    found = shutil.which("cc", path=path)
    if found is None:
        raise NoCompilerError("no C compiler found (neither $CC nor cc)")
    return [found]


def is_native_disabled(environ: dict[str, str] | None = None) -> bool:
    """True when ``WIRESTATE_NO_NATIVE`` asks for the pure-Python paths."""
    value = (os.environ if environ is None else environ).get(NO_NATIVE_VARIABLE, "").strip()
    return value not in ("", "0")


def cache_folder(environ: dict[str, str] | None = None) -> Path:
    """The per-user folder of compiled kernels (not created here)."""
    env = os.environ if environ is None else environ
    if env.get(CACHE_VARIABLE):
        return Path(env[CACHE_VARIABLE])
    base = env.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "wirestate" / "native"


def build_kernel(package: str, source_name: str) -> Path:
    """Compile the C file ``source_name`` of ``package`` into the cache (once) and return
    the shared object's path.

    Raises
    ------
    NoCompilerError
        No compiler (see :func:`find_c_compiler`).
    OSError
        The compiler failed (the message carries its first error line) or the cache
        folder cannot be written.
    """
    source = (resources.files(package) / source_name).read_bytes()
    command = find_c_compiler()
    key = hashlib.sha256(
        b"\0".join([source, " ".join(KERNEL_FLAGS).encode(), " ".join(command).encode()])
    ).hexdigest()[:20]
    folder = cache_folder()
    target = folder / f"{Path(source_name).stem}-{key}.so"
    if target.is_file():
        return target
    folder.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="wirestate-build-", dir=folder) as work:
        c_file = Path(work) / source_name
        c_file.write_bytes(source)
        built = Path(work) / "kernel.so"
        args = [*command, *KERNEL_FLAGS, str(c_file), "-o", str(built), "-lm"]
        try:
            done = subprocess.run(args, capture_output=True, text=True, timeout=300)
        except subprocess.TimeoutExpired:
            raise OSError(f"{command[0]} took over 300 s to build {source_name}") from None
        if done.returncode != 0 or not built.is_file():
            lines = (done.stderr or done.stdout).strip().splitlines()
            first = next((line for line in lines if "error" in line), lines[0] if lines else "")
            raise OSError(f"{command[0]} failed to build {source_name}: {first.strip()}")
        os.replace(built, target)  # same folder: atomic, a reader sees no partial file
    return target


def load_kernel(package: str, source_name: str) -> ctypes.CDLL:
    """:func:`build_kernel`, then load it with ctypes (errors as there)."""
    return ctypes.CDLL(str(build_kernel(package, source_name)))


def optional_kernel(package: str, source_name: str, fallback: str) -> ctypes.CDLL | None:
    """:func:`load_kernel`, or None when ``WIRESTATE_NO_NATIVE`` is set (silently) or
    there is no compiler or the build fails: then a
    :class:`~wirestate.errors.WirestateWarning` says ``fallback`` (what runs instead)."""
    import warnings

    from wirestate.errors import WirestateWarning

    if is_native_disabled():
        return None
    try:
        return load_kernel(package, source_name)
    except (NoCompilerError, OSError) as exc:
        warnings.warn(WirestateWarning(f"{exc}; {fallback}"), stacklevel=3)
        return None
