"""Compiling the C runtime and packing the FMU archive.

The compiler is found as users expect: the ``CC`` environment variable (which may carry
options, e.g. ``"ccache gcc"``), then ``cc`` on the ``PATH``.

The FMI 2.0 headers are the open standard's own files as the fmpy package (a dependency)
distributes them in its ``c-code`` folder, under the 2-clause BSD licence printed in each;
they are copied unmodified into the FMU's ``sources/``. wirestate keeps no copy of its own.
"""

from __future__ import annotations

import importlib.util
import io
import os
import subprocess
import tempfile
import zipfile
from importlib import resources
from pathlib import Path

from wirestate.export.plan import ExportError
from wirestate.native import NoCompilerError, find_c_compiler

HEADER_NAMES = ("fmi2Functions.h", "fmi2FunctionTypes.h", "fmi2TypesPlatform.h")
RUNTIME_NAME = "wirestate_fmu.c"
MODEL_HEADER_NAME = "wirestate_model.h"
#: ISO C, no fused multiply-adds (the controller arithmetic must round like Python's),
#: position-independent shared object
CFLAGS = ("-std=c99", "-O2", "-fPIC", "-shared", "-ffp-contract=off")
#: a fixed time stamp for the archive members, so the same model gives the same bytes
ZIP_TIME = (2020, 1, 1, 0, 0, 0)


def find_compiler(environ: dict[str, str] | None = None) -> list[str]:
    """The C compiler command: ``$CC`` (split like a shell word list), then ``cc``
    (:func:`wirestate.native.find_c_compiler`).

    Raises
    ------
    ExportError
        ``no_c_compiler`` when ``CC`` names no program or neither exists.
    """
    try:
        return find_c_compiler(environ)
    except NoCompilerError as exc:
        advice = (
            "set CC to a C compiler or use --sources-only to write the FMU without binaries"
            if (os.environ if environ is None else environ).get("CC", "").strip()
            else "install one, set CC, or use --sources-only to write the FMU without binaries"
        )
        raise ExportError("no_c_compiler", f"{exc}; {advice}", location=("CC",)) from None


def header_folder() -> Path:
    """The folder holding the FMI 2.0 headers (fmpy's ``c-code``).

    Raises
    ------
    ExportError
        ``no_fmi_headers`` when fmpy is missing or its folder lacks a header.
    """
    spec = importlib.util.find_spec("fmpy")
    if spec is not None and spec.origin is not None:
        folder = Path(spec.origin).parent / "c-code"
        if all((folder / name).is_file() for name in HEADER_NAMES):
            return folder
    raise ExportError(
        "no_fmi_headers",
        "the FMI 2.0 headers were not found in the fmpy package's c-code folder; "
        "reinstall wirestate with its dependencies (pip install fmpy)",
        location=("fmpy",),
    )


def runtime_source() -> str:
    """The text of the C runtime (the same for every model)."""
    return (resources.files("wirestate.export") / "templates" / RUNTIME_NAME).read_text("utf-8")


def shipped_headers() -> dict[str, bytes]:
    """The FMI 2.0 headers (each carrying its licence), as put into ``sources/``."""
    folder = header_folder()
    return {name: (folder / name).read_bytes() for name in HEADER_NAMES}


def compile_shared(identifier: str, model_header: str, compiler: list[str] | None = None) -> bytes:
    """Compile the runtime with ``model_header`` into a shared object; return its bytes.

    Raises
    ------
    ExportError
        ``no_c_compiler`` (see :func:`find_compiler`) or ``build_failed`` with the first
        line the compiler printed.
    """
    command = compiler or find_compiler()
    headers = header_folder()
    with tempfile.TemporaryDirectory(prefix="wirestate-fmu-") as work:
        folder = Path(work)
        (folder / RUNTIME_NAME).write_text(runtime_source(), encoding="utf-8")
        (folder / MODEL_HEADER_NAME).write_text(model_header, encoding="utf-8")
        target = folder / f"{identifier}.so"
        args = [*command, *CFLAGS, "-I", str(folder), "-I", str(headers),
                str(folder / RUNTIME_NAME), "-o", str(target), "-lm"]  # fmt: skip
        try:
            done = subprocess.run(args, capture_output=True, text=True, timeout=300)
        except OSError as exc:
            raise ExportError(
                "no_c_compiler", f"cannot run {command[0]}: {exc}", location=("CC",)
            ) from None
        if done.returncode != 0 or not target.is_file():
            message = (done.stderr or done.stdout).strip().splitlines()
            first = next(
                (line for line in message if "error" in line), message[0] if message else ""
            )
            raise ExportError(
                "build_failed",
                f"{command[0]} failed to build {identifier}.so: {first.strip()}",
                location=("binaries",),
            )
        return target.read_bytes()


def pack(members: dict[str, bytes]) -> bytes:
    """The FMU archive (deflated zip, forward slashes, fixed time stamps) in memory."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as archive:
        for name, data in members.items():
            info = zipfile.ZipInfo(name, ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = (0o755 if name.endswith(".so") else 0o644) << 16
            archive.writestr(info, data)
    return buffer.getvalue()
