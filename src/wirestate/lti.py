"""The named state-space block a circuit compiles to, and its python-control form."""

from __future__ import annotations

import math
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # python-control costs about 1.5 s to import: only where it is used
    import control


@dataclass
class CircuitBlock:
    """An explicit LTI block ``dx/dt = A x + B u, y = C x + D u`` with named signals.

    Attributes
    ----------
    name
        Block (circuit) name.
    A, B, C, D
        Dense matrices in SI base units. ``A`` may be given as a SciPy sparse matrix (the
        compiler does so for large sparse blocks); it is then kept in :attr:`sparse_A` and
        made dense only when ``A`` itself is first read.
    states, inputs, outputs
        Signal names. States are ``v_<capacitor>`` and ``i_<inductor>``; a state that had
        to absorb an input derivative (a capacitor in a loop with a voltage source, an
        inductor in a cutset with a current source) is named ``<name>_shifted`` and
        equals the physical quantity minus ``state_offset @ u``.
    x0
        Initial state from the parts' ``initial`` fields (zero elsewhere).
    state_offset
        ``(n_states, n_inputs)``: physical state = ``x + state_offset @ u``.
    input_defaults
        Default input values (the sources' ``value`` fields), by input name.
    units
        Unit of every state, input and output name (``"V"``, ``"A"``, ``"rad/s"``, ...).
    spec
        The validated circuit model this block was compiled from (``None`` if built by hand).
    notes
        Remarks from the compiler (for example excess elements whose initial value was
        ignored).
    elimination_order
        The compile's pivots, ``(row, unknown)`` of the stamped equations in elimination
        order (:mod:`wirestate.elimination`), which the symbolic compile replays; ``None``
        when the compile used SuperLU or the block was not compiled from a circuit.
    """

    name: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    states: list[str]
    inputs: list[str]
    outputs: list[str]
    x0: np.ndarray = None  # type: ignore[assignment]
    state_offset: np.ndarray = None  # type: ignore[assignment]
    input_defaults: dict[str, float] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    spec: Any = None
    notes: list[str] = field(default_factory=list)
    elimination_order: Any = field(default=None, repr=False, compare=False)

    def __post_init__(self) -> None:
        n, m = len(self.states), len(self.inputs)
        if hasattr(self.A, "tocsr"):  # SciPy sparse: keep it so, densify on first use of A
            sparse = self.A.tocsr().astype(float)
            if sparse.shape != (n, n):
                raise ValueError(f"A must be {n}x{n}, got {sparse.shape}")
            self.__dict__["_sparse_A"] = sparse
            del self.__dict__["A"]
        else:
            self.A = np.asarray(self.A, dtype=float).reshape(n, n)
        self.B = np.asarray(self.B, dtype=float).reshape(n, m)
        self.C = np.asarray(self.C, dtype=float).reshape(len(self.outputs), n)
        self.D = np.asarray(self.D, dtype=float).reshape(len(self.outputs), m)
        self.x0 = np.zeros(n) if self.x0 is None else np.asarray(self.x0, dtype=float)
        if self.state_offset is None:
            self.state_offset = np.zeros((n, m))

    def __getattr__(self, name: str) -> Any:
        # called only when normal lookup fails: A of a sparse block, made dense once
        fields = object.__getattribute__(self, "__dict__")
        if name == "A" and "_sparse_A" in fields:
            fields["A"] = fields["_sparse_A"].toarray()
            return fields["A"]
        raise AttributeError(name)

    @property
    def sparse_A(self) -> Any:
        """``A`` as a SciPy CSR matrix for a large sparse block from the compiler, else
        ``None`` (then ``A`` is the only form)."""
        return self.__dict__.get("_sparse_A")

    @property
    def n_states(self) -> int:
        return len(self.states)

    def state_space(self) -> control.StateSpace:
        """The block as a named ``control.StateSpace`` (continuous time).

        A block without inputs (an RC discharge) is a valid system too; python-control
        cannot build one from empty matrices, so it is built with one input that is then
        removed (see :func:`named_state_space`).
        """
        return named_state_space(
            self.A, self.B, self.C, self.D, self.name, self.inputs, self.outputs, self.states
        )

    def poles(self) -> np.ndarray:
        """Eigenvalues of ``A`` (rad/s), sorted by imaginary part then real part."""
        if self.n_states == 0:
            return np.zeros(0, dtype=complex)
        p = np.linalg.eigvals(self.A)
        return p[np.lexsort((p.real, p.imag))]

    def dc_gain(self) -> np.ndarray:
        """The limit of ``C (sI - A)^-1 B + D`` as ``s -> 0`` (see :func:`dc_gain_limit`):
        finite wherever the limit exists (also for a singular ``A``), ``+inf`` / ``-inf``
        where it does not (the sign of the approach from ``s -> 0+``)."""
        A = self.A if self.sparse_A is None else self.sparse_A
        return dc_gain_limit(A, self.B, self.C, self.D)

    def physical_state(self, x: np.ndarray, u: np.ndarray) -> np.ndarray:
        """Capacitor voltages and inductor currents from the block state and inputs."""
        return np.asarray(x) + self.state_offset @ np.asarray(u)


def named_state_space(
    A: np.ndarray,
    B: np.ndarray,
    C: np.ndarray,
    D: np.ndarray,
    name: str,
    inputs: list[str],
    outputs: list[str],
    states: list[str],
) -> control.StateSpace:
    """A named continuous ``control.StateSpace``, also with no inputs, outputs or states.

    python-control collapses an empty ``(n, 0)`` matrix to ``(0, 0)`` and then refuses the
    shapes; a system without inputs is built with one placeholder input whose column is
    then removed, which leaves a consistent object (checked by simulation and
    ``interconnect`` in the tests).
    """
    import control

    n, m, p = len(states), len(inputs), len(outputs)
    A = np.asarray(A, dtype=float).reshape(n, n)
    B = np.asarray(B, dtype=float).reshape(n, m)
    C = np.asarray(C, dtype=float).reshape(p, n)
    D = np.asarray(D, dtype=float).reshape(p, m)
    if m > 0:
        return control.ss(
            A, B, C, D, name=name, inputs=list(inputs), outputs=list(outputs),
            states=list(states),
        )  # fmt: skip
    sys = control.ss(
        A, np.zeros((n, 1)), C, np.zeros((p, 1)), name=name, inputs=["_placeholder"],
        outputs=list(outputs), states=list(states),
    )  # fmt: skip
    sys.B = np.zeros((n, 0))
    sys.D = np.zeros((p, 0))
    sys.ninputs = 0
    sys.input_index = {}
    return sys


@dataclass
class LinearBlock:
    """A continuous LTI block given by its matrices and signal names, without python-control.

    The mechanical, controller and sensor blocks of a system file are built in this form
    (python-control takes about a second to import, and the tuning loop only reads the
    matrices); :meth:`state_space` gives the named ``control.StateSpace`` a Python user
    gets from the block functions.

    Attributes
    ----------
    name
        Block name.
    A, B, C, D
        Dense matrices in SI base units, shaped by the signal names (empty ones included).
    inputs, outputs, states
        Signal names.
    units
        Unit of every signal and state name.
    """

    name: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    inputs: list[str]
    outputs: list[str]
    states: list[str]
    units: dict[str, str] = field(default_factory=dict)

    def __post_init__(self) -> None:
        n, m, p = len(self.states), len(self.inputs), len(self.outputs)
        self.A = np.asarray(self.A, dtype=float).reshape(n, n)
        self.B = np.asarray(self.B, dtype=float).reshape(n, m)
        self.C = np.asarray(self.C, dtype=float).reshape(p, n)
        self.D = np.asarray(self.D, dtype=float).reshape(p, m)

    def state_space(self) -> control.StateSpace:
        """The block as a named continuous ``control.StateSpace`` carrying ``units``."""
        import control

        # dt = 0 given: python-control would leave a static gain's time base "any"
        sys = control.ss(
            self.A, self.B, self.C, self.D, 0, name=self.name, inputs=list(self.inputs),
            outputs=list(self.outputs), states=list(self.states),
        )  # fmt: skip
        sys.units = dict(self.units)
        return sys


#: an eigenvalue with |lambda| below this times the norm of A is taken as s = 0 (round-off
#: of a structural pole at the origin; common practice, no source)
ZERO_POLE_TOLERANCE = 1e-10
#: a Laurent coefficient below this times the terms that formed it is round-off
LAURENT_TOLERANCE = 1e-9


def dc_gain_limit(A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray) -> np.ndarray:
    """The DC gain ``lim_{s->0} C (sI - A)^-1 B + D``, also when ``A`` is singular.

    Method: a real Schur form ``A = Z T Z^T`` ordered with the eigenvalues at the origin
    last, block-diagonalised by a Sylvester equation (Golub and Van Loan, Matrix
    Computations, 4th ed., sec. 7.6.3) into an invertible part ``T11`` and a nilpotent
    part ``N``. Then ``C (sI - A)^-1 B = C1 (sI - T11)^-1 B1 + sum_j C2 N^j B2 / s^(j+1)``
    (the Laurent expansion at a pole of the resolvent, e.g. Kato, Perturbation Theory for
    Linear Operators, ch. I sec. 5.3; the regular part at s = 0 is ``-C A^D B`` with the
    Drazin inverse ``A^D``). An entry is finite exactly when all its coefficients
    ``C2 N^j B2`` vanish; it is then ``D - C1 T11^-1 B1``. Otherwise it is unbounded,
    returned as ``inf`` with the sign of its leading term as ``s -> 0+``.

    Parameters
    ----------
    A, B, C, D
        State-space matrices ``(n, n), (n, m), (p, n), (p, m)``, any units; ``A`` may be
        SciPy sparse.

    Returns
    -------
    numpy.ndarray
        ``(p, m)`` DC gains, ``+inf`` / ``-inf`` where the limit does not exist.
    """
    B, C, D = (np.asarray(M, dtype=float) for M in (B, C, D))
    n = A.shape[0]
    if n == 0 or B.shape[1] == 0 or C.shape[0] == 0:
        return D.copy()
    if hasattr(A, "tocsc"):  # a large sparse block: sparse LU, dense only if singular
        regular = _regular_dc_gain_sparse(A, B, C, D)
        if regular is not None:
            return regular
        A = A.toarray()
    A = np.asarray(A, dtype=float)
    regular = _regular_dc_gain(A, B, C, D)
    if regular is not None:
        return regular
    import scipy.linalg

    # a diagonal similarity (powers of 2, exact) evens out rows and columns first
    A, (T_scale, _) = scipy.linalg.matrix_balance(A, permute=False, separate=True)
    B, C = B / T_scale[:, None], C * T_scale[None, :]
    scale = float(np.abs(A).sum(axis=0).max())
    if scale == 0.0:
        split = 0  # A = 0: every pole at the origin
        T, Z = A, np.eye(n)
    else:
        threshold = ZERO_POLE_TOLERANCE * scale
        T, Z, split = scipy.linalg.schur(
            A, output="real", sort=lambda re, im: math.hypot(re, im) > threshold
        )
    if split == n:
        return D - C @ np.linalg.solve(A, B)
    T11, T12, N = T[:split, :split], T[:split, split:], T[split:, split:].copy()
    # the nilpotent part's diagonal is round-off of the poles at the origin
    N[np.abs(N) <= ZERO_POLE_TOLERANCE * scale] = 0.0
    X = scipy.linalg.solve_sylvester(T11, -N, -T12) if split else np.zeros((0, n - split))
    Bt, Ct = Z.T @ B, C @ Z
    B1, B2 = Bt[:split] - X @ Bt[split:], Bt[split:]
    C1, C2 = Ct[:, :split], Ct[:, :split] @ X + Ct[:, split:]
    # sizes of the terms that formed B2 and C2: a coefficient far below them is round-off
    Ct_size = np.abs(C) @ np.abs(Z)
    B2_size = (np.abs(Z.T) @ np.abs(B))[split:]
    C2_size = Ct_size[:, :split] @ np.abs(X) + Ct_size[:, split:]
    gain = D - (C1 @ np.linalg.solve(T11, B1) if split else 0.0)
    power, magnitude = np.eye(n - split), np.eye(n - split)
    for _ in range(n - split):
        term = C2 @ power @ B2
        size = C2_size @ magnitude @ B2_size
        real = (np.abs(term) > LAURENT_TOLERANCE * size) & (size > 0)
        # a later (higher) power dominates as s -> 0, so it overwrites the sign
        gain = np.where(real, np.copysign(np.inf, term), gain)
        power, magnitude = N @ power, np.abs(N) @ magnitude
        if not power.any():
            break
    return gain


#: a row-and-column equilibrated A whose reciprocal condition number is below this is
#: taken as singular (common practice, no source)
SINGULAR_RCOND = 1e-12


def _regular_dc_gain(A, B, C, D) -> np.ndarray | None:
    """``D - C A^-1 B`` when ``A`` is safely invertible, else ``None``.

    ``A`` is equilibrated by row and then column scaling first (``A^-1 B = Dc (Dr A Dc)^-1
    Dr B``), so a part many decades smaller than the rest (a 1e-300 F capacitor beside
    a 1 mH inductor) does not make a regular matrix look singular. The 1-norm reciprocal
    condition number decides: exact from the inverse for small blocks (numpy only, so
    `inspect` need not import SciPy), LAPACK's estimate (``dgecon``) for large ones.
    """
    rows = np.abs(A).max(axis=1)
    if not rows.all():
        return None
    scaled = A / rows[:, None]
    cols = np.abs(scaled).max(axis=0)
    if not cols.all():
        return None
    scaled = scaled / cols[None, :]
    norm = np.abs(scaled).sum(axis=0).max()
    if A.shape[0] <= LARGE_BLOCK_STATES:
        try:
            inverse = np.linalg.inv(scaled)
        except np.linalg.LinAlgError:
            return None
        rcond = 1.0 / (norm * np.abs(inverse).sum(axis=0).max())
        if not rcond > SINGULAR_RCOND:
            return None
        X = np.linalg.solve(scaled, B / rows[:, None]) / cols[:, None]
    else:
        import scipy.linalg

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", scipy.linalg.LinAlgWarning)  # decided below
            lu, piv = scipy.linalg.lu_factor(scaled, check_finite=False)
        rcond, info = scipy.linalg.lapack.dgecon(lu, norm, norm="1")
        if info != 0 or not rcond > SINGULAR_RCOND:
            return None
        X = scipy.linalg.lu_solve((lu, piv), B / rows[:, None], check_finite=False) / cols[:, None]
    gain = D - C @ X
    return gain if np.all(np.isfinite(gain)) else None


def is_regular(A: np.ndarray) -> bool:
    """True when the dense ``A`` has no pole at the origin by :func:`dc_gain_limit`'s test.

    That test comes first there: ``A`` equilibrated by rows and columns must have a 1-norm
    condition number below ``1 / SINGULAR_RCOND``. It holds for a stiff block however small
    its slowest pole is beside its norm (aux_buck: -1.2e3 /s beside 7e14 /s).
    """
    n = A.shape[0]
    empty = np.zeros((n, 0))
    return _regular_dc_gain(np.asarray(A, float), empty, empty.T, np.zeros((0, 0))) is not None


def _regular_dc_gain_sparse(A, B, C, D) -> np.ndarray | None:
    """:func:`_regular_dc_gain` for a SciPy sparse ``A``: the same equilibration, a sparse
    LU (SuperLU), and the 1-norm of the inverse estimated by Higham and Tisseur's block
    method (SIAM J. Matrix Anal. Appl. 21(4), 2000; ``scipy.sparse.linalg.onenormest``)."""
    import scipy.sparse as sparse
    from scipy.sparse.linalg import LinearOperator, onenormest, splu

    A = sparse.csr_matrix(A, dtype=float)
    rows = abs(A).max(axis=1).toarray().ravel()
    if not rows.all():
        return None
    scaled = sparse.diags(1.0 / rows) @ A
    cols = abs(scaled).max(axis=0).toarray().ravel()
    if not cols.all():
        return None
    scaled = (scaled @ sparse.diags(1.0 / cols)).tocsc()
    try:
        lu = splu(scaled)
    except RuntimeError:  # exactly singular
        return None
    inverse = LinearOperator(
        scaled.shape, matvec=lu.solve, rmatvec=lambda x: lu.solve(x, trans="T"), dtype=float
    )
    with single_threaded_blas():
        rcond = 1.0 / (abs(scaled).sum(axis=0).max() * onenormest(inverse))
    if not rcond > SINGULAR_RCOND:
        return None
    X = lu.solve(np.ascontiguousarray(B / rows[:, None])) / cols[:, None]
    gain = D - C @ X
    return gain if np.all(np.isfinite(gain)) else None


#: blocks with more states than this get a mode summary instead of every pole
LARGE_BLOCK_STATES = 400


@contextmanager
def single_threaded_blas() -> Iterator[None]:
    """Run the body with BLAS limited to one thread (threadpoolctl).

    Arnoldi iterations and step-by-step exponential actions make thousands of small BLAS
    calls; OpenBLAS starts its threads for each one, and on a busy machine waiting for them
    costs far more than the arithmetic (measured: one 2000-state shift-invert Arnoldi run
    took 2.4 s with the default threads and 0.013 s with one, under load).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        yield


#: relative tolerance of the Arnoldi runs (ARPACK's ``tol``); 1e-10 matches LAPACK's
#: dense eigenvalues to about 1e-8 relative on the tests' ladders
ARNOLDI_TOLERANCE = 1e-10
#: most shift-invert runs spent moving the shift out to the largest pole
_SHIFT_ROUNDS = 6


def extreme_poles(A: Any, count: int = 10) -> tuple[np.ndarray, np.ndarray]:
    """The ``count`` slowest and ``count`` fastest poles of a large ``A`` (rad/s).

    Implicitly restarted Arnoldi with shift-invert (ARPACK via SciPy; Lehoucq, Sorensen and
    Yang, ARPACK Users' Guide, 1998, sec. 3.2: the eigenvalues nearest a shift ``sigma``
    converge first, from a sparse LU of ``A - sigma I``):

    * the slowest: shift just left of the origin (regular even with a pole at ``s = 0``);
    * the fastest: a rough largest-magnitude pole from a few plain Arnoldi steps (relative
      tolerance 1e-4), then a shift just beyond it in complex arithmetic. Plain
      largest-magnitude Arnoldi needs thousands of restarts on a ladder, whose fastest
      modes lie within a few parts per million of each other in magnitude; around the
      shift they are well apart. These are the modes nearest the largest pole, with the
      conjugate of each complex one.

    ``A`` may be dense or SciPy sparse. A block with at most :data:`LARGE_BLOCK_STATES`
    states takes LAPACK's dense eigenvalues instead.

    Returns
    -------
    tuple of numpy.ndarray
        The slowest (ascending magnitude) and the fastest (descending magnitude) poles.
    """
    n = A.shape[0]
    if n <= max(LARGE_BLOCK_STATES, 4 * count + 2):
        dense = A.toarray() if hasattr(A, "toarray") else np.asarray(A, dtype=float)
        p = np.linalg.eigvals(dense) if n else np.zeros(0, dtype=complex)
        order = np.argsort(np.abs(p))
        return p[order[:count]], p[order[::-1][:count]]
    import scipy.sparse as sparse
    from scipy.sparse.linalg import ArpackNoConvergence, eigs

    As = sparse.csc_matrix(A, dtype=float)
    with single_threaded_blas():
        try:
            rough = eigs(As, k=1, which="LM", return_eigenvectors=False, tol=1e-4, ncv=20)
        except ArpackNoConvergence as exc:  # pragma: no cover - a rough value suffices
            rough = exc.eigenvalues
        radius = float(np.abs(rough).max(initial=0.0))
        if radius == 0.0:  # every pole at the origin (A nilpotent), or no estimate
            radius = float(abs(As).sum(axis=0).max())  # the 1-norm bounds every pole
            rough = np.array([-radius])
        if radius == 0.0:
            zeros = np.zeros(count, dtype=complex)
            return zeros, zeros
        top = complex(rough[np.argmax(np.abs(rough))])
        complex_A = As.astype(complex)
        for _ in range(_SHIFT_ROUNDS):
            # 1e-6 beyond the largest pole known, radially: closer than the fastest modes'
            # spacing on the tests' ladders (common practice, no source); repeated from the
            # largest found until it stays, since the rough one may lie inside the cluster
            near = eigs(
                complex_A, k=count, sigma=top * (1 + 1e-6), which="LM",
                return_eigenvectors=False, tol=ARNOLDI_TOLERANCE,
            )  # fmt: skip
            largest = complex(near[np.argmax(np.abs(near))])
            if abs(largest) <= abs(top) * (1 + 1e-9):
                break
            top = largest
        slowest = eigs(
            As, k=count, sigma=-1e-9 * radius, which="LM", return_eigenvectors=False,
            tol=ARNOLDI_TOLERANCE,
        )  # fmt: skip
    fastest = _with_conjugates(near)
    fastest = fastest[np.lexsort((fastest.imag, -np.abs(fastest)))][:count]
    return slowest[np.argsort(np.abs(slowest))], fastest


def _with_conjugates(poles: np.ndarray) -> np.ndarray:
    """Poles of a real matrix found in complex arithmetic: imaginary parts below 1e-10 of
    the magnitude are round-off (set to 0), and every complex pole gets its conjugate."""
    poles = np.asarray(poles, dtype=complex)
    real = np.abs(poles.imag) <= 1e-10 * np.abs(poles)
    poles = np.where(real, poles.real + 0j, poles)
    extra = [p.conjugate() for p in poles[~real] if not np.any(np.isclose(poles, p.conjugate()))]
    return np.concatenate([poles, np.asarray(extra, dtype=complex)])


def modes(poles: np.ndarray) -> list[dict[str, float]]:
    """Natural frequency (rad/s) and damping ratio of each pole.

    For ``p = sigma + j omega``: ``omega_n = |p|``, ``zeta = -sigma / |p|`` (standard
    second-order definitions, e.g. Ogata, Modern Control Engineering, 5th ed., sec. 5-3).
    A pole at the origin has ``omega_n = 0`` and ``zeta = nan``.
    """
    rows = []
    for p in poles:
        wn = abs(p)
        zeta = float(-p.real / wn) if wn > 0 else float("nan")
        rows.append({"real": float(p.real), "imag": float(p.imag), "wn": wn, "zeta": zeta})
    return rows


def block_from_state_space(
    spec: Any, *, file: str | Path | None = None, on_stale: str = "warn"
) -> CircuitBlock:
    """The block of a validated state-space file (:mod:`wirestate.spec.state_space`).

    A reduced block records its source file's SHA-256 digest. When the source, looked up
    relative to ``file``, has changed since, the stored error bound no longer describes
    it: ``on_stale="warn"`` issues a :class:`~wirestate.errors.WirestateWarning` (and a
    note), ``"error"`` raises ``stale_source``. A missing source only adds a note.
    """
    import warnings

    from wirestate.errors import ModelFileError, WirestateWarning
    from wirestate.spec.state_space import file_digest

    head, m = spec.state_space, spec.matrices
    notes: list[str] = []
    record = spec.reduction
    if record is not None:
        notes.append(
            f"reduced from {record.source.file} ({record.source.states} states) by "
            f"{record.method.replace('_', ' ')}; H-infinity error bound "
            f"{record.error_bound:.6g} ({record.relative_error_bound:.3g} of the full "
            "block's norm)"
        )
        if file is not None:
            source = Path(file).parent / record.source.file
            if not source.is_file():
                notes.append(f"source {record.source.file} not found: digest not checked")
            elif file_digest(source) != record.source.sha256:
                message = (
                    f"the source {record.source.file} changed since this block was reduced "
                    "from it (SHA-256 differs): the stored error bound no longer describes "
                    "it; run `wirestate reduce` again"
                )
                if on_stale == "error":
                    raise ModelFileError(
                        "stale_source",
                        message,
                        file=str(file),
                        location=("reduction", "source", "sha256"),
                    )
                warnings.warn(WirestateWarning(f"{file}: {message}"), stacklevel=2)
                notes.append(f"stale: {message}")
    n = len(head.states)
    return CircuitBlock(
        name=head.name,
        A=np.array(m.A, dtype=float).reshape(n, n),
        B=np.array(m.B, dtype=float).reshape(n, len(head.inputs)),
        C=np.array(m.C, dtype=float).reshape(len(head.outputs), n),
        D=np.array(m.D, dtype=float).reshape(len(head.outputs), len(head.inputs)),
        states=list(head.states),
        inputs=list(head.inputs),
        outputs=list(head.outputs),
        x0=None if m.initial is None else np.array(m.initial, dtype=float),
        input_defaults=dict(head.input_defaults),
        units=dict(head.units),
        spec=spec,
        notes=notes,
    )


def load_state_space_block(path: str | Path, *, on_stale: str = "warn") -> CircuitBlock:
    """Read, validate and load a state-space file as a block (see
    :func:`block_from_state_space`)."""
    from wirestate.spec.state_space import load_state_space_spec

    return block_from_state_space(load_state_space_spec(path), file=path, on_stale=on_stale)
