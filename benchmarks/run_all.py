"""Run every benchmark in this directory and write one JSON result file.

Usage::

    python benchmarks/run_all.py --out benchmarks/results/latest.json [--only NAME ...]

Every ``benchmarks/bench_*.py`` module provides ``run() -> list[dict]``; each dict holds
``name``, ``median_s``, ``reference_median_s``, ``ratio``, ``target``, ``meets_target``,
``details`` and, optionally, ``higher_is_better`` (see ``wirestate bench-compare``). Ratios
are against a reference computed in the same run, so a busy machine does not mislead.

The output (format ``wirestate-benchmarks``, version 1) holds a machine description, every
result (with the module it came from) and every module that failed, with its error. Any
failure makes the exit status 1; the file is still written (atomically).
"""

from __future__ import annotations

import argparse
import datetime as dt
import importlib.util
import json
import math
import os
import platform
import sys
import time
import traceback
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
#: BLAS/OpenMP thread variables pinned before numpy loads (see --threads)
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
REQUIRED_KEYS = ("name", "median_s", "reference_median_s", "ratio", "target", "meets_target")
FORMAT, VERSION = "wirestate-benchmarks", 1


def machine_description() -> dict[str, Any]:
    """Platform, Python, library versions, CPU count and (cheaply) the BLAS in use."""
    info: dict[str, Any] = {
        "platform": platform.platform(),
        "machine": platform.machine(),
        "processor": platform.processor() or None,
        "python": platform.python_version(),
        "python_implementation": platform.python_implementation(),
        "cpu_count": os.cpu_count(),
    }
    if hasattr(os, "sched_getaffinity"):
        info["cpus_available"] = len(os.sched_getaffinity(0))
    versions = {}
    for module in ("numpy", "scipy", "control", "casadi", "wirestate"):
        try:
            versions[module] = getattr(__import__(module), "__version__", None)
        except ImportError:
            versions[module] = None
    info["versions"] = versions
    info["blas"] = _blas_info()
    for variable in THREAD_VARIABLES:
        if variable in os.environ:
            info.setdefault("thread_environment", {})[variable] = os.environ[variable]
    return info


def _blas_info() -> dict[str, Any] | None:
    try:
        import numpy as np

        config = np.show_config(mode="dicts")  # numpy >= 1.25
    except Exception:  # noqa: BLE001 - optional information only
        return None
    deps = (config or {}).get("Build Dependencies", {})
    out = {}
    for key in ("blas", "lapack"):
        entry = deps.get(key) or {}
        out[key] = {k: entry.get(k) for k in ("name", "version") if entry.get(k) is not None}
    return out


def discover(only: list[str] | None = None) -> list[Path]:
    """The ``bench_*.py`` modules beside this file (sorted), optionally filtered by name."""
    paths = sorted(HERE.glob("bench_*.py"))
    if only:
        wanted = {name.removesuffix(".py") for name in only}
        paths = [p for p in paths if p.stem in wanted or p.stem.removeprefix("bench_") in wanted]
    return paths


def _import(path: Path) -> Any:
    if str(HERE) not in sys.path:
        sys.path.insert(0, str(HERE))  # benchmark modules may share helpers here
    spec = importlib.util.spec_from_file_location(f"wirestate_benchmarks.{path.stem}", path)
    module = importlib.util.module_from_spec(spec)
    assert spec.loader is not None
    spec.loader.exec_module(module)
    return module


def _json_ready(value: Any) -> Any:
    # JSON has no inf/nan; numpy scalars and arrays become plain numbers and lists
    if isinstance(value, dict):
        return {str(k): _json_ready(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(v) for v in value]
    if hasattr(value, "tolist") and not isinstance(value, str):
        return _json_ready(value.tolist())
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, bool | int | float | str) or value is None:
        return value
    return str(value)


def run_module(path: Path) -> tuple[list[dict[str, Any]], dict[str, Any] | None]:
    """Import and run one benchmark module: ``(results, failure or None)``."""
    start = time.perf_counter()
    try:
        results = _import(path).run()
        if not isinstance(results, list) or not all(isinstance(r, dict) for r in results):
            raise TypeError("run() must return a list of dicts")
        for entry in results:
            missing = [key for key in REQUIRED_KEYS if key not in entry]
            if missing:
                raise KeyError(f"result {entry.get('name')!r} lacks {', '.join(missing)}")
    except Exception as exc:  # noqa: BLE001 - a failing benchmark is recorded, not fatal
        return [], {
            "module": path.stem,
            "error": f"{type(exc).__name__}: {exc}",
            "traceback": traceback.format_exc(),
            "seconds": time.perf_counter() - start,
        }
    return [{**_json_ready(r), "module": path.stem} for r in results], None


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--out", required=True, type=Path, metavar="PATH", help="JSON file to write"
    )
    parser.add_argument(
        "--only", nargs="+", metavar="NAME", help="run only these modules (bench_x or x)"
    )
    parser.add_argument(
        "--threads",
        default="1",
        metavar="N",
        help="BLAS/OpenMP threads (default 1: a small matrix product on a shared CI runner "
        "swings by an order of magnitude with threading, which would drown the ratios; "
        "'keep' leaves the environment alone)",
    )
    args = parser.parse_args(argv)
    if args.threads != "keep":
        if "numpy" in sys.modules:
            # too late to pin the BLAS pool: say so rather than record a wrong setting
            print("bench: numpy already loaded; --threads has no effect", file=sys.stderr)
        else:
            for variable in THREAD_VARIABLES:
                os.environ[variable] = str(args.threads)

    started = dt.datetime.now(dt.UTC)
    document: dict[str, Any] = {
        "format": FORMAT,
        "version": VERSION,
        "created_utc": started.isoformat(timespec="seconds"),
        "command": "python benchmarks/run_all.py "
        + " ".join(sys.argv[1:] if argv is None else argv),
        "machine": machine_description(),
        "results": [],
        "failures": [],
    }
    paths = discover(args.only)
    if not paths:
        document["failures"].append({"module": None, "error": "no benchmark modules found"})
    for path in paths:
        print(f"bench: {path.stem} ...", file=sys.stderr, flush=True)
        t0 = time.perf_counter()
        results, failure = run_module(path)
        document["results"] += results
        if failure:
            document["failures"].append(failure)
            print(f"bench: {path.stem} FAILED: {failure['error']}", file=sys.stderr)
        for entry in results:
            meets = entry.get("meets_target")
            verdict = (
                "no target"
                if meets is None
                else f"{'meets' if meets else 'misses'} target {entry.get('target')}"
            )
            ratio = entry.get("ratio")
            shown = f"{ratio:.4g}" if isinstance(ratio, int | float) else str(ratio)
            print(f"  {entry['name']}: ratio {shown} ({verdict})", file=sys.stderr)
        print(f"bench: {path.stem} done in {time.perf_counter() - t0:.1f} s", file=sys.stderr)
    document["seconds"] = (dt.datetime.now(dt.UTC) - started).total_seconds()

    from wirestate.atomic import write_atomic

    write_atomic(
        args.out, json.dumps(document, indent=1, allow_nan=False) + "\n", make_parents=True
    )
    print(
        f"wrote {args.out}: {len(document['results'])} result(s), "
        f"{len(document['failures'])} failure(s)"
    )
    return 1 if document["failures"] else 0


if __name__ == "__main__":
    sys.exit(main())
