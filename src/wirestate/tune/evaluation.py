"""One tuning case evaluated at part values: the :class:`Evaluation` every limit reads.

An evaluation holds the loop's matrices and its trajectory, either numerically for a batch
of part-value rows (arrays with a leading row axis), for one point (no row axis: the
independent re-verification of :func:`independent_evaluation`), or as CasADi expressions
of part values (the NLP). The limit measures of :mod:`wirestate.tune.limits` run on all
three.

Stepping is ``x[k+1] = Phi x[k] + Gamma v[k]`` over the schedule, the outputs between two
samples of a sampled loop come from the output maps ``(C_j, D_j)``, and energies from the
quadratic forms of :func:`energy_gramian` (exact integrals of the piecewise solution).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem


@dataclass
class Evaluation:
    """Matrices and trajectory of one tuning case at one or many points.

    ``Phi, Gamma`` step the loop state over one sample, ``C, D`` give its outputs at the
    samples; ``A, B`` are the continuous loop (a sampled PI is replaced by its continuous
    counterpart there, for poles and impedances); ``X`` is states x samples, ``Y`` outputs
    x output samples; ``values`` the part values. Numeric batches carry a leading row axis
    on every array (``values[name]`` is then a vector); a single numeric point has none;
    symbolic evaluations hold CasADi expressions (``Y`` then built on demand by
    :meth:`output`).

    ``extra`` holds ``Cc, Dc`` (continuous loop outputs), ``steady`` (sample column ->
    outputs at the steady state of that column's inputs), ``x0``, ``maps`` (output maps
    between samples) and ``energy`` (resistor -> the quadratic form of the loop state and
    inputs at a sample whose sum over the samples is the energy over the horizon).
    """

    Phi: Any
    Gamma: Any
    C: Any
    D: Any
    A: Any
    B: Any
    X: Any
    Y: Any
    values: dict[str, Any]
    symbolic: bool
    extra: dict[str, Any] = field(default_factory=dict)
    #: the loop inputs over the samples (inputs x samples)
    inputs: np.ndarray | None = None
    substeps: int = 1

    @property
    def rows(self) -> int | None:
        """Rows of a numeric batch; ``None`` for a single point or a symbolic evaluation."""
        if self.symbolic or np.ndim(self.Phi) != 3:
            return None
        return int(np.shape(self.Phi)[0])

    def batch(self) -> Evaluation:
        """This evaluation as a numeric batch (a single point gets a row axis of one)."""
        if self.symbolic or self.rows is not None:
            return self
        extra = dict(self.extra)
        for key in ("Cc", "Dc", "x0"):
            if key in extra:
                extra[key] = np.asarray(extra[key])[None]
        if "steady" in extra:
            extra["steady"] = {k: np.asarray(v)[None] for k, v in extra["steady"].items()}
        if "energy" in extra:
            extra["energy"] = {k: np.asarray(v)[None] for k, v in extra["energy"].items()}
        if "maps" in extra:
            extra["maps"] = [(np.asarray(c)[None], np.asarray(d)[None]) for c, d in extra["maps"]]
        return Evaluation(
            *(np.asarray(m)[None] for m in (self.Phi, self.Gamma, self.C, self.D, self.A, self.B)),
            np.asarray(self.X)[None],
            np.asarray(self.Y)[None],
            {k: np.atleast_1d(np.asarray(v, dtype=float)) for k, v in self.values.items()},
            False,
            extra,
            self.inputs,
            self.substeps,
        )

    def row(self, index: int) -> Evaluation:
        """Row ``index`` of a numeric batch as a single-point evaluation."""
        out = self.take(index)
        out.values = {k: float(v) for k, v in out.values.items()}
        return out

    def take(self, rows: Any) -> Evaluation:
        """Some rows of a numeric batch (an integer: one point without a row axis)."""

        def pick(item: Any) -> Any:
            if isinstance(item, dict):
                return {k: pick(v) for k, v in item.items()}
            if isinstance(item, list):
                return [pick(v) for v in item]
            if isinstance(item, tuple):
                return tuple(pick(v) for v in item)
            return np.asarray(item)[rows]

        return Evaluation(
            *(pick(m) for m in (self.Phi, self.Gamma, self.C, self.D, self.A, self.B)),
            pick(self.X), pick(self.Y), pick(self.values), False, pick(self.extra),
            self.inputs, self.substeps,
        )  # fmt: skip

    def output(self, index: int, samples: Any) -> Any:
        """Output ``index`` at the output samples ``samples`` (indices into the output
        grid): numeric ``(rows, K)`` (a batch) or ``(K,)``; symbolic a ``(K, 1)`` column."""
        if not self.symbolic:
            return np.asarray(self.Y)[..., index, samples]
        import casadi

        samples = np.atleast_1d(np.arange(self.n_output_samples)[samples])
        m = self.substeps
        k, j = np.divmod(samples, m)
        if "stacked" not in self.extra:
            maps = self.extra["maps"]
            self.extra["stacked"] = (
                casadi.vertcat(*[c for c, _ in maps]),
                casadi.vertcat(*[d for _, d in maps]),
                casadi.DM(self.inputs),
            )
        C_all, D_all, V = self.extra["stacked"]
        n_out = C_all.shape[0] // m
        rows = [sub * n_out + index for sub in range(m)]
        columns, where = np.unique(k, return_inverse=True)
        cols = columns.tolist()
        # every substep's value of this output at the sample columns needed, then the
        # entries asked for: (substep j, column) is entry j + m * column of the vec
        block = casadi.mtimes(C_all[rows, :], self.X[:, cols]) + casadi.mtimes(
            D_all[rows, :], V[:, cols]
        )
        return casadi.vec(block)[(j + m * where).tolist()]

    @property
    def n_output_samples(self) -> int:
        """Output samples of the full horizon."""
        return (np.shape(self.inputs)[1] - 1) * self.substeps + 1


def outputs_between(maps: list[tuple[Any, Any]], X: np.ndarray, V: np.ndarray) -> np.ndarray:
    """Outputs at every output step of a numeric batch: ``maps[j] = (C_j, D_j)`` (each
    ``(rows, outputs, ...)``) give the outputs ``j`` output steps after each sample from
    that sample's state (``X``: rows x states x samples) and inputs ``V`` (inputs x
    samples); the last column is the final sample."""
    C0, D0 = maps[0]
    rows, n_out = C0.shape[0], C0.shape[1]
    steps = X.shape[2] - 1
    m = len(maps)
    Y = np.empty((rows, n_out, steps * m + 1))
    for j, (Cj, Dj) in enumerate(maps):
        Y[:, :, j : steps * m : m] = Cj @ X[:, :, :-1] + Dj @ V[:, :-1]
    Y[:, :, -1] = (C0 @ X[:, :, -1:])[:, :, 0] + D0 @ V[:, -1]
    return Y


def step_batch(Phi: np.ndarray, Gamma: np.ndarray, x0: np.ndarray, V: np.ndarray) -> np.ndarray:
    """States (rows x states x samples) of ``x[k+1] = Phi x[k] + Gamma v[k]`` for every row
    at once (one batched product per step); ``V`` is inputs x samples."""
    rows, n = x0.shape
    steps = V.shape[1] - 1
    X = np.empty((rows, n, steps + 1))
    X[:, :, 0] = x0
    W = Gamma @ V[:, :steps]
    x = x0[:, :, None]
    with np.errstate(over="ignore", invalid="ignore"):
        for k in range(steps):
            x = Phi @ x + W[:, :, k : k + 1]
            X[:, :, k + 1] = x[:, :, 0]
    return X


def initial_and_steady(
    problem: Problem, Phi: Any, Gamma: Any, maps: list[tuple[Any, Any]]
) -> tuple[Any, Any]:
    """``x0`` (the steady state at the first inputs, or zero, with the initial values set)
    and the steady outputs at every schedule column (outputs x columns); numpy (single or
    batch) or CasADi."""
    schedule = problem.schedule
    columns = list(schedule.steady_columns)
    V = schedule.inputs[:, columns]
    C0, D0 = maps[0]
    if isinstance(Phi, np.ndarray):
        n = Phi.shape[-1]
        eye = np.eye(n)
        with np.errstate(all="ignore"):
            try:
                Xss = np.linalg.solve(eye - Phi, Gamma @ V)
            except np.linalg.LinAlgError:
                Xss = _least_squares(eye - Phi, Gamma @ V)
        steady = C0 @ Xss + D0 @ V
        x0 = np.zeros_like(Xss[..., 0]) if schedule.from_rest else Xss[..., 0].copy()
        for index, value in schedule.initial_rows:
            x0[..., index] = value
        return x0, steady
    import casadi

    n = Phi.shape[0]
    Vd = casadi.DM(V)
    Xss = casadi.solve(casadi.DM.eye(n) - Phi, casadi.mtimes(Gamma, Vd))
    steady = casadi.mtimes(C0, Xss) + casadi.mtimes(D0, Vd)
    x0 = casadi.DM.zeros(n, 1) if schedule.from_rest else Xss[:, 0]
    if schedule.initial_rows:
        given = dict(schedule.initial_rows)
        x0 = casadi.vertcat(*[given[i] if i in given else x0[i] for i in range(n)])
    return x0, steady


def _least_squares(M: np.ndarray, R: np.ndarray) -> np.ndarray:
    if M.ndim == 2:
        return np.linalg.lstsq(M, R, rcond=None)[0]
    return np.stack([np.linalg.lstsq(m, r, rcond=None)[0] for m, r in zip(M, R, strict=True)])


def energy_gramian(A: Any, B: Any, q: Any, h: float, expm: Any) -> Any:
    """``W = integral_0^h exp(M^T t) q q^T exp(M t) dt`` with ``M = [[A, B], [0, 0]]``.

    For a held input ``u`` and ``z = [x; u]`` at the start of a step, ``z^T W z`` is the
    integral of ``(q^T z(t))^2`` over the step, exactly: Van Loan's block exponential
    ``exp([[-M^T, Q], [0, M]] h) = [[F11, F12], [0, F22]]`` gives ``W = F22^T F12`` with
    ``Q = q q^T`` (C. F. Van Loan, "Computing integrals involving the matrix exponential",
    IEEE Trans. Automatic Control 23(3), 1978, theorem 1). ``expm`` is the exponential
    to use (scipy's for numpy arrays, :func:`wirestate.tune.expm.expm` for CasADi).
    """
    n, m = A.shape[0], B.shape[1]
    size = n + m
    if isinstance(A, np.ndarray):
        M = np.zeros((size, size))
        M[:n, :n], M[:n, n:] = A, B
        q = np.asarray(q, dtype=float).reshape(size, 1)
        block = np.block([[-M.T, q @ q.T], [np.zeros((size, size)), M]]) * h
        F = expm(block)
        return F[size:, size:].T @ F[:size, size:]
    import casadi

    M = casadi.vertcat(casadi.horzcat(A, B), casadi.DM.zeros(m, size))
    q = casadi.reshape(q, size, 1)
    block = casadi.blockcat([[-M.T, casadi.mtimes(q, q.T)], [casadi.DM.zeros(size, size), M]])
    F = expm(block * h)
    return casadi.mtimes(F[size:, size:].T, F[:size, size:])


def held_quadratic(W: Any, held: list[tuple[Any, Any]]) -> Any:
    """``sum_j [Z_j, W_j]^T W [Z_j, W_j]``: the quadratic form of the loop state and inputs
    at a sample that integrates ``(q^T z)^2`` over the whole sample period (every output
    step ``j`` of it, ``held`` from :func:`wirestate.tune.closed_loop.loop_matrices`)."""
    total = None
    for Z, Wv in held:
        if isinstance(W, np.ndarray) and isinstance(Z, np.ndarray):
            L = np.hstack([Z, Wv])
            term = L.T @ W @ L
        else:
            import casadi

            L = casadi.horzcat(Z, Wv)
            term = casadi.mtimes(L.T, casadi.mtimes(W, L))
        total = term if total is None else total + term
    return total


def energy_parts(problem: Problem) -> list[str]:
    """Resistors whose dissipated energy a limit, the objective or the stress report needs
    (every watched resistor)."""
    parts = problem.circuit.parts
    return [name for name in problem.watched if parts[name].kind == "resistor"]


def independent_evaluation(
    problem: Problem, values: dict[str, float], *, initial: np.ndarray | None = None
) -> Evaluation:
    """One point through the independent numeric path: the numeric compile
    (:func:`wirestate.reduce.compile_circuit`, sparse LU) and the simulator's exact
    zero-order hold (:func:`wirestate.simulate.discretize.zoh`, scipy's Pade exponential),
    unlike the parametric path (CasADi elimination, Taylor exponential); the loop algebra
    and the stepping are the shared ones. ``initial`` replaces the initial state."""
    from scipy.linalg import expm

    from wirestate.simulate.discretize import zoh
    from wirestate.tune.closed_loop import loop_matrices
    from wirestate.tune.problem import CURRENT_PREFIX

    all_values = {**problem.nominal, **{k: float(v) for k, v in values.items()}}
    block = problem._compile(all_values)
    h = problem.output_step
    m = loop_matrices(problem, block.A, block.B, block.C, block.D, lambda A, B: zoh(A, B, h))
    x0, steady = initial_and_steady(problem, m["Phi"], m["Gamma"], m["maps"])
    if initial is not None:
        x0 = np.asarray(initial, dtype=float)
    V = problem.schedule.inputs
    X = step_batch(m["Phi"][None], m["Gamma"][None], x0[None], V)[0]
    maps = [(np.asarray(c), np.asarray(d)) for c, d in m["maps"]]
    Y = outputs_between([(c[None], d[None]) for c, d in maps], X[None], V)[0]
    Ap, Bp, Cp, Dp = m["part"]
    energy = {}
    for part in energy_parts(problem):
        row = _part_row(m["part_outputs"], CURRENT_PREFIX + part)
        q = np.concatenate([Cp[row], Dp[row]])
        energy[part] = held_quadratic(energy_gramian(Ap, Bp, q, h, expm), m["held"])
    columns = problem.schedule.steady_columns
    return Evaluation(
        m["Phi"], m["Gamma"], maps[0][0], maps[0][1], m["A"], m["B"], X, Y, all_values, False,
        {
            "Cc": m["Cc"], "Dc": m["Dc"], "x0": x0, "maps": maps, "energy": energy,
            "steady": {k: steady[:, i] for i, k in enumerate(columns)},
        },
        V, problem.substeps,
    )  # fmt: skip


def _part_row(outputs: list[str], name: str) -> int:
    """Row of ``name`` among a continuous part's outputs (``block.name`` in a system)."""
    for index, output in enumerate(outputs):
        if output == name or output.endswith("." + name):
            return index
    raise ValueError(f"internal: no output {name!r} in the continuous part")
