"""What the figure of a switched tuning draws, computed only when a figure is asked for.

:func:`figure_data` takes the preferred values' steady state on the imposed mode sequence
(the same :class:`~wirestate.tune.switched.Point` the report's margins come from) and the
tolerance corners' steady states, and returns plain arrays:

* the limited output over one switching period and, finer, around the switch's turn-off,
  sampled on the exact in-mode solution ``z(t) = exp(Z (t - t_k)) z_k`` (scipy's ``expm``
  of the numeric mode from the one compile path, from the mode-start states ``z_k`` the
  sequence model solved for);
* the peak limit's own window samples (the rows the report's value is the largest of), so
  the peak drawn is the report's number, and their envelope over the tolerance corners;
* the ring-settling band: the value at the end of its window, ``max`` either side, from
  ``settled_by`` to ``within``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from wirestate.tune.sequence import edge_boundary

__all__ = ["figure_data"]

#: samples over one switching period, and over the turn-off view
PERIOD_SAMPLES = 1500
TURN_OFF_SAMPLES = 1200
#: the turn-off view starts this share of the longest window before the edge
BEFORE_EDGE = 0.15


def _sampler(problem: Any, model: Any, point: Any):
    """``sample(times) -> output values`` of every output name, on the exact solution."""
    from scipy.linalg import expm

    from wirestate.switching import SwitchedCircuit

    circuit = SwitchedCircuit(
        problem.circuit_spec.with_values(point.values), extra_probes=problem.circuit.extra_probes
    )
    starts = point.out["times"].ravel()
    states = point.out["states"]
    n, u = model.n_states, np.asarray(problem.inputs, dtype=float)
    modes = []
    for on in model.sequence.modes:
        mode = circuit.mode(on)
        Z = np.zeros((n + 1, n + 1))
        Z[:n, :n] = mode.A
        Z[:n, n] = mode.B @ u + mode.f
        # outputs then probes: the row order of the sequence model's ``outputs``
        C = np.vstack([mode.C, mode.P])
        d = np.concatenate([mode.D @ u + mode.g, mode.Q @ u + mode.p])
        modes.append((Z, C, d))

    def sample(times: np.ndarray, name: str) -> np.ndarray:
        row = model.outputs[name]
        out = np.empty(len(times))
        for j, t in enumerate(times):
            k = min(int(np.searchsorted(starts, t, side="right")) - 1, len(modes) - 1)
            Z, C, d = modes[k]
            x = (expm(Z * (t - starts[k])) @ states[:, k])[:n]
            out[j] = C[row] @ x + d[row]
        return out

    return sample


def _window_rows(model: Any, point: Any, label: str) -> tuple[np.ndarray, np.ndarray]:
    """``(times from the carrier start, rows)`` of one limit at ``point``."""
    p = np.array([point.values[n] for n in model.parts])
    row_times = np.array(model.stress_function(p, point.duty, point.located)[1]).ravel()
    where = model.row_slices[label]
    return row_times[where], point.out["rows"].ravel()[where]


def figure_data(problem: Any, model: Any, chosen: Any, corners: list[Any]) -> dict[str, Any]:
    """The arrays of the switched tuning figure (see the module docstring).

    Parameters
    ----------
    problem, model
        The :class:`~wirestate.tune.switched_problem.SwitchedProblem` and the
        :class:`~wirestate.tune.sequence.SequenceModel` of the imposed sequence.
    chosen
        The preferred values' steady state on that sequence.
    corners
        The tolerance corners' steady states (may be empty).

    Returns
    -------
    dict
        Times in s from the switch's turn-off (``period_times`` from the carrier start),
        values in the output's SI unit; ``peak`` and ``ring`` describe the two window
        limits (absent when the tuning has none).
    """
    windowed = [lim for lim in problem.spec.limits
                if lim.kind in ("peak_after_switching", "ring_settling")]  # fmt: skip
    starts = chosen.out["times"].ravel()
    period = float(problem.period)
    shown = windowed[0] if windowed else None
    output = shown.output if shown else problem.measure
    edge_index = edge_boundary(model.sequence, shown) if shown else 1
    edge = float(starts[edge_index])
    sample = _sampler(problem, model, chosen)
    data: dict[str, Any] = {
        "output": output,
        "unit": "V" if output.startswith("v_") else "A",
        "period": period,
        "duty": float(chosen.duty),
        "edge": edge,
        "edge_name": f"{shown.part} {shown.edge.replace('_', '-')}" if shown else "edge",
    }
    data["period_times"] = np.linspace(0.0, period, PERIOD_SAMPLES, endpoint=False)
    data["period_values"] = sample(data["period_times"], output)
    reach = max((float(lim.within) for lim in windowed), default=0.1 * period)
    view = np.linspace(-BEFORE_EDGE * reach, 1.1 * reach, TURN_OFF_SAMPLES)
    view = view[(edge + view >= 0.0) & (edge + view <= period)]
    data["times"] = view
    data["values"] = sample(edge + view, output)
    for limit in windowed:
        times, rows = _window_rows(model, chosen, limit.label)
        if limit.kind == "peak_after_switching" and "peak" not in data:
            k = int(np.argmax(rows))
            data["peak"] = {"name": limit.label, "bound": float(limit.max),
                            "value": float(rows[k]), "time": float(times[k] - edge),
                            "window": (0.0, float(limit.within)),
                            "samples": (times - edge, rows)}  # fmt: skip
            envelope = _corner_envelope(model, corners, limit, times - edge, rows)
            if envelope is not None:
                data["corner_low"], data["corner_high"] = envelope
                data["corner_times"] = times - edge
                data["corners"] = len(corners)
        elif limit.kind == "ring_settling" and "ring" not in data:
            final = float(sample(np.array([edge + float(limit.within)]), limit.output)[0])
            k = int(np.argmax(np.abs(rows)))
            data["ring"] = {"name": limit.label, "band": float(limit.max), "final": final,
                            "window": (float(limit.by), float(limit.within)),
                            "worst": (float(times[k] - edge), float(rows[k] + final))}  # fmt: skip
    return data


def _corner_envelope(model, corners, limit, offsets, rows):
    """Lowest and highest window samples over the corners, at the preferred values' times
    after the edge (each corner's own samples interpolated there; its edge moves with its
    duty)."""
    if not corners:
        return None
    low, high = rows.copy(), rows.copy()
    for point in corners:
        times, values = _window_rows(model, point, limit.label)
        edge = float(point.out["times"].ravel()[edge_boundary(model.sequence, limit)])
        shifted = np.interp(offsets, times - edge, values)
        low, high = np.minimum(low, shifted), np.maximum(high, shifted)
    return low, high
