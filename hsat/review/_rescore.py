"""Rescore: the summary recomputed from the reviewed events (``hsat rescore STUDY_DIR``).

Steps, each output written atomically and in this order so that a crash leaves either the
old or the new state:

1. ``summary-auto.json`` -- the automatic summary, kept the first time (and again after a
   fresh ``hsat analyze``, whose ``summary.json`` has no ``review`` object);
2. ``events-reviewed.csv`` -- the automatic events with the edit log replayed;
3. ``summary.json`` -- recomputed by the scoring stage from the reviewed table (see
   ``hsat.metrics``), plus the ``review`` object (``review_counts`` and the SHA-256 of
   both event tables, so the report can tell a reviewed table edited by hand).

``events.csv`` and the edit log are only read. The draft report is rendered again when
the report stage is installed, so that it shows the reviewed numbers.
"""

from __future__ import annotations

import hashlib
import io
import json
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from hsat.outputs import atomic_write_text, summary_json
from hsat.recording import POSITIONS
from hsat.review._edits import (
    EDIT_LOG,
    REVIEWED_EVENTS,
    apply_edits,
    read_auto_events,
    read_edit_log,
    review_counts,
    reviewed_csv_text,
)
from hsat.review._study import (
    AUTO_SUMMARY,
    SUMMARY,
    automatic_summary,
    read_json,
    recording_path,
    study_folder,
)

if TYPE_CHECKING:
    from hsat.breaths import Breaths
    from hsat.recording import Conditioned


def _position_lookup(cond: Conditioned) -> Any:
    sig = cond.signals.get("position")
    if sig is None or not len(sig.data):
        return None

    def position_at(t_s: float) -> str:
        code = sig.data[int(sig.index_of(t_s))]
        return POSITIONS[int(code)] if np.isfinite(code) and 0 <= code < len(POSITIONS) \
            else "unknown"

    return position_at


def _prepare(edf: Path, summary: dict[str, Any]) -> tuple[Conditioned, Breaths]:
    """Read, condition and find breaths for the night (the CLI path; the server passes
    its cached ones)."""
    from hsat.breaths import detect_breaths
    from hsat.review._session import read_night

    _, cond = read_night(edf, summary)
    return cond, detect_breaths(cond)


def recompute(summary_auto: dict[str, Any], table_csv: str, cond: Conditioned,
              breaths: Breaths, source: str, edf: Path | None = None) -> dict[str, Any]:
    """The summary recomputed by the scoring stage from a reviewed events table
    (``hsat.metrics.summarize_events``, the documented way to rescore after review)."""
    import pandas as pd

    from hsat.intake import load_intake_for
    from hsat.metrics import summarize_events
    from hsat.review._session import study_rule_sets

    table = pd.read_csv(io.StringIO(table_csv), dtype={"rule_sets": str, "event": str})
    intake = load_intake_for(edf) if edf is not None else None
    return summarize_events(cond, breaths, table, study_rule_sets(summary_auto),
                            intake=intake, source=source)


#: Rule-set facts only the rule file knows; the rescore rebuilds the rule sets from the
#: summary's parameters, so it takes these over from the automatic summary.
_RULE_SET_PROVENANCE = ("source", "description", "sha256")


def keep_provenance(summary: dict[str, Any], summary_auto: dict[str, Any]) -> dict[str, Any]:
    """The rescored summary with what the automatic one knew of its inputs put back.

    A rule set's source, description and file SHA-256 are taken over when the rescored
    rule set of that name has the same parameters (so it is the same rule set), and
    ``sensors`` (the channels the detectors used) when the rescore has none: the reviewed
    events are the automatic ones, edited, so they were found on the same channels.
    """
    auto_sets = {str(r.get("name")): r for r in summary_auto.get("rule_sets", [])
                 if isinstance(r, dict)}
    rule_sets = []
    for rs in summary.get("rule_sets", []):
        auto = auto_sets.get(str(rs.get("name"))) if isinstance(rs, dict) else None
        if auto is not None and auto.get("parameters") == rs.get("parameters"):
            rs = {**rs, **{k: auto[k] for k in _RULE_SET_PROVENANCE
                           if not rs.get(k) and auto.get(k)}}
        rule_sets.append(rs)
    out = {**summary, "rule_sets": rule_sets}
    if not out.get("sensors") and summary_auto.get("sensors"):
        out["sensors"] = summary_auto["sensors"]
    return out


def rescore_study(
    study_dir: str | Path,
    *,
    recording: str | Path | None = None,
    conditioned: Conditioned | None = None,
    breaths: Breaths | None = None,
) -> dict[str, Any]:
    """Recompute a study's summary from its reviewed events; return the new summary.

    Parameters
    ----------
    study_dir : the study folder (``hsat analyze ... --out``).
    recording : the night's EDF when it is no longer where ``summary.json`` says.
    conditioned, breaths : the night already conditioned (the review server's cache);
        read and conditioned here when None.

    Raises
    ------
    UnreadableInput
        A study file is missing or malformed, or the edit log does not replay.
    OutputError
        An output cannot be written.
    """
    folder = study_folder(study_dir)
    current = read_json(folder / SUMMARY)
    summary_auto = automatic_summary(folder)
    auto = read_auto_events(folder)
    entries = read_edit_log(folder)
    events = apply_edits(auto, entries, folder / EDIT_LOG)
    edf = recording_path(folder, summary_auto, recording)
    if conditioned is None or breaths is None:
        conditioned, breaths = _prepare(edf, summary_auto)
    table_csv = reviewed_csv_text(auto, events, _position_lookup(conditioned))
    summary = keep_provenance(recompute(summary_auto, table_csv, conditioned, breaths,
                                        str(folder / REVIEWED_EVENTS), edf), summary_auto)
    drift = analysis_drift(summary_auto, summary)
    if drift:
        summary["notes"] = [*summary.get("notes", []), drift]
    summary["review"] = {
        **review_counts(events, entries),
        "auto_events_sha256": auto.sha256,
        "reviewed_events_sha256": hashlib.sha256(table_csv.encode("utf-8")).hexdigest(),
    }
    if "review" not in current:
        atomic_write_text(folder / AUTO_SUMMARY, json.dumps(current, indent=2) + "\n")
    atomic_write_text(folder / REVIEWED_EVENTS, table_csv)
    atomic_write_text(folder / SUMMARY, summary_json(summary))
    _redraw_draft(folder)
    return summary


def analysis_drift(summary_auto: dict[str, Any], summary: dict[str, Any]) -> str:
    """A note when the rescore's night differs from the automatic analysis's, else "".

    Rescoring conditions the night again; when the software version or the monitoring
    time differs from the automatic summary's, an REI change is partly the software's,
    not the reviewer's, and the note says so (and by how much the monitoring time moved).
    """
    old_version = str(summary_auto.get("software", {}).get("version", ""))
    new_version = str(summary.get("software", {}).get("version", ""))
    old_mt = summary_auto.get("monitoring_time_h")
    new_mt = summary.get("monitoring_time_h")
    parts = []
    if old_version and new_version and old_version != new_version:
        parts.append(f"software {old_version} -> {new_version}")
    if isinstance(old_mt, (int, float)) and isinstance(new_mt, (int, float)) \
            and abs(float(new_mt) - float(old_mt)) >= 0.005:
        parts.append(f"monitoring time {float(old_mt):.2f} h -> {float(new_mt):.2f} h")
    if not parts:
        return ""
    return ("Rescored with a different analysis than the automatic scoring ("
            + "; ".join(parts) + "): part of the change in the indices comes from the "
            "software, not from the review. Re-run hsat analyze for a like-for-like "
            "comparison.")


def _redraw_draft(folder: Path) -> None:
    """Render the draft report again from the new summary, when the report stage is here."""
    if not (folder / "report-draft.pdf").exists():
        return  # analysed without a PDF: nothing to bring up to date
    try:
        from hsat.report import render_draft
    except ImportError:
        return
    render_draft(folder)
