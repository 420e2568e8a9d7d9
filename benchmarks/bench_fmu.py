"""Benchmark: per-step cost of an exported FMU's ``fmi2DoStep`` on a 4-state block.

The block is the bundled DC-bus filter with its averaged drive
(``models/tuning/drive_bus.toml``: 4 states, 4 inputs, 3 outputs), exported at a 1 us
step. One run measures, side by side:

* ``fmu_dostep_c``: ``fmi2DoStep`` called from C by ``benchmarks/fmu_harness.c`` (built
  here with ``$CC``, then ``cc``). Reference: a bare ``x <- Ad x + Bd u`` loop of the same
  sizes in the same harness (the matrix-vector limit). Target: at most 0.2 us per step
  (``meets_target``); ``ratio`` = doStep / bare loop.
* ``fmu_dostep_fmpy``: the same ``doStep`` called from Python through fmpy's ctypes
  wrapper; ``ratio`` against the C figure (the cost of calling from Python).
* ``stepper_step_vs_fmu``: wirestate's ``Stepper.step`` on the same block and step;
  ``ratio`` against the C figure.

Figures are the median of the repeats (each repeat a loop of many calls). Without a C
compiler the module returns one entry that says so (``skipped``), with no figures. Run:
``python benchmarks/bench_fmu.py`` (prints JSON).
"""

from __future__ import annotations

import json
import os
import shutil
import statistics
import subprocess
import tempfile
import time
import zipfile
from pathlib import Path

import numpy as np

from wirestate.errors import WirestateError
from wirestate.export import export_fmu, load_model
from wirestate.export.build import find_compiler, header_folder

ROOT = Path(__file__).resolve().parents[1]
HERE = Path(__file__).resolve().parent
MODEL = ROOT / "models" / "tuning" / "drive_bus.toml"
STEP = 1e-6
#: target of the issue: at most 0.2 us per doStep called from C
TARGET_S = 0.2e-6
C_CALLS, PY_CALLS, REPEATS = 1_000_000, 20_000, 7


def _build_harness(folder: Path) -> Path:
    compiler = find_compiler()
    headers = header_folder()
    binary = folder / "fmu_harness"
    subprocess.run(
        [*compiler, "-std=c99", "-O2", f"-I{headers}", str(HERE / "fmu_harness.c"),
         "-o", str(binary), "-ldl"],
        check=True, capture_output=True, text=True,
    )  # fmt: skip
    return binary


def _median_per_call(fn, calls: int, repeats: int) -> list[float]:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn(calls)
        times.append((time.perf_counter() - t0) / calls)
    return times


def _skipped(reason: str) -> list[dict]:
    return [
        {
            "name": "fmu_dostep_c",
            "median_s": None,
            "reference_median_s": None,
            "ratio": None,
            "target": None,
            "meets_target": None,
            "skipped": reason,
            "details": {"reason": reason},
        }
    ]


def run() -> list[dict]:
    try:
        find_compiler()
    except WirestateError as exc:
        return _skipped(f"no C compiler: {exc.message}")
    from fmpy import read_model_description
    from fmpy.fmi2 import FMU2Slave

    from wirestate.simulate import Stepper

    block, _ = load_model(MODEL)
    nx, nu, ny = len(block.states), len(block.inputs), len(block.outputs)
    u = 1.0 + 0.5 * np.arange(nu)  # the harness's inputs
    with tempfile.TemporaryDirectory(prefix="wirestate-bench-fmu-") as work:
        folder = Path(work)
        fmu = export_fmu(MODEL, folder / "drive_bus.fmu", step=STEP)
        with zipfile.ZipFile(fmu.path) as archive:
            archive.extractall(folder / "unpacked")
        library = folder / "unpacked" / "binaries" / "linux64" / f"{block.name}.so"
        harness = _build_harness(folder)
        done = subprocess.run(
            [str(harness), str(library), fmu.guid, str(nx), str(nu), str(ny), repr(STEP),
             str(C_CALLS), str(REPEATS)],
            check=True, capture_output=True, text=True,
        )  # fmt: skip
        from_c = json.loads(done.stdout)

        md = read_model_description(str(fmu.path))
        slave = FMU2Slave(guid=md.guid, unzipDirectory=str(folder / "unpacked"),
                          modelIdentifier=block.name, instanceName="bench")  # fmt: skip
        slave.instantiate()
        slave.setupExperiment(startTime=0.0)
        slave.enterInitializationMode()
        slave.exitInitializationMode()
        slave.setReal(list(range(nu)), list(u))
        clock = {"t": 0.0}

        def fmpy_steps(calls: int) -> None:
            step, t = slave.doStep, clock["t"]
            for _ in range(calls):
                step(t, STEP)
                t += STEP
            clock["t"] = t

        stepper = Stepper(block, STEP)

        def stepper_steps(calls: int) -> None:
            step = stepper.step
            for _ in range(calls):
                step(u)

        fmpy_t, stepper_t = [], []
        for _ in range(REPEATS):  # interleaved, so a change of load hits both alike
            fmpy_t += _median_per_call(fmpy_steps, PY_CALLS, 1)
            stepper_t += _median_per_call(stepper_steps, PY_CALLS, 1)
        # the FMU and the stepper reach the same state (same matrices, same inputs)
        fmu_states = slave.getReal(list(range(nu + ny, nu + ny + nx)))
        slave.terminate()
        slave.freeInstance()
    c_step = statistics.median(from_c["dostep"])
    bare = statistics.median(from_c["bare"])
    master = statistics.median(from_c["master_step"])
    fmpy_step, stepper_step = statistics.median(fmpy_t), statistics.median(stepper_t)
    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    agree = float(np.max(np.abs(np.asarray(fmu_states) - stepper.state))
                  / max(np.max(np.abs(stepper.state)), 1e-300))  # fmt: skip
    common = {"block": block.name, "states": nx, "inputs": nu, "outputs": ny, "step_s": STEP,
              "repeats": REPEATS, "load_average_1_5_15_min": load}  # fmt: skip
    return [
        {
            "name": "fmu_dostep_c",
            "median_s": c_step,
            "reference_median_s": bare,
            "ratio": c_step / bare,
            "higher_is_better": False,
            "target": TARGET_S / bare,
            "meets_target": c_step <= TARGET_S,
            "details": {**common, "calls": C_CALLS, "per_step_us": c_step * 1e6,
                        "target_us": TARGET_S * 1e6, "bare_matvec_us": bare * 1e6,
                        "set_dostep_get_us": master * 1e6,
                        "repeats_us": [v * 1e6 for v in from_c["dostep"]],
                        "compiler": " ".join(find_compiler()),
                        "reference": "bare x <- Ad x + Bd u loop of the same sizes, in C"},
        },
        {
            "name": "fmu_dostep_fmpy",
            "median_s": fmpy_step,
            "reference_median_s": c_step,
            "ratio": fmpy_step / c_step,
            "higher_is_better": False,
            "target": None,
            "meets_target": None,
            "details": {**common, "calls": PY_CALLS, "per_step_us": fmpy_step * 1e6,
                        "fmpy": __import__("fmpy").__version__,
                        "reference": "fmi2DoStep called from C (same run)"},
        },
        {
            "name": "stepper_step_vs_fmu",
            "median_s": stepper_step,
            "reference_median_s": c_step,
            "ratio": stepper_step / c_step,
            "higher_is_better": False,
            "target": None,
            "meets_target": None,
            "details": {**common, "calls": PY_CALLS, "per_step_us": stepper_step * 1e6,
                        "fmu_vs_stepper_state_relative_difference": agree,
                        "note": "Stepper.step also returns the outputs y = C x + D u",
                        "reference": "fmi2DoStep called from C (same run)"},
        },
    ]  # fmt: skip


if __name__ == "__main__":
    if shutil.which("cc") is None and not os.environ.get("CC"):
        print("note: no cc on the PATH and CC unset; the benchmark reports itself skipped")
    print(json.dumps(run(), indent=2))
