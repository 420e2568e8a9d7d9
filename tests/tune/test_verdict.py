"""The verdict and the report of a tuning that fails (issue 9.3 and 9.4).

Exit statuses (README, "Tuning damping parts"): 0 every limit met at the preferred values,
at every tolerance corner and within every rating; 1 met at the preferred values, but a
tolerance corner or a rating fails; 2 not met at the preferred values, no feasible point,
or the optimiser stopped. The RC cases have closed forms (v(t) = 1 - exp(-t/RC), Nilsson
and Riedel, Electric Circuits, sec. 7.4): v(1 ms) <= 0.5 V needs C >= 1.4427 uF at 1 kohm.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pytest

from wirestate.cli import main
from wirestate.errors import TuningError
from wirestate.tune import load_tuning, solve

MODELS = Path(__file__).resolve().parents[2] / "models" / "tuning"


def test_a_rating_exceeded_is_in_the_verdict_and_the_exit_status(capsys):
    # the bundled system example sizes Cd at 390 uF, whose peak plus 20 kHz ripple current
    # is about 111 % of its 5 A rating: every limit holds at every corner, the rating not
    path = MODELS / "drive_bus_loop_damping.toml"
    assert main(["tune", str(path), "--quiet"]) == 1
    out = capsys.readouterr().out
    result_line = out.strip().splitlines()[-1]
    assert result_line.startswith("result: every limit met") and "Cd current" in result_line


def test_a_failed_snap_exits_2(rc_case, capsys):
    # C1 at most 1.45 uF: the continuous optimum 1.4427 uF is inside, but of its E24
    # neighbours 1.5 uF lies above the bound and 1.3 uF gives v(1 ms) = 0.536 V > 0.5 V
    path = rc_case(c_max="1.45uF")
    code = main(["tune", str(path), "--quiet"])
    captured = capsys.readouterr()
    assert code == 2
    assert captured.err.startswith("error: ") and "slow_rise misses by" in captured.err
    assert "result: NOT every limit is met" in captured.out


def test_an_infeasible_tuning_names_the_active_bound_and_draws_the_figure(
    rc_case, tmp_path, capsys
):
    # C1 at most 1 uF cannot reach the limit: the least violation sits on the bound
    path = rc_case(c_max="1uF")
    figure, report = tmp_path / "fail.png", tmp_path / "fail.json"
    code = main(["tune", str(path), "--quiet", "--plot", str(figure), "--json", str(report)])
    captured = capsys.readouterr()
    assert code == 2
    assert "C1 at its maximum 1 µF" in captured.err
    assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    data = json.loads(report.read_text(encoding="utf-8"))
    # no preferred value was chosen: the column says so instead of repeating the optimum
    assert data["variables"]["C1"]["preferred"] is None
    assert data["variables"]["C1"]["snapped"] is False
    assert "not snapped" in captured.out
    assert data["verdict"]["status"] == "infeasible"


def test_infeasible_is_told_apart_from_not_converged(rc_case):
    path = rc_case()
    path.write_text(path.read_text(encoding="utf-8") + "[solver]\nmax_iterations = 1\n")
    with pytest.raises(TuningError) as stopped:
        solve(load_tuning(path))
    assert stopped.value.result.verdict["status"] == "not_converged"
    assert "stopped without converging" in stopped.value.message
    with pytest.raises(TuningError) as infeasible:
        solve(load_tuning(rc_case(c_max="1uF")))
    assert infeasible.value.result.verdict["status"] == "infeasible"
    assert "infeasible" in infeasible.value.message


def test_a_missed_settling_band_is_told_in_percent(rc_case):
    # settling within 0.1 % of the final 1 V by 1 ms needs RC <= 1 ms / ln(1000) = 145 us;
    # with C1 >= 1 uF (RC >= 1 ms) v(1 ms) = 1 - exp(-1) is 36.8 % short: the message
    # gives the miss in % of the final value, the limit's own unit, not as a bare fraction
    path = rc_case()
    text = path.read_text(encoding="utf-8").replace('min = "0.1uF"', 'min = "1uF"')
    text = text.replace(
        "[objective]",
        '[[limits]]\nname = "settle"\nkind = "settling"\noutput = "v_out"\nband = "0.1%"\n'
        'settled_by = "1ms"\npercent_of = "final"\n\n[objective]',
    )
    path.write_text(text, encoding="utf-8")
    with pytest.raises(TuningError) as info:
        solve(load_tuning(path))
    assert "settle misses by 36.7 %" in info.value.message


def test_optimiser_progress_stays_on_one_line_on_a_terminal():
    from wirestate.commands.tune import Progress
    from wirestate.tune.optimise import iteration_line

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    stream = Terminal()
    progress = Progress(stream)
    for k in range(1, 61):
        progress(iteration_line(k, 1.0 / k))
    progress("snapping to E24: 4 combinations of neighbouring values")
    text = stream.getvalue()
    # sixty iterations overwrite one line; the next message starts on a clean line
    assert text.count("\n") == 1
    assert text.count("\r") >= 60 and "solver iteration 60" in text
    log = io.StringIO()
    logged = Progress(log)
    for k in range(1, 61):
        logged(iteration_line(k, 1.0 / k))
    assert log.getvalue().count("\n") == 7  # the first and every tenth
