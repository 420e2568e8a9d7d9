"""Elasticities of every limit's value at a design, to every part value of the circuit.

A limit's value is what :mod:`wirestate.tune.margins` measures against its bound: the
largest sample of a maximum, the least of a minimum, the largest overshoot or settling
deviation, the peak current, the energy, the peak impedance over the band, the least
damping ratio or the largest real part of the loop's poles. Its elasticity to a part value
``p`` is ``d ln(value) / d ln p`` (:func:`wirestate.sensitivity.elasticities`).

Every derivative is CasADi's automatic differentiation through the tuning case's own
symbolic loop: :meth:`wirestate.tune.problem.Problem.parametric` with *every* part that has
a value as a parameter (design variables, the other resistors, capacitors and inductors,
couplings and controlled-source gains), so the part values that are not design variables
are parameters of the same compiled function, and the rows are those of
:func:`wirestate.tune.limits.ranges`, the optimiser's and the verification's own. All
limits go into one ``casadi.Function``, differentiated by one Jacobian evaluation.

A maximum or minimum over samples (or frequencies, or poles) is not differentiable where
the extreme moves from one sample to another. As for any such quantity, the derivative
given is that of the *active* sample (the one that attains the extreme at the design),
held fixed; each limit says which. When another sample attains the same value (within
:data:`TIE_TOLERANCE`) with different derivatives, the value has a kink there and the
limit gets a note. Pole limits are differentiated through the first-order eigenvalue of
the active mode (Wilkinson's ``w^H dA v``, :func:`wirestate.sensitivity.first_order_eigenvalue`);
a repeated pole has no derivative and gets a note instead.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.reduce import valued_parts
from wirestate.sensitivity import (
    Quantity,
    Sensitivities,
    elasticities,
    first_order_eigenvalue,
    modes_of,
)
from wirestate.spec.tuning import Limit
from wirestate.tune import limits as measures
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.margins import limit_bound, limit_unit, value_from_excess
from wirestate.tune.parametric import part_nominal_value, resolve_states

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

#: two samples (frequencies, poles) whose values differ by less than this times the size of
#: the value (or of the bound) attain the extreme together (round-off of a few hundred
#: operations in the loop's exponential and stepping; common practice, no source)
TIE_TOLERANCE = 1e-9
#: at most this many other tied samples are differentiated to tell a kink from a flat top
TIED_CHECKED = 3
#: tied samples whose elasticities differ by more than this (absolute, per unit of the
#: largest) make a kink (well above the AD round-off, 1e-12; common practice, no source)
KINK_TOLERANCE = 1e-6
#: an elasticity below this (relative to its row's largest, or 1) is round-off of a part
#: that has no effect: the value's own round-off over the part's (common practice, no
#: source; the display threshold of :mod:`wirestate.report.sensitivity_table`)
NO_EFFECT = 1e-6
#: limit kinds whose value is a row of :func:`wirestate.tune.limits.ranges` at one sample
#: (or the whole horizon), measured as :func:`wirestate.tune.margins.value_from_excess` does
SAMPLED_KINDS = (*measures.PATH_KINDS, "energy")
#: the tuning report lists at most this many parts per limit
REPORTED_PARTS = 3


@dataclass
class LimitSensitivities(Sensitivities):
    """Elasticities of every limit's value (one :class:`~wirestate.sensitivity.Quantity`
    per limit, ``kind = "limit"``) to every part value.

    Attributes
    ----------
    at
        Where they were taken: ``"the preferred values of the tuning"`` or ``"the
        circuit file's values"``.
    kinds
        Limit name -> limit kind.
    active
        Limit name -> the sample, frequency or mode that attains its value
        (``"t = 2.31 ms"``, ``"f = 1.2 kHz"``, ``"mode v_Cf/i_Lf"``, ``"the horizon"``).
    """

    at: str = ""
    kinds: dict[str, str] = field(default_factory=dict)
    active: dict[str, str] = field(default_factory=dict)

    def most_sensitive(self, count: int = REPORTED_PARTS) -> dict[str, list[dict[str, Any]]]:
        """Limit name -> its ``count`` parts of largest ``|elasticity|`` (``part``,
        ``elasticity``), largest first; parts with no effect (below
        :data:`NO_EFFECT` of the row's largest, or of 1) are left out, limits without
        elasticities get an empty list."""
        out: dict[str, list[dict[str, Any]]] = {}
        for q in self.quantities:
            row = q.elasticity or {}
            floor = NO_EFFECT * max([1.0, *(abs(v) for v in row.values())])
            ranked = sorted(
                ((part, value) for part, value in row.items() if abs(value) > floor),
                key=lambda item: -abs(item[1]),
            )
            out[q.name] = [{"part": p, "elasticity": float(v)} for p, v in ranked[:count]]
        return out

    def limit_values(self) -> dict[str, dict[str, Any]]:
        """Limit name -> ``kind``, ``value`` (SI; ``None`` when not finite), ``unit``,
        ``active``, ``note``."""
        return {
            q.name: {
                "kind": self.kinds[q.name],
                "value": q.value if math.isfinite(q.value) else None,
                "unit": q.unit,
                "active": self.active.get(q.name, ""),
                "note": q.note,
            }
            for q in self.quantities
        }


def sensitivity_parts(problem: Problem) -> list[str]:
    """Every part of the tuned circuit with a value (resistors, inductors, capacitors,
    couplings, controlled-source gains...), in file order."""
    return valued_parts(problem.base_circuit)


def limit_sensitivities(
    problem: Problem,
    values: Mapping[str, float],
    start: Evaluation,
    *,
    at: str,
) -> LimitSensitivities:
    """Elasticities of every limit's value at ``values`` to every part value.

    Parameters
    ----------
    problem
        The tuning case.
    values
        Part values (SI) of the design, at least every design variable; other parts take
        their values from the circuit file.
    start
        The numeric evaluation at the starting values, which fixes the direction of a
        step and the scaling of each limit exactly as the margins do
        (:func:`wirestate.tune.margins.margin_table`).
    at
        Where the design comes from, for the reader (``"the preferred values of the
        tuning"``).

    Returns
    -------
    LimitSensitivities
        One quantity per limit: its value at the design (SI, in the limit's unit) and its
        elasticity to every part (``None`` with a note where none exists).
    """
    import casadi

    parts = sensitivity_parts(problem)
    point = {n: float(values.get(n, part_nominal_value(problem, n))) for n in parts}
    # the box is the design itself: the exponential's squarings suit these values
    loop = problem.parametric(parts, {n: (point[n], point[n]) for n in parts})
    ev = loop.evaluate(loop.rows([point]))
    symbols = {n: casadi.MX.sym(n) for n in parts}
    # the states as a placeholder, replaced by the samples the limits read only
    sev = loop.symbolic(symbols, deferred=True)
    found: list[_Found] = []
    for limit in problem.spec.limits:
        if limit.kind in measures.POLE_KINDS:
            found.append(_pole_limit(limit, problem, ev, sev))
        elif limit.kind == "output_impedance":
            found.append(_impedance_limit(limit, problem, ev, sev))
        elif limit.kind in SAMPLED_KINDS:
            found.append(_path_limit(limit, problem, ev, sev, start))
        else:
            note = f"no elasticities are computed for {limit.kind} limits"
            found.append(_Found(limit, math.nan, None, "", note=note))
    outputs: dict[str, Any] = {}
    for item in found:
        if item.expression is not None:
            outputs[item.limit.label] = item.expression
            for i, (_, expression) in enumerate(item.tied):
                outputs[f"{item.limit.label}#tied{i}"] = expression
    table: dict[str, dict[str, float | None]] = {}
    if outputs:
        expressions = resolve_states(list(outputs.values()), [sev])
        function = casadi.Function(
            "limit_values", list(symbols.values()), expressions, parts, list(outputs)
        )
        table = elasticities(function, point, by_rows=True)
    quantities = [_quantity(item, problem, table) for item in found]
    return LimitSensitivities(
        block=problem.spec.name,
        parts=parts,
        values=point,
        quantities=quantities,
        notes=[
            "a maximum or minimum over samples, frequencies or poles is differentiated at "
            "the sample that attains it (held fixed); each limit names it",
        ],
        at=at,
        kinds={item.limit.label: item.limit.kind for item in found},
        active={item.limit.label: item.active for item in found},
    )


@dataclass
class _Found:
    """One limit: its numeric value, the expression with that value and its derivatives,
    the active sample, the other tied samples (description, expression) and a note."""

    limit: Limit
    value: float
    expression: Any
    active: str
    tied: list[tuple[str, Any]] = field(default_factory=list)
    note: str = ""


def _quantity(item: _Found, problem: Problem, table: dict[str, Any]) -> Quantity:
    label = item.limit.label
    unit = limit_unit(problem, item.limit)
    note = item.note
    row = table.get(label)
    if item.expression is None or row is None:
        return Quantity(label, "limit", item.value, unit, None, note)
    if any(v is None for v in row.values()):
        note = note or "zero at this design, or beyond double precision: no elasticity"
        return Quantity(label, "limit", item.value, unit, None, note)
    kinks = []
    scale = max([1.0, *(abs(v) for v in row.values())])
    for i, (where, _) in enumerate(item.tied):
        other = table.get(f"{label}#tied{i}") or {}
        gap = max((abs((other.get(p) or 0.0) - v) for p, v in row.items()), default=0.0)
        if gap > KINK_TOLERANCE * scale:
            kinks.append(where)
    if item.tied and not kinks:
        note = (
            f"the extreme is attained at {item.active} and also at "
            f"{', '.join(where for where, _ in item.tied)} (a flat stretch) with the same "
            "derivatives: the elasticities hold for each"
        )
    if kinks:
        note = (
            f"the extreme is attained at {item.active} and also at {', '.join(kinks)} with "
            "other derivatives: a kink, where the value changes at different rates for an "
            f"increase and a decrease of a part; the elasticities shown are at {item.active}"
        )
    return Quantity(label, "limit", item.value, unit, dict(row), note)  # type: ignore[arg-type]


def _path_limit(
    limit: Limit, problem: Problem, ev: Evaluation, sev: Evaluation, start: Evaluation
) -> _Found:
    """A limit on samples (maximum, minimum, overshoot, settling, peak current) or the
    energy: the active row of :func:`wirestate.tune.limits.ranges`."""
    samples = measures.limit_samples(limit, problem)
    excess, positions, sides = [], [], []  # every row's excess, its sample, its side
    for index, (e, lower, upper) in enumerate(measures.ranges(limit, problem, ev, start)):
        e = np.atleast_1d(np.asarray(e, dtype=float)[0])
        for side, bound in (("upper", upper), ("lower", lower)):
            if bound is not None:
                excess.append(e - bound if side == "upper" else bound - e)
                positions.append(np.arange(e.size))
                sides += [(index, side)] * e.size
    size = np.concatenate(excess)
    position = np.concatenate(positions)
    worst = float(np.max(size))
    value = float(value_from_excess(limit, worst))
    if not math.isfinite(value):
        return _Found(limit, value, None, "", note="not finite at this design: no elasticity")

    def expression(position: int, side: tuple[int, str]) -> Any:
        positions = None if samples is None else [position]
        triples = measures.ranges(limit, problem, sev, start, positions)
        e, lower, upper = triples[side[0]]
        excess = e[0] - upper if side[1] == "upper" else lower - e[0]
        return value_from_excess(limit, excess)

    def where(position: int) -> str:
        if samples is None:
            return "the horizon"
        return f"t = {_show(problem.times[samples[position]], 's')}"

    order = np.argsort(-size, kind="stable")
    first = int(order[0])
    tolerance = TIE_TOLERANCE * max(abs(value), abs(limit_bound(limit)), 1e-300)
    tied = [
        (where(int(position[i])), expression(int(position[i]), sides[i]))
        for i in order[1 : TIED_CHECKED + 1]
        if worst - size[i] <= tolerance
    ]
    return _Found(limit, value, expression(int(position[first]), sides[first]),
                  where(int(position[first])), tied)  # fmt: skip


def _impedance_limit(limit: Limit, problem: Problem, ev: Evaluation, sev: Evaluation) -> _Found:
    """The peak of ``|Z|`` on the verification's fine grid, at its active frequency."""
    grid = measures.frequency_grid(limit, 4)
    with np.errstate(all="ignore"):
        size = np.asarray(measures.impedance_magnitude(ev, problem, limit, grid))[0]
    order = np.argsort(-size, kind="stable")
    value = float(size[order[0]])
    if not math.isfinite(value):
        return _Found(limit, value, None, "", note="not finite at this design: no elasticity")

    def at(k: int) -> tuple[str, Any]:
        expression = measures.impedance_magnitude(sev, problem, limit, grid[[k]])[0]
        return f"f = {_show(grid[k] / (2 * math.pi), 'Hz')}", expression

    tolerance = TIE_TOLERANCE * max(value, abs(limit_bound(limit)), 1e-300)
    tied = [at(int(k)) for k in order[1:] if value - size[k] <= tolerance][:TIED_CHECKED]
    where, expression = at(int(order[0]))
    return _Found(limit, value, expression, where, tied)


def _pole_limit(limit: Limit, problem: Problem, ev: Evaluation, sev: Evaluation) -> _Found:
    """The least damping ratio or largest real part over the loop's poles, through the
    first-order eigenvalue of the active mode (one mode per conjugate pair)."""
    import casadi

    matrix = np.asarray(ev.Phi if problem.sampled else ev.A, dtype=float)[0]
    names = list(problem.states)
    if len(names) != matrix.shape[0]:
        names = [f"x{i + 1}" for i in range(matrix.shape[0])]
    modes = [m for m in modes_of(matrix, names) if not (problem.sampled and m.at_origin)]
    symbolic = sev.Phi if problem.sampled else sev.A
    T = problem.step

    def measure(re: Any, im: Any) -> Any:
        """The limit's quantity of one pole from its real and imaginary parts (``z`` of
        the loop over one period for a sampled loop, ``s = ln(z) / T``)."""
        if problem.sampled:
            re, im = 0.5 * np.log(re * re + im * im) / T, np.arctan2(im, re) / T
        if limit.kind == "pole_real_part":
            return re
        size = np.sqrt(re * re + im * im)
        return -re / size

    def symbolic_measure(re: Any, im: Any) -> Any:
        if problem.sampled:
            re, im = 0.5 * casadi.log(re * re + im * im) / T, casadi.atan2(im, re) / T
        if limit.kind == "pole_real_part":
            return re
        return -re / casadi.sqrt(re * re + im * im)

    values = []
    for mode in modes:
        lam = mode.eigenvalue
        if not problem.sampled and lam == 0:
            # the definition the verification uses: a pole at the origin has damping 1
            values.append(0.0 if limit.kind == "pole_real_part" else 1.0)
        else:
            values.append(float(measure(lam.real, lam.imag)))
    if not values:
        return _Found(limit, math.nan, None, "", note="the loop has no poles")
    sign = 1.0 if limit.kind == "pole_real_part" else -1.0  # largest real part, least damping
    order = sorted(range(len(modes)), key=lambda i: -sign * values[i])
    active = modes[order[0]]
    value = values[order[0]]
    where = f"mode {active.name}"
    if active.repeated:
        note = (
            f"the active pole ({where}) is repeated: an eigenvalue derivative does not exist "
            "there, so no elasticity"
        )
        return _Found(limit, value, None, where, note=note)
    tolerance = TIE_TOLERANCE * max(abs(value), abs(limit_bound(limit)), 1e-300)
    tied = []
    for i in order[1 : TIED_CHECKED + 1]:
        if abs(values[i] - value) <= tolerance and not modes[i].repeated:
            re, im = first_order_eigenvalue(symbolic, modes[i])
            tied.append((f"mode {modes[i].name}", symbolic_measure(re, im)))
    re, im = first_order_eigenvalue(symbolic, active)
    return _Found(limit, value, symbolic_measure(re, im), where, tied)


def _show(value: float, unit: str) -> str:
    from wirestate.units import format_quantity

    return format_quantity(float(value), unit)


#: where ``wirestate inspect TUNING_FILE --sensitivity`` takes the elasticities
FILE_VALUES = (
    "the circuit file's part values (a tuning file records no tuning result; for the "
    "preferred values, see the most sensitive parts in the report of wirestate tune)"
)


def tuning_file_sensitivities(
    spec: Any, *, file: str | None = None, report: str | None = None
) -> LimitSensitivities:
    """Elasticities of every limit of a tuning file, for ``wirestate inspect TUNING_FILE
    --sensitivity [--preferred REPORT]``.

    Taken at the preferred values of the design variables recorded in ``report`` (the
    ``--json`` report of ``wirestate tune``, see :func:`preferred_from_report`) when one
    is given, else at the circuit file's part values (design variables included); every
    other part at the circuit file's value. The direction of a step and the scaling of
    each limit are fixed at the design variables' starting values, as in ``wirestate
    tune``.
    """
    from wirestate.tune.problem import Problem

    problem = Problem(spec, file=file)
    start = problem.evaluate([problem.start_values()])
    if report is None:
        return limit_sensitivities(problem, {}, start, at=FILE_VALUES)
    values = preferred_from_report(report, problem)
    return limit_sensitivities(
        problem, values, start, at=f"the preferred values recorded in {report}"
    )


def preferred_from_report(path: str, problem: Problem) -> dict[str, float]:
    """The preferred value of every design variable from a ``wirestate tune --json``
    report of this tuning (SI units).

    Raises
    ------
    TuningError
        ``file_not_found`` (unreadable), ``wrong_file_kind`` (not such a report),
        ``invalid_field`` (a report of another tuning, or without a finite, positive
        preferred value for a variable: a tuning that failed records none),
        ``unknown_variable`` (a design variable the report does not size).
    """
    import json
    from pathlib import Path

    from wirestate.errors import TuningError

    def refuse(code: str, message: str, *location: str) -> TuningError:
        return TuningError(code, f"--preferred: {message}", file=str(path), location=location)

    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise refuse(
            "file_not_found", f"cannot read the report ({exc.__class__.__name__})"
        ) from None
    except (ValueError, RecursionError):
        raise refuse("wrong_file_kind", "not a JSON report of wirestate tune --json") from None
    variables = data.get("variables") if isinstance(data, dict) else None
    if not isinstance(variables, dict):
        raise refuse("wrong_file_kind", "no 'variables' table: not a report of wirestate tune")
    if data.get("name") != problem.spec.name:
        raise refuse(
            "invalid_field",
            f"the report is of tuning {data.get('name')!r}, not {problem.spec.name!r}",
            "name",
        )
    values = {}
    for name in problem.variables:
        entry = variables.get(name)
        if not isinstance(entry, dict):
            raise refuse("unknown_variable", f"the report sizes no {name!r}", "variables", name)
        value = entry.get("preferred")
        good = isinstance(value, int | float) and not isinstance(value, bool)
        if not good or not math.isfinite(value) or value <= 0:
            raise refuse(
                "invalid_field",
                f"no positive preferred value of {name} (got {value!r}; a tuning that "
                "did not reach preferred values records none)",
                "variables",
                name,
                "preferred",
            )
        values[name] = float(value)
    return values
