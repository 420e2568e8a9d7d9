"""``wirestate export MODEL --fmu OUT``: an FMI 2.0 co-simulation unit in native C."""

from __future__ import annotations

import argparse

from wirestate.errors import SimulationError
from wirestate.export import DEFAULT_STEP, export_fmu
from wirestate.units import format_count, format_quantity, parse_quantity

CAUTION = (
    "caution: models are idealised; verify ratings and thermal design on hardware; "
    "defer to local electrical codes and licensed practice."
)


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("model", help="circuit file ([circuit] table) or system file ([system])")
    parser.add_argument("--fmu", required=True, metavar="FILE", help="the .fmu file to write")
    parser.add_argument(
        "--step",
        default=None,
        help="default communication step, e.g. 1us (its hold matrices are computed at "
        "export; other steps in the FMU's C code); default 1us",
    )
    parser.add_argument(
        "--sources-only",
        action="store_true",
        help="write the FMU with its C sources but no binary (no C compiler needed)",
    )


def run(args: argparse.Namespace) -> int:
    from wirestate.commands.outputs import check_outputs

    check_outputs(fmu=args.fmu, inputs=(args.model,))  # before the compile and the C build
    step = DEFAULT_STEP
    if args.step is not None:
        step = parse_quantity(args.step, "s", field="step")
        if not step > 0:
            raise SimulationError(
                "invalid_step", f"step must be a positive time, got {args.step!r}"
            )
    result = export_fmu(args.model, args.fmu, step=step, sources_only=args.sources_only)
    plan = result.plan
    print(
        f"{plan.name}: {format_count(len(plan.inputs), 'input')}, "
        f"{format_count(len(plan.outputs), 'output')}, {len(plan.states)} continuous and "
        f"{format_count(len(plan.sampled_states), 'sampled state')}; "
        f"default step {format_quantity(plan.step, 's')}"
    )
    built = "binaries/linux64 and sources/" if result.has_binary else "sources/ only (no binary)"
    print(f"wrote {result.path} (FMI 2.0 co-simulation, {built}, GUID {result.guid})")
    print("note: part values are fixed at export; re-export after changing the model file.")
    print(CAUTION)
    return 0
