"""The symbolic compile: the replayed sparse elimination against CasADi's own solve.

The optimiser (SX), the sensitivities (MX) and the switched modes get their CasADi
matrices from the symbolic compile, which replays the numeric compile's pivots on CasADi
values (:func:`wirestate.reduce.symbolic_from_values`). The reference, computed in the same
run on the same stamped equations, is what the symbolic compile did before and still does
for dense solutions: ``casadi.solve`` (symbolic QR for SX; for MX the sparse ``"qr"`` node
the sensitivities used, far faster than the default ``"symbolicqr"``, which took 4 s to
build a 50-section ladder). A third comparison, for MX, is the same replay made on MX
scalars instead of SX wrapped in one function (the choice made).

For each circuit and kind, three figures, each as a ratio new / reference (below 1: the
replay is faster):

* ``build``: the symbolic compile plus one ``casadi.Function`` of ``A, B, C, D`` and one of
  their Jacobian with respect to every variable;
* ``evaluate``: one numeric call of that function;
* ``jacobian``: one numeric call of that Jacobian (what the sensitivities and the
  optimiser's derivatives cost).

Circuits: models/drive_bus_filter.toml (every part a variable), a 50-section ladder (6
variables, as a tuning run has, and every one of its 150 parts), and every mode of
models/aux_buck.toml (every part a variable). Run: ``python benchmarks/bench_symbolic.py``
(prints JSON) or through ``make bench``; all figures are warm.
"""

from __future__ import annotations

import dataclasses
import json
from itertools import product
from pathlib import Path

from bench_compile import _median_pair
from wirestate.equations import nominal_values, part_parameter
from wirestate.reduce import compile_circuit, symbolic_from_values, valued_parts
from wirestate.spec import load_circuit
from wirestate.spec.generate import ladder
from wirestate.switching import SwitchedCircuit
from wirestate.topology import analyse

MODELS = Path(__file__).resolve().parent.parent / "models"


def _compile(topology, values, variables, block, method, probes=()):
    """The symbolic compile by ``method``: ``"replay"`` (wirestate's), ``"solve"`` (the
    reference: CasADi's solve, sparse QR node ``"qr"`` for MX, as the sensitivities used)
    or ``"mx_replay"`` (the replay made on MX scalars, the alternative to wrapping SX)."""
    import casadi

    from wirestate.equations import Backend, assemble
    from wirestate.reduce import symbolic_from_equations

    if method == "mx_replay":
        eq = assemble(topology, {**values, **variables}, Backend(sqrt=casadi.sqrt), probes)
        return symbolic_from_equations(eq, block, mx=True)
    used = block if method == "replay" else dataclasses.replace(block, elimination_order=None)
    return symbolic_from_values(
        topology, values, variables, used, probes=probes, linear_solver="qr"
    )


def _cases():
    """(name, builder(variables, method) -> SymbolicStateSpace, part values)."""
    chain = ladder(50, resistance=0.05, inductance=1e-6, capacitance=1e-9)
    for name, spec, count in (
        ("drive_bus_filter", load_circuit(MODELS / "drive_bus_filter.toml"), None),
        ("ladder_50_six_parts", chain, 6),
        ("ladder_50_every_part", chain, None),
    ):
        topology, block = analyse(spec), compile_circuit(spec)
        names = valued_parts(spec)[:count]

        def build(variables, method, topology=topology, block=block):
            return _compile(topology, nominal_values(topology), variables, block, method)

        yield name, build, _values(spec, names)
    spec = load_circuit(MODELS / "aux_buck.toml")
    circuit = SwitchedCircuit(spec)
    for on in product((False, True), repeat=len(circuit.devices)):
        block = circuit._compile(on)

        def build(variables, method, on=on, block=block):
            values = circuit.values(on)
            return _compile(circuit.topology, values, variables, block, method, circuit.probes)

        label = circuit.describe(on).replace(", ", "_").replace(" ", "_")
        yield f"aux_buck_{label}", build, _values(spec, valued_parts(spec))


def _values(spec, names):
    return {n: float(getattr(spec.parts[n], part_parameter(spec.parts[n].kind))) for n in names}


def _functions(kind, build, values, method):
    """The function of ``A, B, C, D`` and the function of its Jacobian."""
    import casadi

    symbols = {n: kind.sym(n) for n in values}
    ss = build(symbols, method)
    matrices = casadi.vertcat(*(casadi.vec(m) for m in (ss.A, ss.B, ss.C, ss.D)))
    inputs = list(symbols.values())
    plain = casadi.Function("abcd", inputs, [matrices])
    jacobian = casadi.Function(
        "abcd_jacobian", inputs, [casadi.jacobian(matrices, casadi.vertcat(*inputs))]
    )
    return plain, jacobian


def _figures(kind, build, values, method, reference):
    """Medians (``method``, ``reference``) of build, evaluate and jacobian, interleaved."""
    point = list(values.values())

    def timed_build(how):
        def once():
            _functions(kind, build, values, how)

        return once

    ours = _functions(kind, build, values, method)
    theirs = _functions(kind, build, values, reference)
    return {
        "build": _median_pair(timed_build(method), timed_build(reference), 5),
        "evaluate": _median_pair(lambda: ours[0](*point), lambda: theirs[0](*point), 7),
        "jacobian": _median_pair(lambda: ours[1](*point), lambda: theirs[1](*point), 7),
    }, {
        "instructions": ours[0].n_instructions(),
        "instructions_reference": theirs[0].n_instructions(),
    }


def run() -> list[dict]:
    import casadi

    results = []
    comparisons = (
        (casadi.SX, "replay", "solve", "casadi.solve (symbolic QR) on the same equations"),
        (casadi.MX, "replay", "solve", "casadi.solve ('qr' node) on the same equations"),
        (casadi.MX, "replay", "mx_replay", "the same replay made on MX scalars"),
    )
    for name, build, values in _cases():
        for kind, method, reference, described in comparisons:
            figures, sizes = _figures(kind, build, values, method, reference)
            suffix = kind.__name__ + ("_vs_mx_replay" if reference == "mx_replay" else "")
            for what, (median, ref) in figures.items():
                results.append(
                    {
                        "name": f"symbolic_{what}_{name}_{suffix}",
                        "median_s": median,
                        "reference_median_s": ref,
                        "ratio": median / ref,
                        "higher_is_better": False,
                        "target": "no slower than the reference",
                        "meets_target": median <= ref,
                        "details": {"variables": len(values), "reference": described, **sizes},
                    }
                )
    return results


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
