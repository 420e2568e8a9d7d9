"""``wirestate inspect MODEL``: states, inputs, outputs, modes and DC gains of a circuit."""

from __future__ import annotations

import argparse
import json
import sys


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("model", help="circuit model file (TOML)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead")
    parser.add_argument(
        "--plot",
        metavar="FILE",
        help="write a pole map and Bode plots (PNG or SVG, by suffix)",
    )
    parser.add_argument(
        "--pair",
        action="append",
        default=[],
        metavar="INPUT:OUTPUT",
        help="input->output pair for the Bode plot (repeatable; default: every pair, up to 6)",
    )


def run(args: argparse.Namespace) -> int:
    # imported here, not at module level: the CLI imports this module to configure the
    # parser, and `wirestate inspect --help` should not pay for numpy/scipy
    from wirestate.reduce import load_block
    from wirestate.report.tables import block_json, block_summary

    if args.plot:
        from wirestate.report.figure import figure_format

        figure_format(args.plot)  # a bad file name fails before any output
    block = load_block(args.model)
    pairs = [_pair(text, block) for text in args.pair] or None  # checked with or without --plot
    if args.json:
        json.dump(block_json(block), sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print(block_summary(block))
    if args.plot:
        from wirestate.report.inspect_plot import plot_inspect

        plot_inspect(block, args.plot, pairs=pairs)
        print(f"wrote {args.plot}", file=sys.stderr)
    return 0


def _pair(text: str, block) -> tuple[str, str]:
    from wirestate.errors import SimulationError

    source, _, output = text.partition(":")
    if source not in block.inputs or output not in block.outputs:
        raise SimulationError(
            "unknown_signal",
            f"--pair {text!r}: expected INPUT:OUTPUT with input in {block.inputs} and output "
            f"in {block.outputs}",
        )
    return source, output
