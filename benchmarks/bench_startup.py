"""Start-up and end-to-end time of short commands, as a user waits for them.

Each command runs in a fresh interpreter (``python -m wirestate.cli ...``), its wall time
measured from outside, interleaved with the in-run reference: a fresh interpreter that only
imports numpy (the least any numerical command needs), timed as often. Commands:

* ``help``: ``wirestate --help`` (target 0.3 s);
* ``schema``: ``wirestate schema`` (no heavy import; no time target);
* ``inspect_small``: ``wirestate inspect models/drive_bus_filter.toml`` (target 0.8 s);
* ``inspect_ladder_2000``: ``inspect`` of a 1000-section (2000-state) ladder file (issue
  10.12: "about a second");
* ``tune_demo``: ``wirestate tune models/tuning/drive_bus_damping.toml`` (issue 11: 1.5 s);
* ``tune_system``: ``wirestate tune models/tuning/drive_bus_loop_damping.toml``, the same
  leg sized inside a composed system with a sampled PI loop (issue 11: 2 s). It exits 1
  (every limit met, a part above its rating), which counts as a finished run.

The targets are absolute seconds on the development machine (2 shared cores); ``ratio``
is against the numpy start-up, which tracks the machine's speed and load. ``details``
says whether Python could cache bytecode (``PYTHONDONTWRITEBYTECODE`` makes every run
compile wirestate's modules again, about 0.1 s).
"""

from __future__ import annotations

import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
REPEATS = 5


def _ladder_file(folder: Path) -> Path:
    from wirestate.spec.generate import ladder_data

    data = ladder_data(1000, resistance=0.05, inductance=1e-6, capacitance=1e-9)
    lines = ['[circuit]\nname = "ladder"\n']
    for name, part in data["parts"].items():
        lines.append(f"[parts.{name}]")
        lines.append(f'kind = "{part["kind"]}"')
        lines.append("nodes = [" + ", ".join(f'"{n}"' for n in part["nodes"]) + "]")
        if "value" in part:
            lines.append(f"value = {part['value']!r}")
        lines.append("")
    lines.append('[outputs.v_end]\nvoltage = "n1000"\n[outputs.i_in]\ncurrent = "L1"\n')
    path = folder / "ladder_1000.toml"
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


def _wall(argv: list[str], finished: tuple[int, ...] = (0,)) -> float:
    start = time.perf_counter()
    done = subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=ROOT)
    seconds = time.perf_counter() - start
    if done.returncode not in finished:
        raise RuntimeError(f"{' '.join(argv)} exited {done.returncode}: {done.stderr[-500:]!r}")
    return seconds


def run() -> list[dict]:
    python = sys.executable
    reference_argv = [python, "-c", "import numpy"]
    with tempfile.TemporaryDirectory() as folder:
        ladder = _ladder_file(Path(folder))
        commands = {
            "help": (["--help"], 0.3),
            "schema": (["schema"], None),
            "inspect_small": (["inspect", "models/drive_bus_filter.toml"], 0.8),
            "inspect_ladder_2000": (["inspect", str(ladder)], 1.0),
            "tune_demo": (["tune", "models/tuning/drive_bus_damping.toml"], 1.5),
            "tune_system": (["tune", "models/tuning/drive_bus_loop_damping.toml"], 2.0),
        }
        results = []
        for name, (args, target) in commands.items():
            argv = [python, "-m", "wirestate.cli", *args]
            # a tuning that meets every limit but finds a part above its rating exits 1
            finished = (0, 1) if args[0] == "tune" else (0,)
            _wall(argv, finished), _wall(reference_argv)  # warm: file caches, bytecode
            ours, ref = [], []
            for _ in range(REPEATS):  # interleaved so load changes hit both alike
                ours.append(_wall(argv, finished))
                ref.append(_wall(reference_argv))
            median, reference = statistics.median(ours), statistics.median(ref)
            results.append(
                {
                    "name": f"startup_{name}",
                    "median_s": median,
                    "reference_median_s": reference,
                    "ratio": median / reference,
                    "higher_is_better": False,
                    "target": None if target is None else f"<= {target} s end to end",
                    "meets_target": None if target is None else median <= target,
                    "details": {
                        "command": "wirestate " + " ".join(args),
                        "reference": "python -c 'import numpy' (fresh interpreter)",
                        "repeats_each": REPEATS,
                        "spread_s": [min(ours), max(ours)],
                        "bytecode_cached": not (
                            sys.flags.dont_write_bytecode
                            or os.environ.get("PYTHONDONTWRITEBYTECODE")
                        ),
                    },
                }
            )
    return results


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
