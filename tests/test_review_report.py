"""A reviewed study in its summary.json, its draft report and its signed report.

One short synthetic night (invented patient, ``hsat.synth``) is analysed by the real
pipeline, then edited through the review's own edit log: two respiratory events rejected,
one hypopnea retyped to an obstructive apnea, one obstructive apnea lengthened by 2 s and
one hypopnea added, then the table confirmed. Rescoring must follow the AASM HSAT
definition REI = (apneas + hypopneas) x 60 / monitoring time (min) (standards.md section
1.6 and check-value row 5); the report must say that the automated scoring was reviewed
and edited by a named clinician (standards.md section 8, first caution: automated output
needs qualified review). The summary is validated with the jsonschema reference
implementation.
"""

from __future__ import annotations

import copy
import csv
import hashlib
import json
from pathlib import Path
from typing import Any

import jsonschema
import pytest

from _report_study import ADEQUATE_HOURS, clone, flat, make_study, page_texts
from _review_study import quiet_onset
from hsat.cli import main
from hsat.errors import EXIT_OK, EXIT_TAMPERED, EXIT_USAGE, ConfigError, UnreadableInput
from hsat.report import DRAFT_NAME, fmt, render_draft
from hsat.review import (
    apply_edits,
    make_entry,
    open_review,
    read_auto_events,
    read_edit_log,
    rescore_study,
)
from hsat.review._edits import EditRefused, append_entry
from hsat.signoff import amend, read_log, sign, verify
from hsat.signoff._sign import SignoffInputError

SCHEMA = json.loads((Path(__file__).resolve().parents[1] / "hsat" / "schemas"
                     / "summary.schema.json").read_text())
REVIEWER = "Dr Reader Test"
PHYSICIAN = "Dr Reader Test, MD"
INTERPRETATION = "# Impression\nObstructive sleep apnea.\n"
RESPIRATORY = {"obstructive_apnea", "central_apnea", "mixed_apnea", "unclassified_apnea",
               "hypopnea"}
#: (added, rejected, retyped, adjusted) made by ``_review``; each a different event.
EDITS = (1, 2, 1, 1)


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open(newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def _review(folder: Path, session: Any) -> None:
    """Write the edits of the module docstring to the folder's edit log."""
    auto = read_auto_events(folder)
    names = [rs.name for rs in session.rule_sets]
    cond = session.conditioned

    def usable(e: Any, kind: set[str]) -> bool:
        # Under every rule set and inside monitoring time, so that each edit moves every
        # rule set's count by exactly one event.
        return (e.event in kind and set(e.rule_sets) == set(names)
                and bool(cond.in_analysis(e.onset_s + 1.0))
                and bool(cond.in_analysis(e.onset_s + e.duration_s - 1.0)))

    pool = list(auto.events)
    rejected = [e for e in pool if usable(e, RESPIRATORY)][:2]
    taken = {e.event_id for e in rejected}
    retyped = next(e for e in pool if usable(e, {"hypopnea"}) and e.event_id not in taken)
    taken.add(retyped.event_id)
    adjusted = next(e for e in pool if usable(e, {"obstructive_apnea"})
                    and e.event_id not in taken and bool(cond.in_analysis(e.onset_s - 2.0)))
    added_at = quiet_onset([{"onset_s": e.onset_s, "duration_s": e.duration_s}
                            for e in pool], cond, session.night_s)
    requests = [
        {"action": "reject", "event_id": rejected[0].event_id},
        {"action": "reject", "event_id": rejected[1].event_id},
        {"action": "retype", "event_id": retyped.event_id, "event": "obstructive_apnea"},
        {"action": "adjust", "event_id": adjusted.event_id, "onset_s": adjusted.onset_s - 2.0,
         "duration_s": adjusted.duration_s + 2.0},
        {"action": "add", "event": "hypopnea", "onset_s": added_at, "duration_s": 20.0},
        {"action": "confirm"},
    ]
    for request in requests:
        events = apply_edits(auto, read_edit_log(folder))
        append_entry(folder, make_entry({"reviewer": REVIEWER, **request}, events,
                                        auto_sha256=auto.sha256, night_s=session.night_s,
                                        study_rule_sets=names))


@pytest.fixture(scope="module")
def analysed(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """The analysed study before review, with its draft, and the night conditioned once."""
    root = tmp_path_factory.mktemp("review-report")
    folder, edf, site = make_study(root, hours=ADEQUATE_HOURS, seed=45)
    render_draft(folder, site=site, recording=edf)
    session = open_review(folder, reviewer=REVIEWER)
    return {"folder": folder, "session": session}


def _reviewed_copy(analysed: dict[str, Any], name: str) -> tuple[Path, dict[str, Any]]:
    folder = clone(analysed["folder"], name)
    _review(folder, analysed["session"])
    summary = rescore_study(folder, conditioned=analysed["session"].conditioned,
                            breaths=analysed["session"].breaths)
    return folder, summary


@pytest.fixture(scope="module")
def reviewed(analysed: dict[str, Any]) -> dict[str, Any]:
    auto_events = (analysed["folder"] / "events.csv").read_bytes()
    folder, summary = _reviewed_copy(analysed, "reviewed")
    return {"folder": folder, "summary": summary, "auto_events": auto_events,
            "auto": json.loads((analysed["folder"] / "summary.json").read_text()),
            "pages": page_texts(folder / DRAFT_NAME)}


# ----------------------------------------------------------------------- summary.json
def test_rescored_summary_follows_the_schema_with_its_review_object(reviewed):
    summary = json.loads((reviewed["folder"] / "summary.json").read_text())
    jsonschema.Draft202012Validator.check_schema(SCHEMA)
    jsonschema.Draft202012Validator(SCHEMA).validate(summary)
    review = summary["review"]
    assert (review["added"], review["rejected"], review["retyped"], review["adjusted"]) == EDITS
    assert review["edited_count"] == sum(EDITS) and review["log_entries"] == 6
    assert review["reviewed"] is True and review["reviewer"] == REVIEWER
    assert review["reviewed_events_sha256"] == _sha(reviewed["folder"] / "events-reviewed.csv")
    assert review["auto_events_sha256"] == _sha(reviewed["folder"] / "events.csv")


@pytest.mark.parametrize("damage", ["drop edited_count", "unknown key", "negative count",
                                    "count as text", "bad sha"])
def test_schema_refuses_a_damaged_review_object(reviewed, damage):
    summary = copy.deepcopy(reviewed["summary"])
    review = summary["review"]
    if damage == "drop edited_count":
        del review["edited_count"]
    elif damage == "unknown key":
        review["edited_by_hand"] = True
    elif damage == "negative count":
        review["rejected"] = -1
    elif damage == "count as text":
        review["added"] = "1"
    else:
        review["reviewed_events_sha256"] = "not-a-sha"
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.Draft202012Validator(SCHEMA).validate(summary)


def test_rescore_counts_follow_the_aasm_rei_definition(reviewed):
    auto, new = reviewed["auto"], reviewed["summary"]
    added, rejected, _, _ = EDITS
    mt_h = new["monitoring_time_h"]
    assert mt_h == pytest.approx(auto["monitoring_time_h"], abs=1e-6)
    for name, ix in new["indices"].items():
        before = auto["indices"][name]["counts"]
        after = ix["counts"]
        # Retyping and lengthening keep the event; rejecting and adding move the count.
        assert after["respiratory_events"] == before["respiratory_events"] - rejected + added
        # AASM HSAT: REI = events x 60 / MT (min) (standards.md 1.6); the REI is printed to
        # one decimal and MT to two, so allow both roundings.
        n = after["respiratory_events"]
        assert ix["rei"] == pytest.approx(n / mt_h, abs=0.051 + n * 0.005 / mt_h**2)
    # The rule sets keep the provenance the automatic analysis recorded.
    for old, now in zip(auto["rule_sets"], new["rule_sets"], strict=True):
        assert (now["source"], now["sha256"]) == (old["source"], old["sha256"])
    assert new["sensors"] == auto["sensors"]


def test_review_leaves_the_automatic_scoring_unchanged(reviewed):
    assert (reviewed["folder"] / "events.csv").read_bytes() == reviewed["auto_events"]
    kept = json.loads((reviewed["folder"] / "summary-auto.json").read_text())
    assert kept == reviewed["auto"]


# ----------------------------------------------------------------------- draft report
def test_summary_page_states_who_reviewed_when_and_the_counts(reviewed):
    page = flat(reviewed["pages"][0])
    review = reviewed["summary"]["review"]
    when = review["last_edit_at"][:16].replace("T", " ") + " UTC"
    assert (f"Events reviewed by {REVIEWER}, last edit {when}. "
            f"{sum(EDITS)} events edited: 1 added, 2 rejected, 1 retyped, 1 adjusted.") in page
    assert ("The indices in this report are computed from the reviewed events "
            "(events-reviewed.csv); the automatic scoring is kept unchanged in events.csv."
            ) in page
    before = ", ".join(f"{fmt.index(ix['rei'])}/h ({name})"
                       for name, ix in reviewed["auto"]["indices"].items())
    assert f"REI of the automatic scoring before review: {before}." in page
    assert "Events reviewed; awaiting interpretation and signature" in page
    assert "not yet reviewed" not in page


def test_summary_page_prints_the_reviewed_indices_not_the_automatic_ones(reviewed):
    page = flat(reviewed["pages"][0])
    auto, new = reviewed["auto"]["indices"], reviewed["summary"]["indices"]
    row = " ".join(fmt.index(new[n]["rei"]) for n in new)
    assert f"REI, respiratory events per hour {row}" in page
    counts = " ".join(fmt.count(new[n]["counts"]["respiratory_events"]) for n in new)
    assert f"Respiratory events (apneas + hypopneas) {counts}" in page
    assert any(new[n]["counts"] != auto[n]["counts"] for n in new)


def test_event_detail_comes_from_the_reviewed_table(reviewed):
    folder = reviewed["folder"]
    reviewed_rows = _rows(folder / "events-reviewed.csv")
    auto_rows = _rows(folder / "events.csv")
    text = flat(" ".join(reviewed["pages"]))
    assert (f"Counted from the reviewed events (events-reviewed.csv: {len(reviewed_rows)} rows "
            "including desaturations; review edits: 1 added, 2 rejected, 1 retyped, "
            "1 adjusted).") in text
    # The overnight graph labels each lane with its number of rows in the events file:
    # the retyped hypopnea is one more obstructive apnea, each rejected one is one fewer.
    gone = sum(x["action"] == "reject" and x["before"]["event"] == "obstructive_apnea"
               for x in read_edit_log(folder))
    obstructive = sum(r["event"] == "obstructive_apnea" for r in reviewed_rows)
    assert obstructive == sum(r["event"] == "obstructive_apnea" for r in auto_rows) + 1 - gone
    assert len(reviewed_rows) == len(auto_rows) - 2 + 1
    assert f"Obstructive apnea ({obstructive})" in text
    assert "Event counts in the lane labels are all scored rows in events-reviewed.csv" in text


def test_technical_section_compares_automatic_and_reviewed_and_names_the_files(reviewed):
    folder = reviewed["folder"]
    text = flat(" ".join(reviewed["pages"]))
    assert "Event review" in text and "6 entries in the edit log review-edits.jsonl" in text
    for name, ix in reviewed["summary"]["indices"].items():
        auto_ix = reviewed["auto"]["indices"][name]
        assert (f"{name} {fmt.count(auto_ix['counts']['respiratory_events'])} "
                f"{fmt.count(ix['counts']['respiratory_events'])} {fmt.index(auto_ix['rei'])} "
                f"{fmt.index(ix['rei'])}") in text
    for name in ("events.csv", "events-reviewed.csv", "review-edits.jsonl"):
        assert f"SHA-256 of {name}: {_sha(folder / name)}" in text


def test_unreviewed_draft_says_so(analysed):
    page = flat(page_texts(analysed["folder"] / DRAFT_NAME)[0])
    assert "automated scoring, not yet reviewed event by event" in page
    assert "Events reviewed" not in page


def test_edits_after_the_rescore_are_flagged_and_block_signing(reviewed, analysed, tmp_path,
                                                               capsys):
    folder = clone(reviewed["folder"], "pending")
    auto = read_auto_events(folder)
    events = apply_edits(auto, read_edit_log(folder))
    victim = next(e for e in events if e.status == "auto" and e.event in RESPIRATORY)
    append_entry(folder, make_entry(
        {"reviewer": REVIEWER, "action": "reject", "event_id": victim.event_id}, events,
        auto_sha256=auto.sha256, night_s=analysed["session"].night_s,
        study_rule_sets=[rs.name for rs in analysed["session"].rule_sets]))
    page = flat(page_texts(render_draft(folder))[0])
    assert "1 edit(s) in review-edits.jsonl are not yet in these numbers." in page
    notes = tmp_path / "notes.md"
    notes.write_text(INTERPRETATION, encoding="utf-8")
    with pytest.raises(SignoffInputError, match="1 review edit"):
        sign(folder, notes, PHYSICIAN)
    assert main(["sign", str(folder), "--interpretation", str(notes),
                 "--physician", PHYSICIAN]) == EXIT_USAGE
    assert "hsat rescore" in capsys.readouterr().err
    assert not list(folder.glob("report-v*-signed.*")) and not read_log(folder)


@pytest.mark.parametrize("damage", ["reviewed table edited", "reviewed table missing",
                                    "automatic table edited"])
def test_a_reviewed_summary_over_other_event_tables_is_refused(reviewed, damage):
    folder = clone(reviewed["folder"], "damaged")
    target = folder / ("events.csv" if damage.startswith("automatic") else "events-reviewed.csv")
    if damage.endswith("missing"):
        target.unlink()
    else:
        rows = target.read_text(encoding="utf-8").splitlines(keepends=True)
        target.write_text("".join(rows[:-1]), encoding="utf-8")  # one event dropped by hand
    before = (folder / DRAFT_NAME).read_bytes()
    with pytest.raises(UnreadableInput) as err:
        render_draft(folder)
    assert target.name in str(err.value)
    assert (folder / DRAFT_NAME).read_bytes() == before


#: A name in a script the report font (DejaVu Sans, Latin/Greek/Cyrillic) does not cover.
UNDRAWABLE_NAME = "\u738b\u5c0f\u660e"


def test_a_reviewer_name_the_report_cannot_print_is_refused_before_it_is_logged(analysed):
    folder = clone(analysed["folder"], "cjk-edit")
    auto = read_auto_events(folder)
    with pytest.raises(EditRefused, match="U\\+738B"):
        make_entry({"reviewer": UNDRAWABLE_NAME, "action": "confirm"}, list(auto.events),
                   auto_sha256=auto.sha256, night_s=analysed["session"].night_s,
                   study_rule_sets=[rs.name for rs in analysed["session"].rule_sets])
    assert not (folder / "review-edits.jsonl").exists()


def test_a_logged_reviewer_name_the_report_cannot_print_stops_the_render(reviewed):
    folder = clone(reviewed["folder"], "cjk-render")
    summary = json.loads((folder / "summary.json").read_text())
    summary["review"]["reviewer"] = UNDRAWABLE_NAME  # a log written by another tool
    (folder / "summary.json").write_text(json.dumps(summary))
    before = (folder / DRAFT_NAME).read_bytes()
    with pytest.raises(ConfigError, match="reviewer name") as err:
        render_draft(folder)
    assert "review-edits.jsonl" in str(err.value)
    assert (folder / DRAFT_NAME).read_bytes() == before


# ----------------------------------------------------------------------- signed report
def test_signing_after_review_carries_the_review_and_verifies(reviewed, tmp_path, capsys):
    folder = clone(reviewed["folder"], "signed")
    notes = tmp_path / "notes.md"
    notes.write_text(INTERPRETATION, encoding="utf-8")
    assert main(["sign", str(folder), "--interpretation", str(notes),
                 "--physician", PHYSICIAN]) == EXIT_OK
    pdf = folder / "report-v1-signed.pdf"
    pages = page_texts(pdf)
    first = flat(pages[0])
    assert "Signed, version 1." in first
    assert (f"Events reviewed by {REVIEWER}, last edit") in first
    assert f"{sum(EDITS)} events edited: 1 added, 2 rejected, 1 retyped, 1 adjusted." in first
    assert all("DRAFT" not in p for p in pages)
    signature = flat(pages[1])
    assert f"events-reviewed.csv SHA-256: {_sha(folder / 'events-reviewed.csv')}" in signature
    record = json.loads((folder / "report-v1-signed.json").read_text())
    assert record["headline"]["Event review"] == (
        f"reviewed by {REVIEWER}, 5 edited (1 added, 2 rejected, 1 retyped, 1 adjusted)")
    assert record["events_sha256"] == _sha(folder / "events-reviewed.csv")
    capsys.readouterr()
    assert main(["verify", str(folder)]) == EXIT_OK
    assert "ok       report-v1-signed.pdf" in capsys.readouterr().out
    # Changing the signed file is still caught after a review.
    pdf.write_bytes(pdf.read_bytes() + b"%")
    assert main(["verify", str(folder)]) == EXIT_TAMPERED


def test_amending_after_a_review_states_what_the_review_changed(analysed, tmp_path):
    folder = clone(analysed["folder"], "amend")
    notes = tmp_path / "notes.md"
    notes.write_text(INTERPRETATION, encoding="utf-8")
    sign(folder, notes, PHYSICIAN)
    _review(folder, analysed["session"])
    summary = rescore_study(folder, conditioned=analysed["session"].conditioned,
                            breaths=analysed["session"].breaths)
    result = amend(folder, "Events reviewed after the first signature.")
    record = json.loads(result.record_path.read_text())
    changes = record["amendment"]["changes"]
    assert (f"Event review: not reviewed \u2192 reviewed by {REVIEWER}, 5 edited "
            "(1 added, 2 rejected, 1 retyped, 1 adjusted).") in changes
    first = flat(page_texts(result.pdf_path)[0])
    assert "Signed, version 2." in first and "5 events edited" in first
    rei = " ".join(fmt.index(ix["rei"]) for ix in summary["indices"].values())
    assert f"REI, respiratory events per hour {rei}" in first
    assert verify(folder).ok
    assert (folder / "report-v1-signed.pdf").is_file()



def test_rescore_names_a_change_of_analysis_beside_the_review() -> None:
    # An REI change must be attributable to the reviewer's edits (AASM: the interpreting
    # physician reviews the scoring; common practice: compare like with like).
    from hsat.review._rescore import analysis_drift

    auto = {"software": {"version": "0.1.0"}, "monitoring_time_h": 3.57}
    assert analysis_drift(auto, copy.deepcopy(auto)) == ""
    assert analysis_drift(auto, {**auto, "monitoring_time_h": 3.572}) == ""
    moved = analysis_drift(auto, {**auto, "monitoring_time_h": 3.53})
    assert "(monitoring time 3.57 h -> 3.53 h)" in moved
    upgraded = analysis_drift(auto, {"software": {"version": "0.2.0"},
                                     "monitoring_time_h": 3.57})
    assert "software 0.1.0 -> 0.2.0" in upgraded and "monitoring time" not in upgraded
