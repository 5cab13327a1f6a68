"""``hsat analyze``: the study folder it writes, its output and its exit codes.

Exit codes are the documented ones (hsat/errors.py): 0 ok, 3 technically inadequate
(results still written), 4 unreadable input, 6 bad configuration. A technically
adequate HSAT needs >= 4 h of valid flow and oximetry (Kapur et al. 2017, standards.md
§3.3 and §9 row 8, from memory there).
"""

from __future__ import annotations

import json
import os
import stat
from pathlib import Path

import jsonschema
import pandas as pd
import pytest

from hsat.cli import main
from hsat.errors import EXIT_CONFIG, EXIT_INADEQUATE, EXIT_OK, EXIT_OUTPUT, EXIT_UNREADABLE
from hsat.events import EVENT_COLUMNS, EVENT_TYPES
from hsat.outputs import read_events_csv
from hsat.synth import generate_night, preset, write_night

SCHEMA = json.loads((Path(__file__).resolve().parents[1] / "hsat" / "schemas"
                     / "summary.schema.json").read_text())


@pytest.fixture(scope="module")
def nights(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("analyze_nights")
    out = {}
    for name, spec in {
        "adequate": preset("moderate", seed=3, kit="generic", duration_h=5.0),
        "short": preset("mild", seed=4, kit="generic", duration_h=2.0),
    }.items():
        write_night(generate_night(spec), folder / f"{name}.edf")
        out[name] = folder / f"{name}.edf"
    return out


def _run(args: list[str], capsys) -> tuple[int, str, str]:
    code = main(args)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_analyze_writes_the_study_folder(nights, tmp_path, capsys):
    out = tmp_path / "STUDY"
    code, stdout, stderr = _run(["analyze", str(nights["adequate"]), "--out", str(out),
                                 "--no-pdf"], capsys)
    assert code == EXIT_OK, stderr
    summary = json.loads((out / "summary.json").read_text())
    jsonschema.Draft202012Validator(SCHEMA).validate(summary)
    # both built-in rule sets side by side, each recorded with its content hash
    assert [r["name"] for r in summary["rule_sets"]] == ["aasm-3pct", "aasm-4pct"]
    assert all(len(r["sha256"]) == 64 for r in summary["rule_sets"])
    assert summary["study"]["input_file"] == "adequate.edf"
    for name in ("aasm-3pct", "aasm-4pct"):
        assert f"{name}" in stdout and "REI" in stdout
    assert "technically adequate" in stdout
    # the 3 % rule scores at least as many hypopneas as the 4 % rule (AASM 1A vs 1B)
    ix = summary["indices"]
    assert ix["aasm-3pct"]["hi"] >= ix["aasm-4pct"]["hi"]
    events = pd.read_csv(out / "events.csv")
    assert list(events.columns[:4]) == ["onset_s", "duration_s", "event", "rule_sets"]
    assert list(events.columns[: len(EVENT_COLUMNS)]) == list(EVENT_COLUMNS)
    assert set(events["event"]) <= set(EVENT_TYPES)
    assert len(events) > 0
    # patient data: owner-only files and folder
    assert stat.S_IMODE(os.stat(out).st_mode) == 0o700
    for f in ("summary.json", "events.csv"):
        assert stat.S_IMODE(os.stat(out / f).st_mode) == 0o600
    assert not list(out.glob(".*.part"))  # no temporary files left behind


def test_events_csv_reads_back_to_the_same_indices(nights, tmp_path, capsys):
    from hsat import api
    from hsat.breaths import detect_breaths
    from hsat.metrics import summarize
    from hsat.rulesets import load_rule_sets

    out = tmp_path / "STUDY"
    assert _run(["analyze", str(nights["adequate"]), "--out", str(out), "--no-pdf"],
                capsys)[0] == EXIT_OK
    summary = json.loads((out / "summary.json").read_text())
    scoring = read_events_csv(out / "events.csv")
    cond = api.condition(api.read(nights["adequate"]))
    again = summarize(cond, detect_breaths(cond), scoring, load_rule_sets(None))
    for name in ("aasm-3pct", "aasm-4pct"):
        for key in ("rei", "oai", "cai", "mai", "hi", "odi", "severity"):
            assert again["indices"][name][key] == summary["indices"][name][key], (name, key)


def test_inadequate_study_exits_3_and_still_writes(nights, tmp_path, capsys):
    out = tmp_path / "SHORT"
    code, stdout, _ = _run(["analyze", str(nights["short"]), "--out", str(out), "--no-pdf"],
                           capsys)
    assert code == EXIT_INADEQUATE
    assert "INADEQUATE" in stdout
    summary = json.loads((out / "summary.json").read_text())
    assert summary["adequacy"]["adequate"] is False
    assert (out / "events.csv").exists()


def test_one_rule_set_by_name_and_a_copied_file(nights, tmp_path, capsys):
    rules = Path(__file__).resolve().parents[1] / "rules"
    mine = tmp_path / "lab.toml"
    mine.write_text((rules / "aasm-4pct.toml").read_text().replace(
        'name = "aasm-4pct"', 'name = "lab-4pct"'))
    out = tmp_path / "ONE"
    code, stdout, stderr = _run(["analyze", str(nights["adequate"]), "--out", str(out),
                                 "--no-pdf", "--rules", "aasm-3pct", "--rules", str(mine)],
                                capsys)
    assert code == EXIT_OK, stderr
    summary = json.loads((out / "summary.json").read_text())
    assert list(summary["indices"]) == ["aasm-3pct", "lab-4pct"]


def test_bad_rule_file_exits_6_without_output(nights, tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text('name = "x"\n[apnea]\ndrop_pct = 130\n')
    out = tmp_path / "BAD"
    code, _, stderr = _run(["analyze", str(nights["adequate"]), "--out", str(out),
                            "--no-pdf", "--rules", str(bad)], capsys)
    assert code == EXIT_CONFIG
    assert "bad.toml" in stderr and "apnea.drop_pct" in stderr
    assert "Traceback" not in stderr
    assert not (out / "summary.json").exists()


def test_missing_recording_exits_4(tmp_path, capsys):
    code, _, stderr = _run(["analyze", str(tmp_path / "nope.edf"), "--out",
                            str(tmp_path / "X"), "--no-pdf"], capsys)
    assert code == EXIT_UNREADABLE
    assert "nope.edf" in stderr and "Traceback" not in stderr


def test_missing_report_module_gives_a_clear_message(nights, tmp_path, capsys, monkeypatch):
    # until the PDF exists, the default path must fail clearly, after writing the results
    import sys

    monkeypatch.setitem(sys.modules, "hsat.report", None)  # import now raises ImportError
    out = tmp_path / "NOPDF"
    code, _, stderr = _run(["analyze", str(nights["adequate"]), "--out", str(out)], capsys)
    assert code == 7  # hsat.errors.EXIT_OUTPUT
    assert "--no-pdf" in stderr and "Traceback" not in stderr
    assert (out / "summary.json").exists() and (out / "events.csv").exists()


@pytest.mark.parametrize("record", ["signoff-log.jsonl", "review-edits.jsonl"])
def test_a_signed_or_reviewed_folder_is_never_re_analysed(nights, tmp_path, capsys, record):
    # A signed report is never overwritten, nor the scoring it refers to (common practice:
    # the signed record stays as it was signed; amendments are new versions).
    out = tmp_path / "STUDY"
    out.mkdir()
    (out / record).write_text('{"version": 1}\n')
    (out / "summary.json").write_text('{"as": "signed"}\n')
    code, _, stderr = _run(["analyze", str(nights["short"]), "--out", str(out),
                            "--no-pdf"], capsys)
    assert code == EXIT_OUTPUT
    assert str(out) in stderr and record in stderr and "new folder" in stderr
    assert (out / "summary.json").read_text() == '{"as": "signed"}\n'
    assert sorted(p.name for p in out.iterdir()) == sorted([record, "summary.json"])
