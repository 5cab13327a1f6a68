"""``hsat check``: the account a respiratory therapist reads for a returned kit.

Outside references: the generator's ground truth for the invalid intervals and channels
it wrote (checked to within a few seconds), and the 4-hour adequacy minimum of Kapur et
al. JCSM 2017 (standards.md §3.3, from memory).
"""

from __future__ import annotations

import json
import subprocess
import sys
from datetime import datetime
from pathlib import Path

import numpy as np
import pytest

from hsat import errors
from hsat.cli import main
from hsat.io import write_edf
from hsat.recording import Signal

START = datetime(2025, 10, 12, 22, 15, 0)
HSAT = Path(sys.executable).with_name("hsat")
KIT_PROFILES = {"generic": None, "alder": "alder-r3", "birch": "birch-p2"}
TOLERANCE_S = 5.0


def _write(path: Path, hours: float, spo2_valid_h: float | None = None) -> Path:
    n = int(hours * 3600)
    t10 = np.arange(n * 10) / 10
    breath = np.sin(2 * np.pi * 0.25 * t10)
    spo2 = np.full(n, 96.0)
    if spo2_valid_h is not None:
        spo2[int(spo2_valid_h * 3600):] = np.nan  # no reading
    signals = [
        Signal("", "Resp nasal pressure", 10, -breath * np.abs(breath), "cmH2O"),
        Signal("", "Resp thorax", 10, breath, "uV"),
        Signal("", "Resp abdomen", 10, breath, "uV"),
        Signal("", "SpO2", 1, spo2, "%"),
        Signal("", "Pulse", 1, np.full(n, 60.0), "bpm"),
        Signal("", "Position", 1, np.zeros(n)),
    ]
    return write_edf(path, signals, start=START)


@pytest.fixture(scope="module")
def adequate(tmp_path_factory) -> Path:
    return _write(tmp_path_factory.mktemp("check") / "good.edf", 4.5)


@pytest.fixture(scope="module")
def inadequate(tmp_path_factory) -> Path:
    return _write(tmp_path_factory.mktemp("check") / "short-oximetry.edf", 4.5, spo2_valid_h=2.7)


def test_text_account_and_pass_verdict(adequate, capsys):
    assert main(["check", str(adequate)]) == errors.EXIT_OK
    out = capsys.readouterr().out
    lines = out.splitlines()
    header = next(i for i, line in enumerate(lines) if line.split()[:2] == ["role", "label"])
    rows = lines[header:header + 7]
    # an aligned table: the label column starts at the same place on every row
    starts = {row.index(row.split()[1]) for row in rows}
    assert len(starts) == 1
    assert rows[1].split()[:4] == ["flow", "Resp", "nasal", "press"]
    assert "10 Hz" in rows[1] and "matched flow pattern" in rows[1]
    assert "Monitoring time" in out or "monitoring time" in out
    verdict = next(line for line in lines if line.startswith(("PASS", "FAIL")))
    assert verdict.startswith("PASS: technically adequate")


def test_json_output(adequate, capsys):
    assert main(["check", str(adequate), "--json"]) == errors.EXIT_OK
    d = json.loads(capsys.readouterr().out)
    assert d["adequate"] is True
    assert d["monitoring_time_h"] == pytest.approx(4.5, abs=0.01)
    assert d["roles"]["spo2"] == {
        "label": "SpO2", "fs": 1.0, "unit": "%", "recorded_unit": "%", "valid_h": 4.5,
        "reason": "label 'SpO2' matched spo2 pattern 'spo2' in profile generic"}


def test_inadequate_study_fails_with_exit_3_and_the_reason(inadequate, capsys):
    """Kapur 2017 (standards.md §3.3, from memory): >= 4 h of valid oximetry and flow."""
    assert main(["check", str(inadequate)]) == errors.EXIT_INADEQUATE
    captured = capsys.readouterr()
    reason = "oximetry valid for 2.7 h; at least 4 h needed (Kapur 2017)"
    assert f"FAIL: technically inadequate: {reason}" in captured.out
    assert captured.err.splitlines() == [f"hsat: {inadequate}: technically inadequate: {reason}"]
    assert main(["check", str(inadequate), "--json"]) == errors.EXIT_INADEQUATE
    d = json.loads(capsys.readouterr().out)
    assert d["adequate"] is False and d["adequacy"]["valid_spo2_h"] == pytest.approx(2.7)


def test_the_installed_command_runs_as_a_subprocess(adequate, tmp_path):
    assert HSAT.exists(), f"console script missing: {HSAT}"
    done = subprocess.run([str(HSAT), "check", "--json", str(adequate)], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["adequate"] is True
    bad = tmp_path / "notes.edf"
    bad.write_text("not a recording\n" * 40)
    done = subprocess.run([str(HSAT), "check", str(bad)], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == errors.EXIT_UNREADABLE
    assert done.stderr.strip().splitlines() == [
        f"hsat: {bad}: not an EDF file (it does not start with the EDF version field '0')"]


# --- generated nights: check against the generator's ground truth ------------------------

@pytest.fixture(scope="module")
def nights(tmp_path_factory) -> dict[str, Path]:
    from hsat.synth import generate_night, preset, write_night

    folder = tmp_path_factory.mktemp("nights")
    specs = {
        "generic": preset("mild", 5, "generic", duration_h=2.5, gaps=((3000.0, 40.0),)),
        "alder": preset("moderate", 8, "alder", duration_h=2.5),
        "birch": preset("severe", 9, "birch", duration_h=2.5, flat_belt_count=1),
    }
    return {kit: write_night(generate_night(spec), folder / f"{kit}-night")[0]
            for kit, spec in specs.items()}


def _check_json(path: Path, profile: str | None, capsys) -> tuple[int, dict]:
    args = ["check", str(path), "--json"] + (["--profile", profile] if profile else [])
    code = main(args)
    return code, json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("kit", ["generic", "alder", "birch"])
def test_generated_night_invalid_intervals_and_channels_match_the_truth(nights, kit, capsys):
    path = nights[kit]
    truth = json.loads(path.with_name(path.stem + ".truth.json").read_text())
    code, d = _check_json(path, KIT_PROFILES[kit], capsys)
    assert code in (errors.EXIT_OK, errors.EXIT_INADEQUATE)
    assert truth["invalid"], "the generator placed no invalid episode"

    for ch in truth["channels"]:
        got = d["roles"][ch["role"]]
        assert got["label"] == ch["label"] and got["fs"] == ch["fs"]
    assert set(d["roles"]) == {ch["role"] for ch in truth["channels"]}

    found = [e for e in d["exclusions"] if e["role"] or e["reason"] == "EDF+D gap"]
    matched: set[int] = set()
    for inv in truth["invalid"]:
        hits = [k for k, e in enumerate(found) if e["role"] == inv["role"]
                and abs(e["start_s"] - inv["start_s"]) <= TOLERANCE_S
                and abs(e["end_s"] - inv["end_s"]) <= TOLERANCE_S]
        assert hits, f"{kit}: truth {inv} not recovered; found {found}"
        matched.update(hits)
    extra = [e for k, e in enumerate(found) if k not in matched]
    # SpO2 movement artefacts are the generator's realism, not in its invalid list;
    # nothing else may be excluded that the truth does not hold.
    assert all(e["role"] == "spo2" and e["reason"] == "implausible jump"
               and e["duration_s"] <= 60 for e in extra), extra
    assert d["monitoring_time_h"] == pytest.approx(truth["monitoring_time_s"] / 3600, rel=0.15)
    valid_both = d["adequacy"]["valid_flow_and_spo2_h"]
    assert d["adequate"] is (valid_both >= 4.0)


@pytest.mark.parametrize("kit", ["alder", "birch"])
def test_kit_nights_without_profile_say_which_profile_to_use(nights, kit, capsys):
    _, d = _check_json(nights[kit], None, capsys)
    assert any(f"use --profile {KIT_PROFILES[kit]}" in w for w in d["warnings"])
