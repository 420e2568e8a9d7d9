"""The compiled event search (simulate/event_kernel.c) against the Python search it follows.

The Python path is the reference: on the same engine state, stretch by stretch, the kernel
must find the same crossing (or none), and whole runs must give the same events and
states. The two differ only by round-off: the kernel sums the modal terms in its own
order where numpy calls BLAS. That round-off can move the last safeguarded Newton step
of a located event anywhere inside the root's own bracket, ``tol_t = min(1e-12 * stretch,
1 ps)`` (``EVENT_RELATIVE_TOLERANCE``, ``EVENT_ABSOLUTE_TOLERANCE``), so event times are
compared to ``tol_t`` and states to 1e-12 of each row's range plus what the row moves
during the largest event-time difference (its fastest rate: the largest modulus of an
oscillating eigenvalue times the row's range). On the snubbed buck below the events moved
by up to 9.3e-18 s; its ring (2.2e8 rad/s) makes that 2.1e-9 of a range, and the ring
states differed by 2.1e-10 of their range, the slow ones by 7e-13.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from tests.reference.test_switched_physics import snubbed_buck
from tests.reference.test_switched_reference import buck
from wirestate import native
from wirestate.errors import WirestateWarning
from wirestate.simulate import switched
from wirestate.simulate.switched import SwitchedEngine, simulate_switched

try:
    native.find_c_compiler()
    NO_COMPILER = ""
except native.NoCompilerError as exc:
    NO_COMPILER = str(exc)

needs_compiler = pytest.mark.skipif(
    bool(NO_COMPILER), reason=f"the event kernel needs a C compiler: {NO_COMPILER}"
)

CASES = {
    # a snubbed buck: a 30 MHz turn-off ring searched on the ring points, stiff off modes
    "snubbed_buck": (
        snubbed_buck,
        dict(
            until=6e-5,
            step=2e-7,
            inputs={"Q1": "pwm:100kHz,duty=0.35"},
            fine_step=2e-9,
            fine_window=2e-7,
        ),
    ),  # fmt: skip
    # a buck in discontinuous conduction: the diode turn-off located in every off-time
    "dcm_buck": (
        lambda: buck(2e-6, 100e-6, 10.0, ron=1e-4, v0=4.0),
        dict(until=5e-5, step=1e-6, inputs={"Q1": "pwm:100kHz,duty=0.3"}),
    ),
}


@pytest.fixture
def kernel_allowed(monkeypatch):
    """The kernel loaded whatever WIRESTATE_NO_NATIVE says outside the test."""
    monkeypatch.delenv(native.NO_NATIVE_VARIABLE, raising=False)
    if switched.event_kernel() is None:
        pytest.fail("a compiler is present but the event kernel did not load")


def _run(make, options, monkeypatch, python: bool):
    if python:
        monkeypatch.setenv(native.NO_NATIVE_VARIABLE, "1")
    else:
        monkeypatch.delenv(native.NO_NATIVE_VARIABLE, raising=False)
    return simulate_switched(make(), **options)


@needs_compiler
@pytest.mark.parametrize("case", sorted(CASES))
def test_each_stretch_finds_the_crossing_the_python_search_finds(case, monkeypatch, kernel_allowed):
    make, options = CASES[case]
    python_search = SwitchedEngine._first_crossing
    compared: list[tuple] = []

    def both(self, data, held, z0, h, tol_t):
        kernel, self._kernel = self._kernel, None
        expected = python_search(self, data, held, z0, h, tol_t)
        leaving = set(self._leaving)
        self._kernel = kernel
        if kernel is not None and data.modal.ok and data.modal.lam.size:
            self._leaving = set()
            found = self._native_crossing(data, held, z0, h, tol_t)
            got = self._leaving if found is not None else leaving
            compared.append((expected, found, tol_t, set(leaving), set(got)))
        self._leaving = leaving
        return expected

    monkeypatch.setattr(SwitchedEngine, "_first_crossing", both)
    _run(make, options, monkeypatch, python=False)
    assert len(compared) >= 10
    located = [c for c in compared if c[0] is not None]
    assert located, "the case must locate diode events"
    for expected, found, tol_t, leaving, got in compared:
        assert (expected is None) == (found is None), (expected, found, leaving, got)
        if expected is not None:
            assert abs(found - expected) <= tol_t  # the root's own bracket (module doc)
            assert got == leaving, (expected, found, leaving, got)


@needs_compiler
@pytest.mark.parametrize("case", sorted(CASES))
def test_whole_runs_agree_with_the_python_path(case, monkeypatch, kernel_allowed):
    make, options = CASES[case]
    ours = _run(make, options, monkeypatch, python=False)
    reference = _run(make, options, monkeypatch, python=True)
    assert [(e.part, e.change, e.located) for e in ours.events] == [
        (e.part, e.change, e.located) for e in reference.events
    ]
    times = np.array([e.time for e in ours.events])
    ref_times = np.array([e.time for e in reference.events])
    moved = float(np.abs(times - ref_times).max(initial=0.0))
    assert moved <= 1e-12 * options["until"]  # within tol_t of the longest stretch
    # fine samples sit at the event time plus multiples of the fine step: they move with
    # it (and round once more)
    assert len(ours.time) == len(reference.time)
    assert np.abs(ours.time - reference.time).max() <= moved + 4 * np.spacing(options["until"])
    # between samples a state moves at most at its fastest ring's rate, |lambda| times its
    # range (the stiff real modes, 1e14 /s, are gone femtoseconds after an event, long
    # before the next sample); dcm_buck has no ring and no moved event
    circuit = make()
    rate = 0.0
    for interval in reference.modes:
        lam = np.linalg.eigvals(circuit.mode(interval.on).A)
        rate = max(rate, float(np.abs(lam[lam.imag != 0.0]).max(initial=0.0)))
    span = np.ptp(reference.states, axis=1, keepdims=True)
    tolerance = span * (1e-12 + rate * moved)
    assert np.all(np.abs(ours.states - reference.states) <= tolerance)


@needs_compiler
def test_the_kernel_is_built_once_into_the_cache(tmp_path, monkeypatch):
    monkeypatch.setenv(native.CACHE_VARIABLE, str(tmp_path))
    first = native.build_kernel("wirestate.simulate", "event_kernel.c")
    stamp = first.stat().st_mtime_ns
    second = native.build_kernel("wirestate.simulate", "event_kernel.c")
    assert second == first and second.stat().st_mtime_ns == stamp
    # only the finished library is left: the build folder is gone
    assert [p.name for p in tmp_path.iterdir()] == [first.name]


def test_without_a_compiler_the_python_path_runs_with_one_note(tmp_path, monkeypatch):
    monkeypatch.delenv(native.NO_NATIVE_VARIABLE, raising=False)
    monkeypatch.setenv(native.CACHE_VARIABLE, str(tmp_path))
    monkeypatch.setenv("CC", "no-such-compiler-anywhere")
    monkeypatch.setattr(switched, "_kernel_state", {})
    with pytest.warns(WirestateWarning, match="no-such-compiler-anywhere.*runs in Python"):
        first = switched.event_kernel()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # said once, not at every engine
        assert switched.event_kernel() is None and first is None
        make, options = CASES["dcm_buck"]
        result = simulate_switched(make(), **options)
    assert any(e.located for e in result.events)


def test_the_environment_variable_forces_the_python_path(monkeypatch):
    monkeypatch.setenv(native.NO_NATIVE_VARIABLE, "1")
    assert native.is_native_disabled() and switched.event_kernel() is None
    make, _ = CASES["dcm_buck"]
    assert SwitchedEngine(make())._kernel is None
    monkeypatch.setenv(native.NO_NATIVE_VARIABLE, "0")
    assert not native.is_native_disabled()


@needs_compiler
def test_states_in_modal_form_agree_with_the_numpy_evaluation(kernel_allowed):
    # the stiffest mode of the snubbed buck (eigenvalues from -5e14 /s to 1e4 /s), from
    # femtoseconds to ten microseconds: the same phi1 (from e^w above |w| = 1e-2, the
    # series below) and modal sum, summed in another order; 1e-13 of the largest state
    # (round-off of sums over terms up to cond(V) times larger than the state)
    engine = SwitchedEngine(snubbed_buck(), x0=np.array([2.4, 0.1, 0.2, 2.4, 12.0]))
    engine.apply(np.array([48.0, 1.0]))
    taus = np.concatenate([[0.0], np.geomspace(1e-15, 1e-5, 300)])
    data = engine.data()
    ours = engine.states_at(data, taus)
    engine._kernel_states = None
    reference = engine.states_at(data, taus)
    assert np.abs(ours - reference).max() <= 1e-13 * np.abs(reference).max()


@needs_compiler
@pytest.mark.parametrize("case", sorted(CASES))
def test_each_consistency_check_picks_the_diode_the_python_check_picks(
    case, monkeypatch, kernel_allowed
):
    # after every event and input change the engine settles the diodes: the kernel and the
    # Python check must name the same diode (or none) on the same state; a sum in another
    # order can only matter for a margin within round-off of its band, which the runs here
    # do not meet (if one did, both choices would be consistent within the band)
    make, options = CASES[case]
    python_check = SwitchedEngine._inconsistent_diode
    verdicts: list[tuple] = []

    def both(self):
        check, self._kernel_check = self._kernel_check, None
        expected = python_check(self)
        self._kernel_check = check
        if check is not None and self.diodes:
            verdicts.append((expected, python_check(self)))
        return expected

    monkeypatch.setattr(SwitchedEngine, "_inconsistent_diode", both)
    _run(make, options, monkeypatch, python=False)
    assert len(verdicts) >= 10 and any(v[0] is not None for v in verdicts)
    assert all(expected == found for expected, found in verdicts)


SAMPLING_CASES = {
    **CASES,
    # fine samples every half output step: every other one within snap of an output step
    # (merged onto it), and the fine window spanning several output steps
    "fine_on_the_grid": (
        snubbed_buck,
        {**CASES["snubbed_buck"][1], "until": 3e-5, "fine_step": 1e-7, "fine_window": 1e-6},
    ),
    # the switch held on: one stretch of 599 samples, more than the kernel's buffers
    # hold at first (they grow), and one of 5999, beyond their limit (its own arrays)
    "long_stretch": (snubbed_buck, dict(until=6e-5, step=1e-7, inputs={"Q1": 1.0})),
    "longer_stretch": (snubbed_buck, dict(until=6e-4, step=1e-7, inputs={"Q1": 1.0})),
}


@needs_compiler
@pytest.mark.parametrize("case", sorted(SAMPLING_CASES))
def test_each_stretch_samples_where_the_python_sampler_does(case, monkeypatch, kernel_allowed):
    # the kernel generates a stretch's sample times itself (ws_sample_stretch) in the same
    # floating-point expressions as SampleClock.sample and evaluates the states there by
    # ws_states_at: the same times and states to the bit as the sampler, then states_at
    make, options = SAMPLING_CASES[case]
    kernel_samples = SwitchedEngine._native_samples
    compared: list[tuple] = []

    def both(self, clock, data, held, stop, include_start):
        chunk = kernel_samples(self, clock, data, held, stop, include_start)
        times = clock.sample(self.time, self.time + stop, include_start)
        states = self.states_at(data, times - self.time, None, held) if len(times) else None
        compared.append((chunk, times, states))
        return chunk

    monkeypatch.setattr(SwitchedEngine, "_native_samples", both)
    result = _run(make, options, monkeypatch, python=False)
    # one long stretch without events, else one per stretch between events
    longest = {"long_stretch": 598, "longer_stretch": switched.KERNEL_SAMPLE_BUFFER_LIMIT}
    assert len(compared) >= (1 if case in longest else 10)
    assert max(len(times) for _, times, _ in compared) > longest.get(case, 1)
    for chunk, times, states in compared:
        if not len(times):
            assert chunk is None
            continue
        assert np.array_equal(chunk.times, times)
        assert np.array_equal(chunk.states, states)
    assert np.all(np.diff(result.time) > 0.0)
