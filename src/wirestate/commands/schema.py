"""``wirestate schema [FORMAT]``: the JSON Schema of a file format."""

from __future__ import annotations

import argparse
import importlib

from wirestate.spec import CircuitSpec, json_schema

#: format -> (module, class); formats whose module is absent are not offered
FORMATS = {
    "circuit": ("wirestate.spec.circuit", "CircuitSpec"),
    "system": ("wirestate.spec.system", "SystemSpec"),
    "tuning": ("wirestate.spec.tuning", "TuningSpec"),
    "state_space": ("wirestate.spec.state_space", "StateSpaceSpec"),
}


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "format",
        nargs="?",
        default="circuit",
        choices=sorted(FORMATS),
        help="which file format (default: circuit)",
    )


def run(args: argparse.Namespace) -> int:
    model = CircuitSpec
    if args.format != "circuit":
        module_name, class_name = FORMATS[args.format]
        model = getattr(importlib.import_module(module_name), class_name)
    print(json_schema(model))
    return 0
