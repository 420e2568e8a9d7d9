"""Design sweeps: every limit's margin over a grid of one or two part values, and the
region where every limit holds."""

from __future__ import annotations

import io
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.explore.cluster import ClusterInfo, evaluate_batches
from wirestate.explore.evaluate import KIND_UNITS, MarginEvaluator
from wirestate.explore.parts import check_part, part_value, resolve_values
from wirestate.explore.sampling import CHUNK_SAMPLES
from wirestate.spec.tuning import TuningSpec
from wirestate.tune import CAUTIONS
from wirestate.tune.problem import Problem

#: at most this many points per axis (a 2-D sweep of 200 x 200 = 40 000 evaluations)
MAX_POINTS = 200

GridText = Mapping[str, tuple[str | float, str | float, int]]


@dataclass
class SweepResult:
    """Outcome of :func:`sweep`. ``margins[..., j]`` is limit ``j``'s margin at each grid
    point (axis order as :attr:`axes`), ``feasible`` where every limit holds."""

    name: str
    axes: list[dict[str, Any]]
    limits: list[dict[str, Any]]
    margins: np.ndarray
    relative: np.ndarray
    feasible: np.ndarray
    fixed: dict[str, float]
    cluster: ClusterInfo
    values_source: str = ""
    notes: list[str] = field(default_factory=list)
    cautions: tuple[str, ...] = CAUTIONS

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready: axes with their values, per limit the margin grid (nested lists,
        first index along the first axis; null where the circuit has no solution)."""
        return {
            "name": self.name,
            "axes": [dict(a) for a in self.axes],
            "limits": [dict(x) for x in self.limits],
            "margins": {
                lim["name"]: _nested(self.margins[..., j]) for j, lim in enumerate(self.limits)
            },
            "feasible": self.feasible.tolist(),
            "feasible_points": int(self.feasible.sum()),
            "points": int(self.feasible.size),
            "fixed_values": dict(self.fixed),
            "values_source": self.values_source,
            "cluster": self.cluster.to_dict(),
            "notes": list(self.notes),
            "cautions": list(self.cautions),
        }

    def to_csv(self) -> str:
        """One row per grid point: the part values, every limit's margin, feasible (0/1)."""
        names = [a["part"] for a in self.axes]
        header = names + [lim["name"] for lim in self.limits] + ["feasible"]
        out = io.StringIO()
        out.write(",".join(header) + "\n")
        grids = np.meshgrid(*[np.asarray(a["values"]) for a in self.axes], indexing="ij")
        flat_margins = self.margins.reshape(-1, len(self.limits))
        for k, point in enumerate(zip(*[g.ravel() for g in grids], strict=True)):
            cells = [repr(float(v)) for v in point]
            cells += ["" if np.isnan(m) else repr(float(m)) for m in flat_margins[k]]
            cells.append("1" if self.feasible.ravel()[k] else "0")
            out.write(",".join(cells) + "\n")
        return out.getvalue()


def _nested(a: np.ndarray) -> Any:
    return (
        [None if np.isnan(v) else float(v) for v in a] if a.ndim == 1 else [_nested(r) for r in a]
    )


def parse_grid(text: str) -> dict[str, tuple[str, str, int]]:
    """``"Rd=50mohm:2ohm:25,Cd=47uF:1mF:25"`` -> ``{"Rd": ("50mohm", "2ohm", 25), ...}``."""
    out: dict[str, tuple[str, str, int]] = {}
    for item in (s.strip() for s in text.split(",")):
        if not item:
            continue
        name, sep, rest = item.partition("=")
        fields = rest.split(":")
        if not sep or len(fields) != 3 or not name.strip():
            raise WirestateError(
                "invalid_grid",
                f"a grid axis is PART=LOW:HIGH:POINTS (e.g. Rd=50mohm:2ohm:25), got {item!r}",
                location=("grid",),
            )
        try:
            points = int(fields[2])
        except ValueError:
            raise WirestateError(
                "invalid_grid",
                f"{name.strip()}: the number of points must be a whole number, got {fields[2]!r}",
                location=("grid", name.strip()),
            ) from None
        if name.strip() in out:  # the last would replace the first: one axis taken for two
            raise WirestateError(
                "invalid_grid",
                f"{name.strip()} appears twice in --grid",
                location=("grid", name.strip()),
            )
        out[name.strip()] = (fields[0].strip(), fields[1].strip(), points)
    return out


def grid_axes(model: Problem, grid: GridText, log: bool) -> list[dict[str, Any]]:
    """Checked axes: part, kind, unit, scale and the values (SI) of each grid axis."""
    if not 1 <= len(grid) <= 2:
        raise WirestateError(
            "invalid_grid",
            f"a sweep takes one or two parts, got {len(grid)}",
            file=model.file,
            location=("grid",),
        )
    axes = []
    for name, (low_text, high_text, points) in grid.items():
        part = check_part(model, name, "grid")
        low = part_value(model, name, low_text, "grid")
        high = part_value(model, name, high_text, "grid")
        if not (2 <= points <= MAX_POINTS) or not high > low:
            raise WirestateError(
                "invalid_grid",
                f"{name}: a grid axis needs LOW < HIGH and 2 to {MAX_POINTS} points, got "
                f"{low_text}:{high_text}:{points}",
                file=model.file,
                location=("grid", name),
            )
        values = np.geomspace(low, high, points) if log else np.linspace(low, high, points)
        axes.append({"part": name, "kind": part.kind, "unit": KIND_UNITS[part.kind],
                     "scale": "log" if log else "linear", "values": values.tolist()})  # fmt: skip
    return axes


def sweep(
    spec: TuningSpec,
    grid: GridText,
    *,
    log: bool = False,
    values: Mapping[str, str | float] | None = None,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    file: str | None = None,
    values_source: str = "",
) -> SweepResult:
    """Every limit's margin over a grid of one or two part values.

    Parameters
    ----------
    spec
        A tuning specification (:func:`wirestate.tune.load_tuning`).
    grid
        ``part -> (low, high, points)``; values as texts with units or numbers in SI.
    log
        Logarithmic spacing (``numpy.geomspace``) instead of linear.
    values
        Values of other parts instead of the circuit file's (texts or SI numbers).
    scheduler, workers, progress
        See :func:`wirestate.explore.cluster.evaluate_batches`.
    """
    model = Problem(spec, file=file)
    fixed = resolve_values(model, values)
    axes = grid_axes(model, grid, log)
    names = [a["part"] for a in axes]
    ranges = {a["part"]: (a["values"][0], a["values"][-1]) for a in axes}
    evaluator = MarginEvaluator(model, names, ranges, fixed=fixed)
    mesh = np.meshgrid(*[np.asarray(a["values"]) for a in axes], indexing="ij")
    points = np.column_stack([m.ravel() for m in mesh])
    batches = [points[i : i + CHUNK_SAMPLES] for i in range(0, len(points), CHUNK_SAMPLES)]
    margins, info = evaluate_batches(
        evaluator, batches, scheduler=scheduler, workers=workers, progress=progress
    )
    shape = (*mesh[0].shape, len(evaluator.limits))
    feasible = margins.met.all(axis=1).reshape(mesh[0].shape)
    notes = [
        "feasible: every limit holds at the grid point (margins as in the tuning's "
        "verification); the region between grid points is interpolated in the figure",
        f"zero-order hold by Taylor scaling and squaring ({evaluator.squarings} squarings) "
        "over the whole grid",
    ]
    return SweepResult(
        name=model.spec.name,
        axes=axes,
        limits=[asdict(lim) for lim in evaluator.limits],
        margins=margins.margin.reshape(shape),
        relative=margins.relative.reshape(shape),
        feasible=feasible,
        fixed=dict(evaluator.fixed),
        cluster=info,
        values_source=values_source,
        notes=notes,
    )
