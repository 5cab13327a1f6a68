"""The draft report, read back from the PDF: numbers, rule sets, caution, layout facts.

The study is a short synthetic night run through the real pipeline (hsat.api.analyze).
Every headline number printed must equal summary.json's, formatted by hsat.report.fmt.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pytest

from _report_study import (
    ADEQUATE_HOURS,
    clone,
    flat,
    make_study,
    page_texts,
    read_only,
    values_after,
)
from hsat import __version__
from hsat.cli import main
from hsat.errors import EXIT_CONFIG, EXIT_OK, ConfigError, OutputError, UnreadableInput
from hsat.report import (
    CAUTION_POINTS,
    DRAFT_NAME,
    fmt,
    minmax_decimate,
    render_draft,
)
from hsat.report._summary import INDEX_ROWS


@pytest.fixture(scope="module")
def study(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("report")
    folder, edf, site = make_study(root, hours=ADEQUATE_HOURS, seed=41)
    render_draft(folder, site=site, recording=edf)
    return {"folder": folder, "edf": edf, "site": site}


@pytest.fixture(scope="module")
def summary(study: dict[str, Path]) -> dict:
    return json.loads((study["folder"] / "summary.json").read_text())


@pytest.fixture(scope="module")
def pages(study: dict[str, Path]) -> list[str]:
    return page_texts(study["folder"] / DRAFT_NAME)


def test_every_index_on_page_one_equals_summary_json(pages, summary):
    names = list(summary["indices"])
    assert len(names) >= 2  # both built-in rule sets run by default (AASM 1A and 1B)
    for label, key, formatter in INDEX_ROWS:
        shown = values_after(pages[0], label, len(names))
        expected = [formatter(summary["indices"][n][key]) for n in names]
        assert shown == expected, label


def test_positional_and_event_counts_on_page_one_equal_summary_json(pages, summary):
    names = list(summary["indices"])
    pos = [summary["indices"][n]["positional"] for n in names]
    assert values_after(pages[0], "Supine REI (/h)", len(names)) == [
        fmt.index(p["supine"]["rei"]) for p in pos]
    assert values_after(pages[0], "Non-supine REI (/h)", len(names)) == [
        fmt.index(p["non_supine"]["rei"]) for p in pos]
    assert values_after(pages[0], "Respiratory events (apneas + hypopneas)", len(names)) == [
        fmt.count(summary["indices"][n]["counts"]["respiratory_events"]) for n in names]


def test_oximetry_and_time_headlines_on_page_one_equal_summary_json(pages, summary):
    spo2, pulse = summary["spo2"], summary["pulse"]
    expected = {
        "Monitoring time": fmt.hours(summary["monitoring_time_h"]),
        "Recording time (lights off\u2013on)": fmt.hours(summary["recording_time_h"]),
        "SpO2 baseline, %": fmt.pct(spo2["baseline_pct"]),
        "SpO2 mean, %": fmt.pct(spo2["mean_pct"]),
        "SpO2 nadir, %": fmt.pct(spo2["nadir_pct"]),
        "T90, % of oximetry time": fmt.pct(spo2["t90_pct"]),
        "T88, % of oximetry time": fmt.pct(spo2["t88_pct"]),
        "Hypoxic burden, %min/h": fmt.burden(spo2["hypoxic_burden"]),
        "Event-related pulse rise, bpm": fmt.number(pulse["event_rise_bpm"], 1),
    }
    for label, value in expected.items():
        assert values_after(pages[0], label, 1) == [value], label


def test_both_rule_sets_and_their_hypopnea_rules_appear_on_page_one(pages, summary):
    text = flat(pages[0])
    for rs in summary["rule_sets"]:
        assert rs["name"] in text
        hyp = rs["parameters"]["hypopnea"]
        # AASM rule 1A (3 %) and 1B (4 %): >= 30 % drop with the set's desaturation
        assert (f"\u2265{hyp['drop_pct']:g} % drop + \u2265{hyp['desaturation_pct']:g} % "
                "desat.") in text


def test_caution_is_on_the_summary_page_and_in_the_technical_section(pages):
    first, last = flat(pages[0]), flat(pages[-1])
    for point in CAUTION_POINTS:
        assert flat(point) in first
        assert flat(point) in last


def test_summary_fits_page_one_and_every_page_says_draft(pages):
    assert "Respiratory events" not in pages[0].splitlines()[:1]
    assert "Counts and indices by event type" not in pages[0]
    assert "Before you act on these numbers" in pages[0]
    for i, text in enumerate(pages, start=1):
        assert "DRAFT" in text, f"page {i}"
        assert f"page {i} of {len(pages)}" in text


def test_sections_the_issue_lists_are_all_there(pages):
    text = flat(" ".join(pages))
    for heading in ("Respiratory events", "Counts and indices by event type", "By clock hour",
                    "Cheyne-Stokes breathing", "Body position", "Oximetry and pulse",
                    "Time in SpO2 bands", "Desaturation depth", "Overnight signals",
                    "Technical details", "Channels used", "Excluded periods",
                    "Rule sets as applied"):
        assert heading in text, heading


def test_technical_section_names_hashes_version_and_channels(pages, summary):
    text = flat(" ".join(pages[-3:]))
    assert summary["study"]["input_sha256"] in text
    for rs in summary["rule_sets"]:
        assert rs["sha256"] in text
    assert f"hsat {__version__}" in text
    for ch in summary["channels"].values():
        assert ch["label"] in text


def test_intake_details_and_site_are_in_the_header(pages):
    text = flat(pages[0])
    for value in ("Testcase, Alpha", "T-0001", "1970-05-17", "female", "GEN-TEST-01",
                  "Dr Referrer Test", "Dr Reader Test, MD", "Test Clinic for Sleep Studies",
                  "1 Test Lane"):
        assert value in text, value


def test_graph_page_is_landscape_with_clock_hour_ticks(study):
    from pypdf import PdfReader

    reader = PdfReader(str(study["folder"] / DRAFT_NAME))
    graph = [p for p in reader.pages if "Overnight signals" in (p.extract_text() or "")]
    assert len(graph) == 1
    page = graph[0]
    assert float(page.mediabox.width) > float(page.mediabox.height)
    text = page.extract_text()
    for lane in ("SpO2", "Pulse rate", "Flow amplitude", "Body position", "Obstructive apnea"):
        assert lane in text
    assert "00:00" in text and "01:00" in text  # a 5 h night from 22:30 crosses midnight


def test_missing_patient_fields_print_not_recorded(tmp_path, study):
    folder = clone(study["folder"], "no-intake")
    shutil.copy(study["edf"], folder / "x.edf")  # no sidecar beside it
    context = json.loads((folder / "report-context.json").read_text())
    context["intake"] = None
    (folder / "report-context.json").write_text(json.dumps(context))
    summary = json.loads((folder / "summary.json").read_text())
    summary["patient"] = {"code": "", "name": "", "sex": "", "birthdate": None,
                          "age_years": None}
    summary.pop("kit", None)
    summary["study"]["input_file"] = "x.edf"
    (folder / "summary.json").write_text(json.dumps(summary))
    first = page_texts(render_draft(folder))[0]
    for label in ("Patient", "Patient ID", "Date of birth", "Sex", "Referring clinician"):
        assert values_after(first, label, 1) == [fmt.NOT_RECORDED], label


def test_review_object_shows_on_the_summary_page(study):
    # A hand-made review object over an unedited copy of the events (the full review
    # path, edits and rescore, is in test_review_report.py).
    folder = clone(study["folder"], "reviewed")
    summary = json.loads((folder / "summary.json").read_text())
    summary["review"] = {"reviewed": True, "reviewer": "Dr Reader Test", "edited_count": 7,
                         "added": 2, "rejected": 3, "retyped": 1, "adjusted": 1,
                         "log_entries": 0, "last_edit_at": "2026-03-04T08:15:02.113Z",
                         "edit_log": "review-edits.jsonl",
                         "reviewed_events": "events-reviewed.csv"}
    (folder / "summary.json").write_text(json.dumps(summary))
    shutil.copyfile(folder / "events.csv", folder / "events-reviewed.csv")
    page = flat(page_texts(render_draft(folder))[0])
    assert ("Events reviewed by Dr Reader Test, last edit 2026-03-04 08:15 UTC. 7 events "
            "edited: 2 added, 3 rejected, 1 retyped, 1 adjusted.") in page


def test_kept_traces_draw_the_same_graph_without_the_recording(study):
    folder = clone(study["folder"], "no-edf")
    context = json.loads((folder / "report-context.json").read_text())
    assert context["traces"]["spo2"] is not None
    render_draft(folder)  # the EDF is not beside this copy: the kept traces are used
    again = json.loads((folder / "report-context.json").read_text())
    assert again["traces"] == context["traces"]
    assert "Signal traces unavailable" not in flat(" ".join(page_texts(folder / DRAFT_NAME)))


def test_minmax_decimation_keeps_every_bin_extreme():
    # reference: numpy's own min/max per bin (general-purpose library)
    rng = np.random.default_rng(3)
    x = rng.normal(size=36_000)
    x[12_345] = 25.0  # one spike
    valid = np.ones_like(x, dtype=bool)
    valid[1000:1100] = False
    t, v = minmax_decimate(x, valid, fs=1.0, bins=1000)
    assert len(v) <= 2000
    assert np.nanmax(v) == 25.0
    blocks = np.where(valid, x, np.nan).reshape(1000, 36)
    has_valid = np.any(valid.reshape(1000, 36), axis=1)
    expected = np.concatenate([np.nanmin(blocks[has_valid], axis=1),
                               np.nanmax(blocks[has_valid], axis=1)])
    assert np.allclose(np.sort(v[np.isfinite(v)]), np.sort(expected))
    assert np.count_nonzero(np.isnan(v)) == 2 * np.count_nonzero(~has_valid)  # gaps kept
    assert np.all(np.diff(t) >= 0)  # points stay in time order


def test_analyze_writes_the_draft(tmp_path, study):
    import hsat.api as api

    result = api.analyze(study["edf"], tmp_path / "via-analyze", site=study["site"])
    assert result.report_path is not None and result.report_path.is_file()
    assert "Test Clinic for Sleep Studies" in page_texts(result.report_path)[0]


def test_report_command_rerenders(study, capsys):
    folder = clone(study["folder"], "cli")
    (folder / DRAFT_NAME).unlink()
    assert main(["report", str(folder)]) == EXIT_OK
    assert (folder / DRAFT_NAME).is_file()


def test_missing_summary_is_a_clear_error(tmp_path):
    with pytest.raises(UnreadableInput, match="summary.json"):
        render_draft(tmp_path)


def test_bad_site_file_is_a_config_error(tmp_path, study, capsys):
    bad = tmp_path / "site.toml"
    bad.write_text('[clinic]\nname = "x"\naddress = ["a"]\nphone = "1"\nfaxx = "2"\n')
    assert main(["report", str(study["folder"]), "--site", str(bad)]) == EXIT_CONFIG
    err = capsys.readouterr().err
    assert "site.toml" in err and "clinic.faxx" in err


def test_patient_name_the_font_cannot_draw_is_refused_and_nothing_written(tmp_path, study):
    folder = clone(study["folder"], "cjk")
    before = (folder / DRAFT_NAME).read_bytes()
    intake = tmp_path / "cjk.intake.toml"
    intake.write_text('[patient]\nname = "\u738b\u5c0f\u660e"\n', encoding="utf-8")
    with pytest.raises(ConfigError, match="U\\+738B"):
        render_draft(folder, intake=intake)
    assert (folder / DRAFT_NAME).read_bytes() == before


def test_read_only_study_folder_is_an_output_error(study):
    folder = clone(study["folder"], "ro")
    (folder / DRAFT_NAME).unlink()
    with read_only(folder), pytest.raises(OutputError):
        render_draft(folder)
    assert not (folder / DRAFT_NAME).exists()
    assert not [p for p in os.listdir(folder) if p.endswith(".part")]
