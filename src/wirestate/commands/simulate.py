"""``wirestate simulate MODEL``: run a circuit or a system file, write CSV and a plot."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from wirestate.compose import is_system_file, system_from_spec
from wirestate.errors import SimulationError
from wirestate.reduce import compile_circuit
from wirestate.simulate import simulate
from wirestate.simulate.inputs import parse_assignment
from wirestate.spec import parse_circuit
from wirestate.spec.load import read_toml
from wirestate.spec.system import parse_system
from wirestate.units import format_quantity, parse_quantity

#: runs with more steps than this report progress on stderr
PROGRESS_STEPS = 100_000

CAUTION = (
    "caution: models are idealised; verify ratings and thermal design on hardware; "
    "defer to local electrical codes and licensed practice."
)


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("model", help="circuit file ([circuit] table) or system file ([system])")
    parser.add_argument("--until", required=True, help="horizon, e.g. 20ms")
    parser.add_argument("--step", required=True, help="output step, e.g. 1us")
    parser.add_argument(
        "--input",
        action="append",
        default=[],
        metavar="NAME=WAVEFORM",
        help="drive an input, e.g. Vs=step:48V,at=1ms, Vs=ramp:48V,end=5ms, "
        "Vs=sinusoid:10V,50Hz,mean=48V, Vs=points:0s=0V,1ms=48V, Vs=csv:drive.csv "
        "(repeatable); sources with a 'value' "
        "default are driven by it otherwise",
    )
    parser.add_argument("--csv", metavar="FILE", help="write time and every output (SI units)")
    parser.add_argument("--plot", metavar="FILE", help="draw the outputs to a PNG file")
    parser.add_argument(
        "--hold",
        choices=("zoh", "foh"),
        default="zoh",
        help=(
            "input hold for LTI models: zero-order (default) or first-order; systems "
            "with sampled or nonlinear blocks take zoh only"
        ),
    )
    parser.add_argument("--rtol", type=float, default=1e-8, help="CVODES relative tolerance")
    parser.add_argument("--atol", type=float, default=1e-10, help="CVODES absolute tolerance")


def _progress(fraction: float) -> None:
    print(f"progress: {100 * fraction:5.1f} %", file=sys.stderr, flush=True)


def run(args: argparse.Namespace) -> int:
    path = Path(args.model)
    data = read_toml(path)
    until = _time(args.until, "until")
    step = _time(args.step, "step")
    assignments = dict(parse_assignment(text) for text in args.input)
    if is_system_file(data):
        model = system_from_spec(parse_system(data, file=str(path)), file=path)
        options = {"rtol": args.rtol, "atol": args.atol} if not model.is_linear else {}
    else:
        model = compile_circuit(parse_circuit(data, file=str(path)))
        options = {}
    steps = until / step
    progress = _progress if steps > PROGRESS_STEPS else None
    try:
        result = simulate(
            model,
            until,
            step,
            assignments,
            hold=args.hold,
            base=Path.cwd(),
            progress=progress,
            **options,
        )
    except SimulationError as exc:
        raise exc.with_file(str(path)) from None
    print(f"{result.name}: {len(result.time) - 1} steps of {format_quantity(step, 's')} "
          f"to {format_quantity(until, 's')}; {result.method}")  # fmt: skip
    width = max([len(n) for n in result.output_names] + [6])
    print(f"  {'output':<{width}}  {'final':>14}  {'min':>14}  {'max':>14}")
    for name, row in zip(result.output_names, result.outputs, strict=True):
        unit = result.units.get(name, "")
        cells = [format_quantity(float(v), unit) for v in (row[-1], row.min(), row.max())]
        print(f"  {name:<{width}}  {cells[0]:>14}  {cells[1]:>14}  {cells[2]:>14}")
    if args.csv:
        written = result.write_csv(args.csv)
        print(f"wrote {written}")
    if args.plot:
        from wirestate.report.simulation_plot import plot_simulation

        written = plot_simulation(result, args.plot)
        print(f"wrote {written}")
    print(CAUTION)
    return 0


def _time(text: str, field: str) -> float:
    value = parse_quantity(text, "s", field=field)
    if not value > 0:
        raise SimulationError("invalid_step", f"{field} must be a positive time, got {text!r}")
    return value
