"""``wirestate reduce MODEL``: a smaller block with a certified H-infinity error bound."""

from __future__ import annotations

import argparse

#: discarded Hankel singular values listed one by one before the rest is summed up
LISTED_DISCARDED = 8


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("model", help="circuit file or state-space file (TOML)")
    size = parser.add_mutually_exclusive_group(required=True)
    size.add_argument("--order", type=int, help="states of the reduced block")
    size.add_argument(
        "--error",
        type=float,
        metavar="RELATIVE",
        help="largest H-infinity error bound relative to the full block's H-infinity "
        "norm, e.g. 1e-3: the smallest order that meets it",
    )
    parser.add_argument(
        "--match-dc",
        action="store_true",
        help="singular-perturbation approximation: the same bound, DC gain kept exactly",
    )
    parser.add_argument(
        "--gramians",
        choices=("auto", "dense", "low-rank"),
        default="auto",
        help="dense up to 400 states, low-rank ADI above (auto, the default)",
    )
    parser.add_argument("--out", required=True, metavar="FILE", help="state-space file to write")


def run(args: argparse.Namespace) -> int:
    from wirestate.atomic import write_atomic
    from wirestate.balanced import METHOD_TEXT, reduce_block, reduction_spec
    from wirestate.errors import WirestateError
    from wirestate.reduce import load_block
    from wirestate.simulate.guards import check_output_path
    from wirestate.spec.state_space import dumps_state_space

    # a reduced file may replace an earlier one, never its source or another model
    check_output_path(args.out, "--out", inputs=(args.model,), replaceable=("state_space",))
    block = load_block(args.model)
    _refuse_switched(block, args.model)
    try:
        result = reduce_block(
            block,
            order=args.order,
            error=args.error,
            match_dc=args.match_dc,
            gramians=args.gramians.replace("-", "_"),
        )
    except WirestateError as exc:
        raise exc.with_file(args.model) from None
    reduced = result.block
    print(
        f"{block.name}: {block.n_states} -> {reduced.n_states} states by "
        f"{METHOD_TEXT[result.method]}; {result.gramians.replace('_', '-')} Gramians"
    )
    print(_hsv_table(result))
    print(
        f"H-infinity error bound (2 x sum of the discarded values): {result.error_bound:.6g}, "
        f"{result.relative_error_bound:.3g} of the full block's H-infinity norm "
        f"{result.reference_norm:.6g}"
    )
    print(
        "  (the norm of the stable part, a lower bound found by a frequency sweep refined at "
        "its peaks, so the relative figure errs high)"
    )
    print(f"measured peak error on the same sweep: {result.measured_error:.6g}")
    for note in result.notes:
        print(f"note: {note}")
    spec = reduction_spec(result, args.model, args.out)
    comment = (
        f"written by wirestate reduce from {spec.reduction.source.file}; the matrices and the "
        "bound belong together:\nreduce the source again rather than editing them"
    )
    try:
        write_atomic(args.out, dumps_state_space(spec, comment=comment))
    except OSError as exc:
        raise WirestateError(
            "unwritable_output", f"--out: cannot write: {exc.strerror or exc}", file=args.out
        ) from None
    print(f"wrote {args.out}")
    return 0


def _refuse_switched(block, model: str) -> None:
    """A switched circuit compiles to the block of one mode (every device off); its
    reduction would describe that mode only, and the bound nothing about the switching."""
    from wirestate.errors import WirestateError
    from wirestate.export.plan import switching_parts

    parts = switching_parts(block)
    if parts:
        raise WirestateError(
            "not_reducible",
            f"{block.name} has switches or diodes ({', '.join(parts)}); a reduced block would "
            "hold only the mode with every device off, and its error bound would say nothing "
            "about the switching circuit: reduce the linear part of the circuit instead",
            file=model,
            location=("parts", parts[0].split(" ")[0]),
        )


def _hsv_table(result) -> str:
    s = result.hankel_singular_values
    k = result.kept
    lines = ["Hankel singular values of the stable part (largest first):"]
    lines.append(f"  {'#':>4}  {'value':>12}  {'':<9}")
    shown = list(range(min(s.size, k + LISTED_DISCARDED)))
    for i in shown:
        lines.append(f"  {i + 1:>4}  {s[i]:>12.6g}  {'kept' if i < k else 'discarded'}")
    rest = s[len(shown) :]
    if rest.size:
        lines.append(f"  ... {rest.size} more discarded, summing to {rest.sum():.6g}")
    if result.kept_poles.size:
        lines.append(f"  and {result.kept_poles.size} mode(s) kept exactly (see the note)")
    return "\n".join(lines)
