"""``wirestate inspect FILE``: what a circuit, system or tuning file holds.

Circuits: states, inputs, outputs, modes and DC gains. Systems: blocks, their signals with
units, the wiring and the loop's poles. Tuning files: the model being tuned, the design
variables, limits and the loop's poles at the starting values
(:mod:`wirestate.report.describe`).
"""

from __future__ import annotations

import argparse
import json
import sys


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("model", help="circuit, system or tuning file (TOML)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead")
    parser.add_argument(
        "--plot",
        metavar="FILE",
        help="write a mode map and Bode plots (PNG or SVG, by suffix)",
    )
    parser.add_argument(
        "--pair",
        action="append",
        default=[],
        metavar="INPUT:OUTPUT",
        help="input->output pair for the Bode plot (repeatable; default: every pair, up to 6)",
    )
    parser.add_argument(
        "--sensitivity",
        action="store_true",
        help="also give the elasticities of every mode and DC gain (of a tuning file: of every "
        "limit's value) to every part value",
    )
    parser.add_argument(
        "--preferred",
        metavar="REPORT",
        help="with --sensitivity on a tuning file: take the elasticities at the preferred "
        "values recorded in REPORT (the --json report of wirestate tune)",
    )


def run(args: argparse.Namespace) -> int:
    # imported here, not at module level: the CLI imports this module to configure the
    # parser, and `wirestate inspect --help` should not pay for numpy/scipy
    from wirestate.report.describe import inspect_file

    if args.plot:
        from wirestate.report.figure import figure_format
        from wirestate.simulate.guards import check_output_path

        figure_format(args.plot)  # a bad file name fails before any output
        check_output_path(args.plot, "--plot", inputs=(args.model,))
    elif args.pair:
        from wirestate.errors import SimulationError

        raise SimulationError(
            "invalid_field", "--pair chooses the curves of the --plot figure; give --plot too"
        )
    if args.preferred and not args.sensitivity:
        from wirestate.errors import SimulationError

        raise SimulationError(
            "invalid_field",
            "--preferred chooses where --sensitivity takes the elasticities; give "
            "--sensitivity too",
        )
    found = inspect_file(args.model)
    pairs = [_pair(text, found.linear) for text in args.pair] or None  # with or without --plot
    sensitivity = _sensitivity(found, args.model, args.preferred) if args.sensitivity else None
    if args.json:
        data = dict(found.data)
        if sensitivity is not None:
            from wirestate.report.sensitivity_table import (
                limit_sensitivity_json,
                sensitivity_json,
            )

            tuning = found.data.get("kind") == "tuning"
            data.update((limit_sensitivity_json if tuning else sensitivity_json)(sensitivity))
        json.dump(data, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print(found.summary)
        if sensitivity is not None:
            from wirestate.report.sensitivity_table import (
                limit_sensitivity_text,
                sensitivity_text,
            )

            tuning = found.data.get("kind") == "tuning"
            print()
            print((limit_sensitivity_text if tuning else sensitivity_text)(sensitivity))
    if args.plot:
        from wirestate.report.inspect_plot import plot_inspection

        plot_inspection(found, args.plot, pairs=pairs)
        print(f"wrote {args.plot}", file=sys.stderr)
    return 0


def _pair(text: str, block) -> tuple[str, str]:
    from wirestate.errors import SimulationError

    source, _, output = text.partition(":")
    if block is None:
        raise SimulationError(
            "unknown_signal", f"--pair {text!r}: this loop has no frequency response to draw"
        )
    if source not in block.inputs or output not in block.outputs:
        raise SimulationError(
            "unknown_signal",
            f"--pair {text!r}: expected INPUT:OUTPUT with input in {block.inputs} and output "
            f"in {block.outputs}",
        )
    return source, output


def _sensitivity(found, path: str, report: str | None):
    from wirestate.errors import ModelFileError, WirestateError
    from wirestate.sensitivity import circuit_sensitivities

    if found.data.get("kind") == "tuning":
        from wirestate.tune import load_tuning
        from wirestate.tune.sensitivity import tuning_file_sensitivities

        try:
            return tuning_file_sensitivities(load_tuning(path), file=path, report=report)
        except WirestateError as exc:
            raise exc.with_file(path) from None
    if report:
        raise ModelFileError(
            "wrong_file_kind",
            "--preferred: preferred values are recorded for tuning files; this is a "
            f"{found.data.get('kind')} file",
            file=path,
        )
    spec = getattr(found.linear, "spec", None)
    if found.data.get("kind") != "circuit" or spec is None:
        raise ModelFileError(
            "wrong_file_kind",
            "--sensitivity: elasticities are given for circuit and tuning files; inspect "
            "the circuit file of this model",
            file=path,
        )
    try:
        return circuit_sensitivities(spec)
    except WirestateError as exc:
        raise exc.with_file(path) from None
