"""``wirestate simulate MODEL``: run a circuit or a system file, write CSV and a plot."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from wirestate.errors import SimulationError, WirestateError
from wirestate.units import format_count, format_quantity, parse_quantity

#: runs with more steps than this report progress on stderr
PROGRESS_STEPS = 100_000

CAUTION = (
    "caution: models are idealised; verify ratings and thermal design on hardware; "
    "defer to local electrical codes and licensed practice."
)


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "model",
        help="circuit file ([circuit] table), system file ([system]) or state-space file "
        "([state_space])",
    )
    parser.add_argument("--until", required=True, help="horizon, e.g. 20ms")
    parser.add_argument("--step", required=True, help="output step, e.g. 1us")
    parser.add_argument(
        "--input",
        action="append",
        default=[],
        metavar="NAME=WAVEFORM",
        help="drive an input, e.g. Vs=step:48V,at=1ms, Vs=ramp:48V,end=5ms, "
        "Vs=sinusoid:10V,50Hz,mean=48V, Vs=points:0s=0V,1ms=48V, Vs=csv:drive.csv, "
        "Q1=pwm:100kHz,duty=0.42 (repeatable); sources with a 'value' "
        "default are driven by it otherwise",
    )
    parser.add_argument(
        "--initial",
        choices=("parts", "steady_state", "zero"),
        default="parts",
        help="start from the parts' 'initial' fields (default, zero elsewhere), from zero, "
        "or from the steady state at the inputs' values at t = 0",
    )
    parser.add_argument(
        "--initial-value",
        action="append",
        default=[],
        metavar="STATE=VALUE",
        help="set one state at t = 0 on top of --initial, e.g. v_Cf=42V or bus.v_Cbus=48V "
        "(repeatable; a shifted state by its physical name too)",
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
    parser.add_argument(
        "--fine-step",
        metavar="TIME",
        help="switched circuits: also record every TIME after each switching event, "
        "e.g. 1ns (with --fine-window)",
    )
    parser.add_argument(
        "--fine-window", metavar="TIME", help="how long after each event --fine-step applies"
    )
    parser.add_argument(
        "--averaged",
        action="store_true",
        help="switched circuits with pwm gates: the state-space average (no ripple; "
        "continuous conduction)",
    )
    parser.add_argument("--rtol", type=float, default=1e-8, help="CVODES relative tolerance")
    parser.add_argument("--atol", type=float, default=1e-10, help="CVODES absolute tolerance")


def _progress(fraction: float) -> None:
    print(f"progress: {100 * fraction:5.1f} %", file=sys.stderr, flush=True)


def run(args: argparse.Namespace) -> int:
    # imported here, not at module level: the CLI imports this module to configure the
    # parser, and `wirestate simulate --help` should not pay for control/scipy
    from wirestate.compose import is_system_file, system_from_spec
    from wirestate.lti import block_from_state_space
    from wirestate.reduce import compile_circuit
    from wirestate.simulate import simulate
    from wirestate.simulate.inputs import parse_assignment
    from wirestate.spec import parse_circuit
    from wirestate.spec.load import read_toml
    from wirestate.spec.state_space import is_state_space_file, parse_state_space
    from wirestate.spec.system import parse_system

    path = Path(args.model)
    until = _time(args.until, "until")
    step = _time(args.step, "step")
    assignments = _unique(
        [parse_assignment(text) for text in args.input], "--input", "NAME=WAVEFORM", path
    )
    _check_before_work(args, list(assignments.values()))
    data = read_toml(path)
    if is_system_file(data):
        model = system_from_spec(parse_system(data, file=str(path)), file=path)
        options = {"rtol": args.rtol, "atol": args.atol} if not model.is_linear else {}
    elif is_state_space_file(data):
        model = block_from_state_space(parse_state_space(data, file=str(path)), file=path)
        options = {}
    else:
        circuit = parse_circuit(data, file=str(path))
        try:
            model = compile_circuit(circuit)
        except WirestateError as exc:
            # the compiler knows parts, not files: name the file as every other error does
            raise exc.with_file(str(path)) from None
        options = {}
    options.update(_switched_options(args))
    if args.initial != "parts" or args.initial_value:
        model = _start(model, args, assignments, path)
    steps = until / step
    progress = _progress if steps > PROGRESS_STEPS else None
    if args.csv and not args.plot and _streams(model, until, step):
        return _run_streamed(model, until, step, assignments, args, progress, path)
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
    extra = len(result.time) - 1 - round(until / step)
    more = f" and {format_count(extra, 'fine sample')} after events" if extra > 0 else ""
    print(f"{result.name}: {format_count(round(until / step), 'step')} of "
          f"{format_quantity(step, 's')}{more} "
          f"to {format_quantity(until, 's')}; {result.method}")  # fmt: skip
    if result.events:
        last = result.events[-1]
        print(f"  {len(result.events)} switching events; the last: {last.part} {last.change} "
              f"at {format_quantity(last.time, 's')}")  # fmt: skip
    rows = [(row[-1], row.min(), row.max()) for row in result.outputs]
    sizes = _term_sizes(model, result, step) if args.hold == "zoh" else None
    _print_summary(result.output_names, result.units, rows, sizes)
    if args.csv:
        written = result.write_csv(args.csv)
        print(f"wrote {written}")
    if args.plot:
        from wirestate.report.simulation_plot import plot_simulation

        written = plot_simulation(result, args.plot)
        print(f"wrote {written}")
    print(CAUTION)
    return 0


def _start(model, args: argparse.Namespace, assignments: dict, path: Path):
    """The model starting where ``--initial`` and ``--initial-value`` say."""
    from wirestate.simulate.initial import start_from

    pairs = []
    for text in args.initial_value:
        name, sep, value = text.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise SimulationError(
                "invalid_field",
                f"--initial-value: expected STATE=VALUE such as v_Cf=42V, got {text!r}",
                file=str(path),
            )
        pairs.append((name.strip(), value.strip()))
    values = _unique(pairs, "--initial-value", "STATE=VALUE", path)
    try:
        start = start_from(model, args.initial, values, assignments, base=Path.cwd())
    except SimulationError as exc:
        raise exc.with_file(str(path)) from None
    for note in start.notes:
        print(f"note: {note}")
    return start.model


def _unique(pairs: list[tuple[str, str]], option: str, form: str, path: Path) -> dict[str, str]:
    """``NAME=VALUE`` options as a mapping; one name given twice is refused rather than
    letting the last one win unseen."""
    values: dict[str, str] = {}
    for name, value in pairs:
        if name in values and values[name] != value:
            raise SimulationError(
                "invalid_field",
                f"{option} {name} is given twice ({values[name]!r} and {value!r}); give each "
                f"{form} once",
                file=str(path),
            )
        values[name] = value
    return values


def _check_before_work(args: argparse.Namespace, waveforms: list[str]) -> None:
    # every check that needs no model runs before the model is read or any step taken
    from wirestate.commands.outputs import check_outputs
    from wirestate.simulate.guards import check_tolerances
    from wirestate.simulate.inputs import input_files

    check_tolerances({"rtol": args.rtol, "atol": args.atol})
    # the run reads the model and any csv: waveform; no output may replace them
    inputs = (args.model, *input_files(waveforms, Path.cwd()))
    check_outputs(csv=args.csv, plot=args.plot, figures=("plot",), inputs=inputs)


def _streams(model, until: float, step: float) -> bool:
    """True for an LTI run too large for memory: it is streamed to the CSV instead."""
    from wirestate.simulate import guards
    from wirestate.switching import switched_circuit

    linear = (not hasattr(model, "is_linear") or model.is_linear) and switched_circuit(
        model
    ) is None
    n = guards.step_count(until, step)
    return linear and guards.run_bytes(n + 1, *guards.signal_counts(model)) > (
        guards.memory_budget()
    )


def _run_streamed(model, until, step, assignments, args, progress, path) -> int:
    from wirestate.simulate.streaming import stream_linear_to_csv

    try:
        summary = stream_linear_to_csv(
            model, until, step, args.csv, assignments, hold=args.hold, base=Path.cwd(),
            progress=progress,
        )  # fmt: skip
    except SimulationError as exc:
        raise exc.with_file(str(path)) if exc.file is None else exc from None
    print(f"{summary.name}: {format_count(summary.samples - 1, 'step')} of "
          f"{format_quantity(step, 's')} "
          f"to {format_quantity(until, 's')}; {summary.method}")  # fmt: skip
    rows = list(zip(summary.final, summary.minimum, summary.maximum, strict=True))
    _print_summary(summary.output_names, summary.units, rows)
    print(f"wrote {args.csv}")
    print(CAUTION)
    return 0


def _print_summary(names: list[str], units: dict[str, str], rows: list[tuple], sizes=None) -> None:
    from wirestate.units import zero_round_off

    # a value far below the largest the output reached in the run, or below the terms it
    # was summed from (``sizes``), is round-off: show 0
    rows = [
        zero_round_off(
            row, max([abs(float(v)) for v in row] + [sizes[i] if sizes is not None else 0])
        )
        for i, row in enumerate(rows)
    ]
    width = max([len(n) for n in names] + [6])
    print(f"  {'output':<{width}}  {'final':>14}  {'min':>14}  {'max':>14}")
    for name, values in zip(names, rows, strict=True):
        unit = units.get(name, "")
        cells = [format_quantity(float(v), unit) for v in values]
        print(f"  {name:<{width}}  {cells[0]:>14}  {cells[1]:>14}  {cells[2]:>14}")


def _term_sizes(model, result, step: float):
    """Per output, the largest size over an LTI run of the terms its samples were summed
    from, ``|C| (|Ad| |x| + |Bd| |u|) + |D| |u|`` with the run's exact zero-order hold
    (a componentwise bound of the kind used in rounding-error analysis, Higham, Accuracy
    and Stability of Numerical Algorithms, 2nd ed., ch. 3); ``None`` where the run is not
    one LTI model (switched circuits, sampled controllers) or too large to bound cheaply.

    An output that stays at zero while its terms do not (an inductor current behind a
    capacitor at a steady 48 V) carries their round-off, -1e-13 A, which the output's own
    largest value cannot tell from a signal.
    """
    import numpy as np

    from wirestate.lti import LARGE_BLOCK_STATES
    from wirestate.simulate.discretize import zoh
    from wirestate.simulate.linear import as_linear_model

    if result.events or getattr(result, "modes", None) or result.inputs is None:
        return None
    try:
        linear = as_linear_model(model)
    except Exception:  # noqa: BLE001 - not an LTI model: keep the plain rule
        return None
    x, u = np.abs(result.states), np.abs(result.inputs)
    n = linear.A.shape[0]
    shapes = (x.shape[0], u.shape[0], len(result.outputs))
    if n > LARGE_BLOCK_STATES or shapes != (n, linear.B.shape[1], linear.C.shape[0]):
        return None
    hold = zoh(linear.A, linear.B, step) if n else None
    terms = x.copy()
    if n and x.shape[1] > 1:
        terms[:, 1:] = np.abs(hold[0]) @ x[:, :-1] + np.abs(hold[1]) @ u[:, :-1]
    sizes = np.abs(linear.C) @ terms + np.abs(linear.D) @ u
    return sizes.max(axis=1) if sizes.shape[1] else None


def _switched_options(args: argparse.Namespace) -> dict:
    """``fine_step``/``fine_window``/``averaged`` for the switched engine, when given."""
    options: dict = {}
    if args.fine_step or args.fine_window:
        if not (args.fine_step and args.fine_window):
            raise SimulationError(
                "invalid_step",
                "--fine-step and --fine-window go together",
                location=("--fine-step",),
            )
        options["fine_step"] = _time(args.fine_step, "fine-step")
        options["fine_window"] = _time(args.fine_window, "fine-window")
    if args.averaged:
        options["averaged"] = True
    return options


def _time(text: str, field: str) -> float:
    value = parse_quantity(text, "s", field=field)
    if not value > 0:
        raise SimulationError("invalid_step", f"{field} must be a positive time, got {text!r}")
    return value
