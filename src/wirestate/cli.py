"""Command line: parses arguments, calls the library, prints, sets the exit code.

Each sub-command lives in a module that provides ``configure(parser)`` and
``run(args) -> int``; this file only lists them. A user's mistake (any
:class:`~wirestate.errors.WirestateError`) prints one line ``error: <where>: <what>`` on
stderr and exits with status 2, never a traceback.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import sys
import warnings
from collections.abc import Sequence
from typing import NoReturn

from wirestate import __version__
from wirestate.errors import WirestateError, WirestateWarning

#: sub-command -> (module providing configure/run, one-line help)
COMMANDS: dict[str, tuple[str, str]] = {
    "inspect": ("wirestate.commands.inspect", "states, poles, modes and DC gains"),
    "schema": ("wirestate.commands.schema", "print the JSON Schema of a file format"),
    "simulate": ("wirestate.commands.simulate", "simulate a circuit or system file"),
    "tune": ("wirestate.commands.tune", "size damping parts in closed loop"),
    "yield": ("wirestate.commands.yield_", "tolerance Monte Carlo yield of a tuning's limits"),
    "sweep": ("wirestate.commands.sweep", "every limit's margin over a grid of part values"),
    "regress": ("wirestate.commands.regress", "compare responses with golden files"),
    "bench-compare": ("wirestate.commands.bench_compare", "compare benchmark results"),
    "export": ("wirestate.commands.export", "write an FMI 2.0 co-simulation FMU in native C"),
    "reduce": ("wirestate.commands.reduce", "balanced order reduction with an error bound"),
}

EXIT_USER_ERROR = 2


class _Parser(argparse.ArgumentParser):
    """argparse with a mistake in the arguments reported like every other user mistake:
    one line ``error: ...`` and status 2 (argparse itself prints its usage block first)."""

    def error(self, message: str) -> NoReturn:
        self.exit(EXIT_USER_ERROR, f"error: {self.prog}: {message} (see: {self.prog} --help)\n")


def build_parser(
    available: dict[str, object], selected: str | None = None
) -> argparse.ArgumentParser:
    """The argument parser; only the ``selected`` command's options are configured.

    ``available`` maps command names to their module, or to ``None`` when the module has
    not been imported: ``wirestate --help`` lists every command from ``COMMANDS`` without
    importing any of them (start-up time), and ``wirestate CMD ...`` imports only CMD.
    """
    parser = _Parser(
        prog="wirestate",
        description="Circuit model files as named state-space blocks: inspect, simulate, "
        "tune damping parts, keep responses under regression.",
    )
    parser.add_argument("--version", action="version", version=f"wirestate {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, module in available.items():
        _, help_text = COMMANDS[name]
        command_parser = sub.add_parser(name, help=help_text, description=help_text)
        if module is not None and (selected is None or name == selected):
            module.configure(command_parser)  # type: ignore[attr-defined]
    return parser


def _available_commands() -> dict[str, object]:
    """Command name -> ``None`` for every command whose module is part of this build.

    ``find_spec`` locates a module without running it, so listing the commands imports
    none of their (possibly heavy) dependencies.
    """
    available: dict[str, object] = {}
    for name, (module_name, _) in COMMANDS.items():
        if importlib.util.find_spec(module_name) is not None:
            available[name] = None
    return available


def _selected_command(argv: Sequence[str], available: dict[str, object]) -> str | None:
    # the top-level parser has only flags without values, so the first word that is not
    # an option is the command
    for word in argv:
        if word == "--":
            return None
        if not word.startswith("-"):
            return word if word in available else None
    return None


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    # a WirestateWarning is for the user: one line, like the errors, without source lines
    if issubclass(category, WirestateWarning):
        print(f"warning: {message}", file=sys.stderr)
    else:
        _default_show_warning(message, category, filename, lineno, file, line)


_default_show_warning = warnings.showwarning


def main(argv: Sequence[str] | None = None) -> int:
    warnings.showwarning = _show_warning
    words = list(sys.argv[1:] if argv is None else argv)
    available = _available_commands()
    selected = _selected_command(words, available)
    if selected is not None:
        available[selected] = importlib.import_module(COMMANDS[selected][0])
    parser = build_parser(available, selected)
    args = parser.parse_args(words)
    if args.command is None:
        parser.print_help()
        return EXIT_USER_ERROR
    try:
        return int(available[args.command].run(args) or 0)  # type: ignore[attr-defined]
    except WirestateError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        print("error: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
