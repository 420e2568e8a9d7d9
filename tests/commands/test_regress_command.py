"""`wirestate regress`: bundled models pass, a changed part is caught, updates are atomic."""

from __future__ import annotations

import os
import re
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from wirestate.cli import main
from wirestate.report import golden
from wirestate.spec import load_circuit

ROOT = Path(__file__).resolve().parents[2]
MODELS = ROOT / "models"

DIVIDER = """
[circuit]
name = "sense_divider"

[parts.Vs]
kind = "voltage_source"
nodes = ["in", "gnd"]
value = "48V"

[parts.R1]
kind = "resistor"
nodes = ["in", "out"]
value = "10k"

[parts.C1]
kind = "capacitor"
nodes = ["out", "gnd"]
value = "100nF"

[parts.Rs]
kind = "resistor"
nodes = ["in", "gnd"]
value = "{rs}"

[outputs.v_out]
voltage = "out"
[outputs.i_Rs]
current = "Rs"
"""


def write_divider(models: Path, rs: str = "1k") -> Path:
    path = models / "sense_divider.toml"
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(DIVIDER.format(rs=rs), encoding="utf-8")
    return path


def bundled_circuits() -> list[Path]:
    return [
        p
        for p in golden.discover_models(MODELS, MODELS / "golden")
        if golden.detect_kind(p) == "circuit"
    ]


def test_bundled_models_match_their_golden_files(monkeypatch, capsys):
    monkeypatch.chdir(ROOT)
    assert golden.discover_models(MODELS, MODELS / "golden"), "models/ holds no model files"
    code = main(["regress"])
    out = capsys.readouterr().out
    assert code == 0, out
    assert "0 drifted, 0 error(s)" in out


def _bump_part_value(text: str, part: str, factor: float, value: float) -> str:
    # replace the `value = ...` line inside [parts.<part>] by the scaled SI value
    section = re.search(rf"^\[parts\.{re.escape(part)}\]\s*$(.*?)(?=^\[|\Z)", text, re.M | re.S)
    assert section, part
    body = re.sub(
        r"^value\s*=.*$", f"value = {value * factor!r}", section.group(1), count=1, flags=re.M
    )
    return text[: section.start(1)] + body + text[section.end(1) :]


def test_a_changed_part_in_a_bundled_model_is_caught(tmp_path, monkeypatch, capsys):
    circuits = bundled_circuits()
    if not circuits:
        pytest.skip("no bundled circuit models yet")
    source = circuits[0]
    spec = load_circuit(source)
    # a capacitor or inductor sets a state, so a 10 % change must move a pole
    part = next(name for name, p in spec.parts.items() if p.kind in ("capacitor", "inductor"))
    copy = tmp_path / "models"
    shutil.copytree(MODELS, copy)
    model = copy / source.relative_to(MODELS)
    model.write_text(
        _bump_part_value(source.read_text(encoding="utf-8"), part, 1.1, spec.parts[part].value),
        encoding="utf-8",
    )
    assert load_circuit(model).parts[part].value == pytest.approx(1.1 * spec.parts[part].value)
    junit = tmp_path / "report.xml"
    code = main(["regress", str(model), "--golden", str(copy / "golden"), "--junit", str(junit)])
    out = capsys.readouterr().out
    assert code == 1, out
    assert re.search(rf"{re.escape(str(model))}\s+poles\s", out), out
    case = ET.parse(junit).getroot().find("testcase")
    assert case is not None and "poles" in case.find("failure").get("message")


def test_update_then_pass_then_drift_names_the_right_quantities(tmp_path, capsys):
    models = tmp_path / "models"
    model = write_divider(models)
    gold = models / "golden"
    assert main(["regress", str(model), "--golden", str(gold), "--update"]) == 0
    assert "created" in capsys.readouterr().out
    assert (gold / "sense_divider.json").is_file()
    assert main(["regress", str(model), "--golden", str(gold)]) == 0
    capsys.readouterr()

    # Rs sits directly across the ideal source: it changes the current output only, never
    # the R1-C1 pole (common circuit fact: an ideal source's voltage ignores its load)
    write_divider(models, rs="1.2k")
    junit = tmp_path / "out" / "regress.xml"
    code = main(["regress", str(model), "--golden", str(gold), "--junit", str(junit)])
    out = capsys.readouterr().out
    assert code == 1
    drifted = set(re.findall(r"sense_divider\.toml\s+(\S+)\s+Vs->(\S+)", out))
    assert ("dc_gain", "i_Rs") in drifted
    assert ("step", "i_Rs") in drifted
    assert ("frequency_response.magnitude", "i_Rs") in drifted
    assert not any(output == "v_out" for _, output in drifted)
    assert not re.search(r"sense_divider\.toml\s+poles", out)
    # DC current 48 V / 1.2 kOhm per volt -> gain 1/1200 S vs 1/1000 S before (Ohm's law)
    assert "0.001" in out and "0.000833333" in out

    root = ET.parse(junit).getroot()
    assert root.get("failures") == "1"
    failure = root.find("testcase/failure")
    assert failure is not None and "dc_gain" in failure.get("message")

    # --update prints what changed, rewrites, and the model passes again
    assert main(["regress", str(model), "--golden", str(gold), "--update"]) == 0
    out = capsys.readouterr().out
    assert "updated" in out and "dc_gain" in out
    assert main(["regress", str(model), "--golden", str(gold)]) == 0
    assert main(["regress", str(model), "--golden", str(gold), "--update"]) == 0
    assert "unchanged" in capsys.readouterr().out


def test_interrupted_update_leaves_the_golden_file_intact(tmp_path, monkeypatch, capsys):
    models = tmp_path / "models"
    model = write_divider(models)
    gold = models / "golden"
    assert main(["regress", str(model), "--golden", str(gold), "--update"]) == 0
    target = gold / "sense_divider.json"
    before = target.read_bytes()
    write_divider(models, rs="2k")

    def interrupted_replace(src, dst):
        raise KeyboardInterrupt  # Ctrl-C between writing the temp file and the rename

    monkeypatch.setattr(os, "replace", interrupted_replace)
    assert main(["regress", str(model), "--golden", str(gold), "--update"]) == 130
    assert target.read_bytes() == before
    assert [p.name for p in gold.iterdir()] == ["sense_divider.json"]


def test_interrupted_json_write_leaves_no_partial_file(tmp_path, monkeypatch, capsys):
    models = tmp_path / "models"
    model = write_divider(models)
    gold = models / "golden"
    assert main(["regress", str(model), "--golden", str(gold), "--update"]) == 0
    target = gold / "sense_divider.json"
    before = target.read_bytes()
    write_divider(models, rs="2k")
    real_fdopen = os.fdopen

    class HalfWriter:
        # writes the first half of the document, then fails like a full disk
        def __init__(self, stream):
            self.stream = stream

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.stream.close()
            return False

        def write(self, text):
            self.stream.write(text[: len(text) // 2])
            raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "fdopen", lambda *a, **k: HalfWriter(real_fdopen(*a, **k)))
    with pytest.raises(OSError):
        main(["regress", str(model), "--golden", str(gold), "--update"])
    assert target.read_bytes() == before
    assert [p.name for p in gold.iterdir()] == ["sense_divider.json"]


def test_missing_golden_file_is_a_user_error(tmp_path, capsys):
    model = write_divider(tmp_path / "models")
    code = main(["regress", str(model), "--golden", str(tmp_path / "models" / "golden")])
    err = capsys.readouterr().err
    assert code == 2
    assert re.search(r"^error: .*sense_divider\.json: no golden file", err, re.M)


def test_a_broken_model_is_reported_and_the_others_still_checked(tmp_path, capsys):
    models = tmp_path / "models"
    good = write_divider(models)
    gold = models / "golden"
    assert main(["regress", str(good), "--golden", str(gold), "--update"]) == 0
    broken = models / "broken.toml"
    broken.write_text("[circuit\nname=", encoding="utf-8")
    code = main(["regress", str(good), str(broken), "--golden", str(gold)])
    captured = capsys.readouterr()
    assert code == 2
    assert "broken.toml" in captured.err and "TOML" in captured.err
    assert re.search(r"sense_divider\.toml\s+circuit\s+pass", captured.out)


def test_unknown_file_kinds_are_skipped_with_a_note(tmp_path, capsys):
    other = tmp_path / "models" / "notes.toml"
    other.parent.mkdir()
    other.write_text("[something]\nx = 1\n", encoding="utf-8")
    assert main(["regress", str(other), "--golden", str(tmp_path / "models" / "golden")]) == 0
    assert "skipped" in capsys.readouterr().out


def test_a_changed_controller_gain_in_a_bundled_system_drifts_the_step_only(tmp_path, capsys):
    source = MODELS / "systems" / "battery_drive.toml"
    if not source.is_file():
        pytest.skip("bundled system models/systems/battery_drive.toml not present")
    text = source.read_text(encoding="utf-8")
    changed, count = re.subn(r"^ki\s*=\s*12\.0\s*$", "ki = 13.0", text, flags=re.M)
    if count != 1:
        pytest.skip("battery_drive.toml no longer has the speed loop's `ki = 12.0` line")
    copy = tmp_path / "models"
    shutil.copytree(MODELS, copy)
    model = copy / "systems" / "battery_drive.toml"
    model.write_text(changed, encoding="utf-8")
    code = main(["regress", str(model), "--golden", str(copy / "golden")])
    out = capsys.readouterr().out
    assert code == 1, out
    # the integral gain acts in the sampled loop: the plant's poles stay, the speed
    # response to a reference step moves
    assert re.search(r"battery_drive\.toml\s+step\s+speed_ref->speed\s", out), out
    assert not re.search(r"battery_drive\.toml\s+poles\s", out)


def test_a_tightened_limit_in_a_bundled_tuning_file_moves_the_tuned_values(tmp_path, capsys):
    source = MODELS / "tuning" / "drive_bus_damping.toml"
    if not source.is_file():
        pytest.skip("bundled tuning file models/tuning/drive_bus_damping.toml not present")
    text = source.read_text(encoding="utf-8")
    # the bus overshoot limit is active at the optimum (least Cd): tightening it from 3 %
    # to 2 % must buy a larger capacitor
    changed, count = re.subn(r'^max = "3%"$', 'max = "2%"', text, flags=re.M)
    if count != 1:
        pytest.skip("drive_bus_damping.toml no longer has the 3 % overshoot limit line")
    copy = tmp_path / "models"
    shutil.copytree(MODELS, copy)
    model = copy / "tuning" / "drive_bus_damping.toml"
    model.write_text(changed, encoding="utf-8")
    code = main(["regress", str(model), "--golden", str(copy / "golden")])
    out = capsys.readouterr().out
    assert code == 1, out
    assert re.search(r"drive_bus_damping\.toml\s+tuned\.optimum\s+Cd\s", out), out


def test_a_changed_sample_time_needs_update_which_derives_a_new_grid(tmp_path, capsys):
    # the golden file keeps its sample grid; a controller period that no longer fits it
    # is an error that says how to proceed, and --update derives a new grid
    models, goldens = tmp_path / "models", tmp_path / "golden"
    models.mkdir()
    for name in ("drive_bus.toml", "drive_bus_loop.toml"):
        shutil.copy(MODELS / "tuning" / name, models / name)
    system = models / "drive_bus_loop.toml"
    args = [str(system), "--golden", str(goldens)]
    assert main(["regress", *args, "--update"]) == 0
    system.write_text(system.read_text().replace('sample_time = "50us"', 'sample_time = "70us"'))
    capsys.readouterr()
    assert main(["regress", *args]) == 2
    assert "regress --update" in capsys.readouterr().err
    assert main(["regress", *args, "--update"]) == 0
    assert "new sample grid" in capsys.readouterr().out
    assert main(["regress", *args]) == 0


def test_a_new_model_is_told_how_to_create_its_own_golden_file_only(tmp_path, capsys):
    # the hint names the one file: `--update` of everything would rewrite every golden file
    models, goldens = tmp_path / "models", tmp_path / "golden"
    models.mkdir()
    new = models / "new_filter.toml"
    shutil.copy(MODELS / "drive_bus_filter.toml", new)
    assert main(["regress", str(new), "--golden", str(goldens)]) == 2
    err = capsys.readouterr().err
    hint = f"wirestate regress --update --golden {goldens} {new}"
    assert hint in err
    # and the hint works: only that golden file appears
    assert main(hint.split()[1:]) == 0
    assert [p.name for p in goldens.rglob("*.json")] == ["new_filter.json"]
