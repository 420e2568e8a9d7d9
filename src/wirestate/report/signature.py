"""Response signatures of linear blocks and their comparison with golden values.

A *signature* is a small JSON-ready record of what a block does, independent of how it is
written down: poles, the DC gain matrix, unit-step responses of every output to every input
sampled at fixed times, frequency-response samples at fixed frequencies, and (for tuning
files) the tuned part values. Two signatures are compared quantity by quantity with
absolute and relative tolerances; a :class:`Drift` record names every quantity that moved
further than allowed and by how much.

Comparison rules (``old`` = golden value, ``new`` = current value, tolerances from the
golden file)

* poles: matched one-to-one by least total normalised distance (Hungarian assignment,
  Kuhn 1955, :func:`scipy.optimize.linear_sum_assignment`), so ordering never matters;
  each pair must satisfy ``|new - old| <= atol + rtol * |old|`` (``atol`` in rad/s).
* DC gain: element-wise ``|new - old| <= atol + rtol * |old|``; non-finite entries (a pole
  at s = 0) must stay the same non-finite value.
* step responses: per input/output trace, ``|new_k - old_k| <= atol + rtol * max_k |old_k|``
  (error relative to the trace's full scale, as one reads a waveform).
* frequency-response magnitude: point-wise ``|new_k - old_k| <= atol + rtol * |old_k|``
  (the magnitude spans decades, so full-scale error would hide the skirts); phase: the
  wrapped difference in degrees ``<= atol``, skipped where the golden magnitude is below
  ``1e-9`` of the trace peak (phase of a near-zero is noise).
* tuned values: ``|new - old| <= atol + rtol * |old|`` for the continuous optimum and for
  the preferred (snapped) value.

Step responses use the exact zero-order-hold input matrix
``Gamma(t) = integral_0^t exp(A s) ds B`` from the matrix exponential of the augmented
matrix ``[[A, B], [0, 0]] t`` (Van Loan, "Computing integrals involving the matrix
exponential", IEEE TAC 23(3), 1978), so ``y(t) = C Gamma(t) + D`` for unit steps from rest.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import linear_sum_assignment

from wirestate.simulate.linear import LinearModel, as_linear_model

#: Default tolerances written into new golden files (users may edit them there).
#:
#: Why these values: every quantity is computed in double precision by LAPACK (eigvals,
#: expm, solve). Across BLAS/LAPACK builds, CPU instruction sets and library upgrades such
#: results move by about 1e-12 relative for well-conditioned problems, about 1e-9 for
#: matrix exponentials of stiff blocks, and about sqrt(eps) = 1.5e-8 for clustered or
#: repeated poles (eigenvalue perturbation of a defective pair; Golub and Van Loan, Matrix
#: Computations, 4th ed., sec. 7.2). A real design change is far larger: a 0.01 % change
#: of one part value (a hundred times finer than a 1 % resistor's tolerance) moves a pole by
#: about 5e-5 relative. rtol = 1e-6 leaves more than an order of magnitude on both sides.
#: The absolute floors catch entries whose golden value is (structurally) zero, where a
#: relative test cannot work: 1e-12 in SI units for responses (far below any measurable
#: volt, ampere or rad/s); for poles, 1e-9 of the spectral radius (rounding of an
#: eigenvalue is about eps * ||A||, so an integrator at s = 0 may come out as 1e-13); for
#: DC gains, 1e-9 of the largest term of D - C A^-1 B (a structurally zero DC gain is a
#: cancellation of such terms, and its rounding grows with cond(A): measured on the
#: bundled models, a 1e-13 relative perturbation of A moves such an entry by up to 4e-12
#: against terms of order 1, so a fixed 1e-12 floor would be too tight).
#: Phase: a relative error e of the complex response turns into at most e rad of phase,
#: so rtol = 1e-6 maps to 6e-5 degrees; 1e-3 degrees keeps the same margin as above.
#: Tuned optima: IPOPT stops at a scaled KKT tolerance (1e-8 by default, Waechter and
#: Biegler 2006); on a flat optimum the location is only known to about the square root of
#: that, hence rtol = 1e-4. Preferred values come from a table and must match exactly.
DEFAULT_TOLERANCES: dict[str, dict[str, float]] = {
    "poles": {"rtol": 1e-6, "atol": 0.0},  # atol filled in as 1e-9 * spectral radius
    "dc_gain": {"rtol": 1e-6, "atol": 1e-12},  # atol raised to 1e-9 * largest term
    "step": {"rtol": 1e-6, "atol": 1e-12},
    "frequency_response.magnitude": {"rtol": 1e-6, "atol": 1e-12},
    "frequency_response.phase": {"rtol": 0.0, "atol": 1e-3},
    "tuned.optimum": {"rtol": 1e-4, "atol": 0.0},
    "tuned.preferred": {"rtol": 0.0, "atol": 0.0},
    # switched runs (issue 12): exact between events (modal stepping ~1e-11, events to
    # 1e-12 of the step) and a stable loop, so platforms differ by ~1e-11 of full scale;
    # a 0.1 % part change moves the rail and the duty by ~1e-3 and each gate or diode
    # event by ~1e-9 s (a thousandth of a microsecond on-time), well outside both.
    "switched.samples": {"rtol": 1e-6, "atol": 1e-12},
    "switched.events": {"rtol": 0.0, "atol": 1e-10},
}

#: Text stored beside each tolerance in the golden file, so a reader knows what it means.
TOLERANCE_RULES: dict[str, str] = {
    "poles": "|new-old| <= atol + rtol*|old| per matched pole; atol in rad/s",
    "dc_gain": "|new-old| <= atol + rtol*|old| per entry; SI units",
    "step": "|new-old| <= atol + rtol*max|old| per input->output trace; SI units",
    "frequency_response.magnitude": "|new-old| <= atol + rtol*|old| per frequency",
    "frequency_response.phase": "wrapped |new-old| <= atol + rtol*|old|, degrees",
    "tuned.optimum": "|new-old| <= atol + rtol*|old|; SI units",
    "tuned.preferred": "|new-old| <= atol + rtol*|old|; SI units",
    "switched.samples": "|new-old| <= atol + rtol*max|old| per output over the run; SI units",
    "switched.events": "same parts and changes in order; |t_new-t_old| <= atol + rtol*t, s",
}

#: step responses of simulated (hybrid) systems: CVODES runs at rtol 1e-8 and its global
#: error over a long horizon can be ~100 times that, differing across platforms; 1e-5 of
#: full scale keeps that margin while a 0.1 % part change moves a response ~100x more
SIMULATED_STEP_RTOL = 1e-5
#: fraction of the largest DC-gain term used as the DC gain's absolute floor (see above)
DC_ATOL_FRACTION = 1e-9
#: fraction of the spectral radius used as the absolute pole tolerance (see above)
POLE_ATOL_FRACTION = 1e-9
#: phase is not compared where |H| is below this fraction of the trace's peak magnitude
PHASE_FLOOR = 1e-9


def encode_number(value: float) -> float | str:
    """A float as JSON can hold it: finite values unchanged, others as strings."""
    value = float(value)
    if math.isfinite(value):
        return value
    if math.isnan(value):
        return "nan"
    return "inf" if value > 0 else "-inf"


def decode_number(value: Any) -> float:
    """Inverse of :func:`encode_number`."""
    if isinstance(value, str):
        if value in ("inf", "-inf", "nan"):
            return float(value)
        raise ValueError(f"not a number: {value!r}")
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"not a number: {value!r}")
    return float(value)


# ---------------------------------------------------------------------------------------
# computing a signature


def sorted_poles(A: np.ndarray) -> np.ndarray:
    """Eigenvalues of ``A`` (rad/s), sorted by imaginary then real part."""
    if A.shape[0] == 0:
        return np.zeros(0, dtype=complex)
    p = np.linalg.eigvals(A)
    return p[np.lexsort((p.real, p.imag))]


def _round_sig(values: np.ndarray, digits: int = 4) -> list[float]:
    # round sample points to a few significant digits so golden files read well
    out = sorted({float(f"{v:.{digits}g}") for v in values})
    return out


def derive_grid(poles: np.ndarray) -> dict[str, list[float]]:
    """Sample times (s) and frequencies (rad/s) suited to a block with these poles.

    Times: 0, then logarithmically spaced from a tenth of the fastest time scale
    (``0.1 / max|p|``) to five of the slowest (``5 * max tau``, with ``tau = 1/|Re p|``
    capped at ten periods ``20 pi / |p|`` for lightly damped or undamped modes), about
    ten per decade (30 to 120 points). Frequencies: a decade below the slowest mode to a
    decade above the fastest, ten per decade (30 to 150 points), moved off any pole on the
    imaginary axis. Common practice, no source.
    """
    poles = np.asarray(poles, dtype=complex)
    mags = np.abs(poles)
    scale = float(mags.max()) if mags.size else 0.0
    nonzero = poles[mags > 1e-12 * scale] if scale > 0 else poles[:0]
    if nonzero.size == 0:
        times = [0.0] + [float(t) for t in np.linspace(0.05, 1.0, 20)]
        freqs = np.geomspace(0.1, 1e3, 41)
        return {"times_s": _round_sig(np.asarray(times)), "frequencies_rad_s": _round_sig(freqs)}
    w = np.abs(nonzero)
    decay = np.abs(nonzero.real)
    periods_cap = 20 * math.pi / w
    with np.errstate(divide="ignore"):
        tau = np.where(
            decay > 0, np.minimum(1.0 / np.where(decay > 0, decay, 1.0), periods_cap), periods_cap
        )
    t_first = 0.1 / float(w.max())
    t_end = 5.0 * float(tau.max())
    decades = max(math.log10(t_end / t_first), 1.0)
    n_times = int(np.clip(round(10 * decades), 30, 120))
    times = np.concatenate([[0.0], np.geomspace(t_first, t_end, n_times)])

    w_lo, w_hi = float(w.min()) / 10.0, float(w.max()) * 10.0
    decades = max(math.log10(w_hi / w_lo), 1.0)
    n_freqs = int(np.clip(round(10 * decades), 30, 150))
    freqs = np.asarray(_round_sig(np.geomspace(w_lo, w_hi, n_freqs)))
    # a sample exactly on an undamped mode would be infinite: nudge it by half a percent
    for k, omega in enumerate(freqs):
        if np.any(np.abs(1j * omega - poles) < 1e-3 * max(omega, 1e-300)):
            freqs[k] = omega * 1.005
    return {"times_s": _round_sig(times), "frequencies_rad_s": _round_sig(freqs, 6)}


def _zoh_input_matrices(A: np.ndarray, B: np.ndarray, times: Sequence[float]) -> list[np.ndarray]:
    """``Gamma(t) = int_0^t exp(A s) ds B`` for each ``t`` (Van Loan 1978, augmented expm).

    Each sample is computed from rest in one exponential (not by chaining steps), so no
    rounding accumulates along the grid.
    """
    from wirestate.simulate.discretize import zoh

    n, m = B.shape
    return [np.zeros((n, m)) if t == 0.0 else zoh(A, B, float(t)).Bd for t in times]


def frequency_response(model: LinearModel, omegas: Sequence[float]) -> np.ndarray:
    """``H(j omega) = C (j omega I - A)^-1 B + D``, shape ``(len(omegas), outputs, inputs)``.

    A frequency on a pole gives ``inf`` entries.
    """
    n = model.A.shape[0]
    H = np.empty((len(omegas), len(model.outputs), len(model.inputs)), dtype=complex)
    eye = np.eye(n)
    for k, omega in enumerate(omegas):
        if n == 0:
            H[k] = model.D
            continue
        try:
            H[k] = model.C @ np.linalg.solve(1j * omega * eye - model.A, model.B) + model.D
        except np.linalg.LinAlgError:
            H[k] = np.inf
    return H


def dc_gain(model: LinearModel) -> np.ndarray:
    """``D - C A^-1 B``; ``inf``/``nan`` entries where a pole at s = 0 makes it unbounded."""
    if model.A.shape[0] == 0:
        return model.D.copy()
    try:
        if np.linalg.cond(model.A) > 1e14:
            raise np.linalg.LinAlgError
        return model.D - model.C @ np.linalg.solve(model.A, model.B)
    except np.linalg.LinAlgError:
        # a pole at s = 0: python-control returns inf/nan where the limit diverges
        import control

        with np.errstate(all="ignore"):
            gain = control.ss(model.A, model.B, model.C, model.D).dcgain()
        return np.asarray(gain, dtype=float).reshape(model.D.shape)


def _dc_term_scale(model: LinearModel) -> float:
    # the largest |D| + |C| |A^-1 B| entry: the size of the terms a DC gain is summed from
    # (sets the DC gain's absolute tolerance floor); finite DC gains only if A is singular
    if model.A.shape[0] == 0:
        terms = np.abs(model.D)
    else:
        try:
            if np.linalg.cond(model.A) > 1e14:
                raise np.linalg.LinAlgError
            terms = np.abs(model.D) + np.abs(model.C) @ np.abs(np.linalg.solve(model.A, model.B))
        except np.linalg.LinAlgError:
            terms = np.abs(dc_gain(model))
    finite = terms[np.isfinite(terms)]
    return float(finite.max()) if finite.size else 0.0


def linear_signature(block: Any, grid: Mapping[str, Sequence[float]] | None = None) -> dict:
    """The signature of a linear block (JSON-ready).

    Parameters
    ----------
    block
        A :class:`wirestate.lti.CircuitBlock`, a continuous ``control.StateSpace`` or a
        :class:`LinearModel`.
    grid
        ``{"times_s": [...], "frequencies_rad_s": [...]}``; derived from the poles with
        :func:`derive_grid` when omitted (new golden files), taken from the golden file
        otherwise so both sides are sampled at the same points.

    Returns
    -------
    dict
        ``name``, ``states``, ``inputs``, ``outputs``, ``poles`` (``[re, im]`` in rad/s),
        ``dc_gain`` (rows = outputs, columns = inputs, SI), ``dc_gain_term_scale`` (the
        largest ``|D| + |C| |A^-1 B|`` entry, which sets the DC tolerance floor), ``step``
        (``times_s`` and ``responses[input][output]``: unit-step response from rest, SI),
        ``frequency_response`` (``frequencies_rad_s``, ``magnitude[input][output]`` and
        ``phase_deg[input][output]``).
    """
    model = block if isinstance(block, LinearModel) else as_linear_model(block)
    poles = sorted_poles(model.A)
    if grid is None:
        grid = derive_grid(poles)
    times = [float(t) for t in grid["times_s"]]
    omegas = [float(w) for w in grid["frequencies_rad_s"]]

    gammas = _zoh_input_matrices(model.A, model.B, times)
    step = np.stack([model.C @ g + model.D for g in gammas]) if times else np.zeros((0, 0, 0))
    H = frequency_response(model, omegas)
    magnitude = np.abs(H)
    with np.errstate(invalid="ignore"):
        phase = np.degrees(np.unwrap(np.angle(H), axis=0)) if omegas else H.real

    def per_pair(values: np.ndarray) -> dict[str, dict[str, list]]:
        return {
            inp: {
                out: [encode_number(v) for v in values[:, i, j]]
                for i, out in enumerate(model.outputs)
            }
            for j, inp in enumerate(model.inputs)
        }

    return {
        "name": model.name,
        "states": list(model.states),
        "inputs": list(model.inputs),
        "outputs": list(model.outputs),
        "poles": [[float(p.real), float(p.imag)] for p in poles],
        "dc_gain": [[encode_number(v) for v in row] for row in dc_gain(model)],
        "dc_gain_term_scale": _dc_term_scale(model),
        "step": {"times_s": times, "responses": per_pair(step)},
        "frequency_response": {
            "frequencies_rad_s": omegas,
            "magnitude": per_pair(magnitude),
            "phase_deg": per_pair(phase),
        },
    }


def tuned_signature(
    variables: Mapping[str, Mapping[str, float]],
    *,
    series: str | None = None,
    feasible: bool | None = None,
) -> dict:
    """The tuned-values part of a signature.

    ``{"tuned": {part: {"optimum": x, "preferred": y}}}`` (SI units), plus the preferred
    value ``series`` and whether the preferred combination met every limit (``feasible``)
    when given.
    """
    out: dict[str, Any] = {
        "tuned": {
            name: {key: encode_number(entry[key]) for key in ("optimum", "preferred")}
            for name, entry in sorted(variables.items())
        }
    }
    if series is not None:
        out["series"] = series
    if feasible is not None:
        out["feasible"] = bool(feasible)
    return out


def default_tolerances(signature: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    """Tolerances for a new golden file, with the pole floor scaled to the spectrum."""
    tolerances = {}
    for quantity, tol in DEFAULT_TOLERANCES.items():
        if quantity.startswith("tuned") != ("tuned" in signature):
            continue
        per_mode = quantity == "poles" and "modes" in signature
        if quantity.split(".")[0] not in signature and not quantity.startswith("tuned"):
            if not per_mode:
                continue
        entry = dict(tol)
        if quantity == "step" and "simulation" in signature:
            entry["rtol"] = SIMULATED_STEP_RTOL
        if per_mode:  # atol 0: 1e-9 of each mode's own spectral radius (see _compare_poles)
            entry["rule"] = TOLERANCE_RULES[quantity] + "; per mode, atol 0 = 1e-9 of its radius"
            tolerances[quantity] = entry
            continue
        if quantity == "poles":
            radius = max((abs(complex(*p)) for p in signature["poles"]), default=0.0)
            entry["atol"] = float(f"{POLE_ATOL_FRACTION * radius:.3g}") if radius else 1e-12
        if quantity == "dc_gain":
            scale = float(signature.get("dc_gain_term_scale", 0.0))
            entry["atol"] = max(float(f"{DC_ATOL_FRACTION * scale:.3g}"), entry["atol"])
        entry["rule"] = TOLERANCE_RULES[quantity]
        tolerances[quantity] = entry
    return tolerances


# ---------------------------------------------------------------------------------------
# comparing signatures


@dataclass
class Drift:
    """One quantity that moved further than its tolerance.

    ``quantity`` is the tolerance key (``poles``, ``dc_gain``, ``step``, ...) or
    ``signals`` / ``grid`` for structural changes; ``item`` says which entry (``Vs->v_bus``,
    a pole, a part name); ``at`` the time or frequency of the worst sample; ``golden`` and
    ``current`` the two values there; ``difference`` and ``allowed`` the deviation and the
    tolerance it exceeded (``nan`` for structural changes).
    """

    quantity: str
    item: str
    golden: Any
    current: Any
    difference: float = float("nan")
    allowed: float = float("nan")
    at: str = ""

    def describe(self) -> str:
        where = f" at {self.at}" if self.at else ""
        if math.isnan(self.difference):
            return f"{self.quantity} {self.item}{where}: {self.golden} -> {self.current}"
        return (
            f"{self.quantity} {self.item}{where}: golden {format_value(self.golden)}, now "
            f"{format_value(self.current)}, |diff| {format_value(self.difference)} "
            f"> allowed {format_value(self.allowed)}"
        )


def format_value(value: Any) -> str:
    """A number for tables: six significant digits; complex as a+bj; others as str."""
    if isinstance(value, complex):
        return f"{value.real:.6g}{value.imag:+.6g}j"
    if isinstance(value, float | int | np.floating):
        return f"{float(value):.6g}"
    return str(value)


def _tolerance(tolerances: Mapping[str, Any], quantity: str) -> tuple[float, float]:
    entry = dict(DEFAULT_TOLERANCES.get(quantity, {"rtol": 0.0, "atol": 0.0}))
    entry.update(tolerances.get(quantity, {}))
    return float(entry.get("rtol", 0.0)), float(entry.get("atol", 0.0))


def _decode(values: Sequence[Any]) -> np.ndarray:
    return np.asarray([decode_number(v) for v in values], dtype=float)


def _scalar_drift(
    quantity: str, item: str, old: float, new: float, rtol: float, atol: float, at: str = ""
) -> Drift | None:
    if not (math.isfinite(old) and math.isfinite(new)):
        same = (math.isnan(old) and math.isnan(new)) or old == new
        return None if same else Drift(quantity, item, old, new, at=at)
    allowed = atol + rtol * abs(old)
    difference = abs(new - old)
    if difference > allowed:
        return Drift(quantity, item, old, new, difference, allowed, at)
    return None


def _compare_poles(old: list, new: list, rtol: float, atol: float) -> list[Drift]:
    p_old = np.asarray([complex(*p) for p in old], dtype=complex)
    p_new = np.asarray([complex(*p) for p in new], dtype=complex)
    drifts = []
    if p_old.size != p_new.size:
        drifts.append(Drift("poles", "count", p_old.size, p_new.size))
    if p_old.size == 0 or p_new.size == 0:
        return drifts
    if atol <= 0.0:
        # no floor stated: the default rule (a fraction of the spectral radius), so a pole
        # at s = 0 still has a finite tolerance
        atol = POLE_ATOL_FRACTION * float(np.abs(p_old).max()) or np.finfo(float).tiny
    allowed = atol + rtol * np.abs(p_old)
    cost = np.abs(p_new[None, :] - p_old[:, None]) / allowed[:, None]
    rows, cols = linear_sum_assignment(cost)
    for i, j in zip(rows, cols, strict=True):
        difference = float(abs(p_new[j] - p_old[i]))
        if difference > allowed[i]:
            drifts.append(
                Drift(
                    "poles",
                    f"p{i + 1}",
                    complex(p_old[i]),
                    complex(p_new[j]),
                    difference,
                    float(allowed[i]),
                )
            )
    return drifts


def _compare_traces(
    quantity: str,
    old: Mapping[str, Mapping[str, list]],
    new: Mapping[str, Mapping[str, list]],
    samples: Sequence[float],
    sample_label: str,
    rtol: float,
    atol: float,
    *,
    full_scale: bool,
    wrap_degrees: bool = False,
    skip_mask: Mapping[tuple[str, str], np.ndarray] | None = None,
) -> list[Drift]:
    drifts = []
    for inp in old:
        for out in old[inp]:
            if inp not in new or out not in new[inp]:
                continue
            a, b = _decode(old[inp][out]), _decode(new[inp][out])
            item = f"{inp}->{out}"
            if a.size != b.size:
                drifts.append(Drift("grid", item, f"{a.size} samples", f"{b.size} samples"))
                continue
            finite = np.isfinite(a) & np.isfinite(b)
            mismatch = ~finite & ~((a == b) | (np.isnan(a) & np.isnan(b)))
            if skip_mask is not None and (inp, out) in skip_mask:
                finite &= ~skip_mask[(inp, out)]
                mismatch &= ~skip_mask[(inp, out)]
            if mismatch.any():
                k = int(np.flatnonzero(mismatch)[0])
                drifts.append(
                    Drift(quantity, item, a[k], b[k], at=f"{sample_label}={samples[k]:.4g}")
                )
                continue
            difference = np.abs(b - a)
            if wrap_degrees:
                difference = np.abs((b - a + 180.0) % 360.0 - 180.0)
            difference = np.where(finite, difference, 0.0)
            if full_scale:
                peak = float(np.max(np.abs(a[np.isfinite(a)]), initial=0.0))
                allowed = np.full(a.shape, atol + rtol * peak)
            else:
                allowed = atol + rtol * np.abs(np.where(finite, a, 0.0))
            excess = difference / np.where(allowed > 0, allowed, np.finfo(float).tiny)
            k = int(np.argmax(excess))
            if difference[k] > allowed[k]:
                drifts.append(
                    Drift(
                        quantity,
                        item,
                        float(a[k]),
                        float(b[k]),
                        float(difference[k]),
                        float(allowed[k]),
                        f"{sample_label}={samples[k]:.4g}",
                    )
                )
    return drifts


def compare_signatures(
    golden: Mapping[str, Any], current: Mapping[str, Any], tolerances: Mapping[str, Any]
) -> list[Drift]:
    """Every quantity of ``current`` that drifted from ``golden`` beyond ``tolerances``.

    ``current`` must have been computed on the golden file's sample grid (pass the golden
    ``times_s`` / ``frequencies_rad_s`` to :func:`linear_signature`). Returns an empty list
    when nothing drifted.
    """
    drifts: list[Drift] = []
    for key in ("states", "inputs", "outputs"):
        if key in golden and list(golden[key]) != list(current.get(key, [])):
            drifts.append(
                Drift("signals", key, ",".join(golden[key]), ",".join(current.get(key, [])))
            )

    if "poles" in golden:
        rtol, atol = _tolerance(tolerances, "poles")
        drifts += _compare_poles(golden["poles"], current.get("poles", []), rtol, atol)

    if "dc_gain" in golden:
        rtol, atol = _tolerance(tolerances, "dc_gain")
        new_index = {
            (out, inp): (i, j)
            for i, out in enumerate(current.get("outputs", []))
            for j, inp in enumerate(current.get("inputs", []))
        }
        for i, out in enumerate(golden["outputs"]):
            for j, inp in enumerate(golden["inputs"]):
                if (out, inp) not in new_index:
                    continue
                ni, nj = new_index[(out, inp)]
                drift = _scalar_drift(
                    "dc_gain",
                    f"{inp}->{out}",
                    decode_number(golden["dc_gain"][i][j]),
                    decode_number(current["dc_gain"][ni][nj]),
                    rtol,
                    atol,
                )
                if drift:
                    drifts.append(drift)

    if "step" in golden:
        rtol, atol = _tolerance(tolerances, "step")
        drifts += _compare_traces(
            "step",
            golden["step"]["responses"],
            current["step"]["responses"],
            golden["step"]["times_s"],
            "t",
            rtol,
            atol,
            full_scale=True,
        )

    if "frequency_response" in golden:
        old, new = golden["frequency_response"], current["frequency_response"]
        omegas = [w / (2 * math.pi) for w in old["frequencies_rad_s"]]
        rtol, atol = _tolerance(tolerances, "frequency_response.magnitude")
        drifts += _compare_traces(
            "frequency_response.magnitude",
            old["magnitude"],
            new["magnitude"],
            omegas,
            "f[Hz]",
            rtol,
            atol,
            full_scale=False,
        )
        masks = {}
        for inp, by_output in old["magnitude"].items():
            for out, values in by_output.items():
                mag = _decode(values)
                peak = float(np.max(mag[np.isfinite(mag)], initial=0.0))
                masks[(inp, out)] = ~np.isfinite(mag) | (mag < PHASE_FLOOR * peak)
        rtol, atol = _tolerance(tolerances, "frequency_response.phase")
        drifts += _compare_traces(
            "frequency_response.phase",
            old["phase_deg"],
            new["phase_deg"],
            omegas,
            "f[Hz]",
            rtol,
            atol,
            full_scale=False,
            wrap_degrees=True,
            skip_mask=masks,
        )

    if "modes" in golden:
        rtol, atol = _tolerance(tolerances, "poles")
        new_modes = current.get("modes", {})
        for mode, poles in golden["modes"].items():
            if mode not in new_modes:
                drifts.append(Drift("signals", "modes", mode, "(absent)"))
                continue
            for drift in _compare_poles(poles, new_modes[mode], rtol, atol):
                drift.item = f"{mode}: {drift.item}"
                drifts.append(drift)

    if "samples" in golden:
        rtol, atol = _tolerance(tolerances, "switched.samples")
        drifts += _compare_traces(
            "switched.samples",
            golden["samples"]["outputs"],
            current.get("samples", {}).get("outputs", {}),
            golden["samples"]["times_s"],
            "t",
            rtol,
            atol,
            full_scale=True,
        )
    if "events" in golden:
        drifts += _compare_events(golden["events"], current.get("events", {}), tolerances)

    for key in ("series", "feasible"):
        if key in golden and golden[key] != current.get(key):
            drifts.append(Drift("tuned", key, golden[key], current.get(key)))

    if "tuned" in golden:
        new_tuned = current.get("tuned", {})
        for name, entry in golden["tuned"].items():
            if name not in new_tuned:
                drifts.append(Drift("signals", "tuned variables", name, "(absent)"))
                continue
            for key in ("optimum", "preferred"):
                rtol, atol = _tolerance(tolerances, f"tuned.{key}")
                drift = _scalar_drift(
                    f"tuned.{key}",
                    name,
                    decode_number(entry[key]),
                    decode_number(new_tuned[name][key]),
                    rtol,
                    atol,
                )
                if drift:
                    drifts.append(drift)
        for name in new_tuned:
            if name not in golden["tuned"]:
                drifts.append(Drift("signals", "tuned variables", "(absent)", name))
    return drifts


def _compare_events(old: Mapping[str, Any], new: Mapping[str, Any], tolerances) -> list[Drift]:
    rtol, atol = _tolerance(tolerances, "switched.events")
    first_old, first_new = old.get("first", []), new.get("first", [])
    drifts = []
    for k, (a, b) in enumerate(zip(first_old, first_new, strict=False)):
        if a[1:] != b[1:]:
            drifts.append(Drift("switched.events", f"event {k + 1}", " ".join(a[1:]),
                                " ".join(b[1:]), at=f"t={a[0]:.6g}"))  # fmt: skip
            break
        drift = _scalar_drift(
            "switched.events", f"event {k + 1} ({a[1]} {a[2]})", a[0], b[0], rtol, atol
        )
        if drift:
            drifts.append(drift)
    if len(first_new) < len(first_old):
        drifts.append(Drift("switched.events", "count", len(first_old), len(first_new)))
    return drifts


def signature_grid(signature: Mapping[str, Any]) -> dict[str, Any] | None:
    """The sample grid stored in a signature (linear or simulated), or ``None``."""
    if "switched" in signature:
        return {k: v for k, v in signature["switched"].items() if k != "method"}
    if "simulation" in signature:
        return {k: v for k, v in signature["simulation"].items() if k != "method"}
    if "step" not in signature or "frequency_response" not in signature:
        return None
    return {
        "times_s": list(signature["step"]["times_s"]),
        "frequencies_rad_s": list(signature["frequency_response"]["frequencies_rad_s"]),
    }


# ---------------------------------------------------------------------------------------
# systems that are not LTI (sampled controllers, output limits): simulated step responses

#: most output steps in one simulated step response (keeps `make test` quick)
MAX_SIMULATION_STEPS = 20_000
#: samples of each simulated response kept in the golden file
SIMULATED_SAMPLES = 80


def derive_simulation_grid(system: Any) -> dict[str, Any]:
    """Horizon, output step, kept sample times and step amplitudes for a hybrid system.

    The horizon is the step-response horizon :func:`derive_grid` picks for the poles of
    the continuous linear part (the plant); the output step is the fastest controller
    period (every period must be a whole number of output steps) or a thousandth of the
    horizon for continuous nonlinear loops; about :data:`SIMULATED_SAMPLES` samples are
    kept, logarithmically spaced in index so the start of the transient is resolved.
    Each input steps to its default value (a source's ``value``) or, without one, to 1 in
    SI units. Common practice, no source.
    """
    plant = system.linear_part().system
    poles = sorted_poles(np.asarray(plant.A, dtype=float))
    until = float(derive_grid(poles)["times_s"][-1])
    periods = list(system.sample_times)
    if periods:
        step = float(min(periods))
        until = min(until, step * MAX_SIMULATION_STEPS)
    else:
        step = until / 1000.0
    n_steps = max(int(round(until / step)), 10)
    until = n_steps * step
    indices = np.unique(np.round(np.geomspace(1, n_steps, SIMULATED_SAMPLES)).astype(int))
    amplitudes = {name: float(system.input_defaults.get(name) or 1.0) for name in system.inputs}
    return {
        "until_s": until,
        "step_s": step,
        "sample_indices": [0] + [int(k) for k in indices],
        "amplitudes": amplitudes,
    }


def simulated_signature(system: Any, grid: Mapping[str, Any] | None = None) -> dict:
    """The signature of a composed system with sampled or nonlinear blocks.

    Parameters
    ----------
    system
        A :class:`wirestate.compose.ComposedSystem` that is not LTI.
    grid
        From :func:`derive_simulation_grid` (new golden files) or the golden file.

    Returns
    -------
    dict
        ``name``, ``inputs``, ``outputs``, ``states``, ``poles`` of the continuous linear
        part (rad/s), ``simulation`` (the grid) and ``step``: for each input, the outputs
        when that input alone steps from 0 to its amplitude at t = 0 from rest (the other
        inputs held at 0), at the kept sample times, SI units. The run goes through
        :func:`wirestate.simulate.simulate` (piecewise-exact ZOH with sampled
        controllers; CasADi/CVODES for continuous nonlinear blocks).
    """
    from wirestate.simulate import simulate
    from wirestate.simulate.inputs import Step

    grid = dict(grid) if grid is not None else derive_simulation_grid(system)
    until, step = float(grid["until_s"]), float(grid["step_s"])
    indices = [int(k) for k in grid["sample_indices"]]
    responses: dict[str, dict[str, list]] = {}
    times: list[float] = []
    for name in system.inputs:
        amplitude = float(grid["amplitudes"].get(name, 1.0))
        result = simulate(system, until, step, {name: Step(final=amplitude)}, use_defaults=False)
        keep = [k for k in indices if k < result.time.size]
        times = [float(result.time[k]) for k in keep]
        responses[name] = {
            out: [encode_number(v) for v in result.output(out)[keep]] for out in system.outputs
        }
    plant = system.linear_part().system
    poles = sorted_poles(np.asarray(plant.A, dtype=float))
    return {
        "name": system.name,
        "states": list(system.states),
        "inputs": list(system.inputs),
        "outputs": list(system.outputs),
        "poles": [[float(p.real), float(p.imag)] for p in poles],
        "simulation": {
            **grid,
            "method": "step responses simulated; poles of the continuous linear part",
        },
        "step": {"times_s": times, "responses": responses},
    }


# ---------------------------------------------------------------------------------------
# switched circuits and systems (issue 12): mode poles, and a run sampled exactly

#: carrier (or sampling) periods in the horizon of a switched system's run
SWITCHED_PERIODS = 400
#: samples of each output kept in the golden file
SWITCHED_SAMPLES = 80
#: events kept in the golden file (the first ones: start-up, where the loop is busiest)
SWITCHED_EVENTS = 40
#: modes whose poles are kept for a switched circuit file (2 ** devices, at most this)
SWITCHED_MODES = 64


def switched_circuit_signature(block: Any, grid: Any = None) -> dict:
    """The signature of a circuit with switches or diodes: ``modes``, the poles of every
    mode (each device on or off, up to :data:`SWITCHED_MODES`), keyed ``"Q1 on, D1 off"``,
    from the one compile path, compared with the pole tolerances per mode. ``grid`` is
    accepted for the common interface and unused (nothing is sampled).

    No step or frequency response: an off switch of 10 Mohm beside nanohenries puts
    eigenvalues near -1e14 /s into a mode, where a response is as sensitive to the last
    digits of the matrices as its slow part is to the design (measured: a 1e-11 relative
    perturbation moved the all-off step response of the bundled buck by 5e-5). What the
    circuit does when it switches is regressed by a system that runs it.
    """
    import itertools

    from wirestate.switching import switched_circuit

    circuit = switched_circuit(block)
    modes = {}
    for on in itertools.islice(
        itertools.product((False, True), repeat=len(circuit.devices)), SWITCHED_MODES
    ):
        poles = sorted_poles(circuit.mode(on).A)
        modes[circuit.describe(on)] = [[float(p.real), float(p.imag)] for p in poles]
    return {
        "name": circuit.name,
        "states": list(circuit.states),
        "inputs": list(circuit.inputs),
        "outputs": list(circuit.outputs),
        "modes": modes,
    }


def derive_switched_grid(system: Any) -> dict[str, Any]:
    """Horizon, output step, kept samples and input amplitudes for a switched system.

    The horizon is :data:`SWITCHED_PERIODS` of the slowest modulator carrier (or sampled
    block, or 10 us without either), the output step a tenth of the fastest; about
    :data:`SWITCHED_SAMPLES` samples are kept, logarithmically spaced in index; every
    input steps at t = 0 to its default (a source's ``value``) or to 1 in SI units, all
    together (a start-up). Common practice, no source.
    """
    from wirestate.compose import MODULATOR

    periods = [b.source.period for b in system.blocks.values() if b.category == MODULATOR]
    periods += list(system.sample_times)
    slow, fast = (max(periods), min(periods)) if periods else (1e-5, 1e-5)
    step = float(f"{fast / 10:.6g}")
    n_steps = int(round(SWITCHED_PERIODS * slow / step))
    indices = np.unique(np.round(np.geomspace(1, n_steps, SWITCHED_SAMPLES)).astype(int))
    amplitudes = {name: float(system.input_defaults.get(name) or 1.0) for name in system.inputs}
    return {
        "until_s": n_steps * step,
        "step_s": step,
        "sample_indices": [0] + [int(k) for k in indices],
        "amplitudes": amplitudes,
    }


def switched_signature(system: Any, grid: Mapping[str, Any] | None = None) -> dict:
    """The signature of a system with switched circuits or modulators.

    One run from rest with every input stepped to its amplitude at t = 0, through
    :func:`wirestate.simulate.simulate` (exact between events, gate edges at their
    times, diode events located): ``samples`` (every output at the kept times, SI units)
    and ``events`` (the total ``count`` and the first :data:`SWITCHED_EVENTS` as
    ``[time, part, change]``).
    """
    from wirestate.simulate import simulate
    from wirestate.simulate.inputs import Step

    grid = dict(grid) if grid is not None else derive_switched_grid(system)
    until, step = float(grid["until_s"]), float(grid["step_s"])
    inputs = {name: Step(final=float(grid["amplitudes"].get(name, 1.0))) for name in system.inputs}
    result = simulate(system, until, step, inputs, use_defaults=False)
    keep = [int(k) for k in grid["sample_indices"] if int(k) < result.time.size]
    return {
        "name": system.name,
        "states": list(system.states),
        "inputs": list(system.inputs),
        "outputs": list(system.outputs),
        "switched": {**grid, "method": "one run, every input stepped at t = 0; exact switching"},
        "samples": {
            "times_s": [float(result.time[k]) for k in keep],
            "outputs": {
                "run": {
                    out: [encode_number(v) for v in result.output(out)[keep]]
                    for out in system.outputs
                }
            },
        },
        "events": {
            "count": len(result.events),
            "first": [[float(e.time), e.part, e.change] for e in result.events[:SWITCHED_EVENTS]],
        },
    }
