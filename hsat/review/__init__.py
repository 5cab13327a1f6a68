"""Review in the browser: the physician checks the raw signals, edits events, rescores, signs.

``open_review(study_dir)`` reads and conditions the study's night once and returns a
``ReviewSession``; ``start_server(session)`` serves its page and JSON API on 127.0.0.1
behind a random per-study token (``hsat review STUDY_DIR``). Edits go to the append-only
``review-edits.jsonl``; ``rescore_study(study_dir)`` (``hsat rescore STUDY_DIR``) replays
them into ``events-reviewed.csv`` and recomputes ``summary.json`` (the automatic summary is
kept as ``summary-auto.json``). ``events.csv`` is never changed.

Automated scoring must be reviewed against the raw signals by a qualified clinician.
"""

from hsat.review._decimate import MAX_COLUMNS, STRIP_STEP_S, Envelope, window_envelope
from hsat.review._edits import (
    ACTIONS,
    EDIT_LOG,
    REVIEWED_EVENTS,
    EditRefused,
    ReviewedEvent,
    apply_edits,
    kept_events,
    make_entry,
    read_auto_events,
    read_edit_log,
    review_counts,
)
from hsat.review._rescore import rescore_study
from hsat.review._server import ReviewServer, start_server
from hsat.review._session import ReviewSession, open_review
from hsat.review._study import AUTO_SUMMARY, safe_study_file

__all__ = [
    "ACTIONS", "AUTO_SUMMARY", "EDIT_LOG", "MAX_COLUMNS", "REVIEWED_EVENTS", "STRIP_STEP_S",
    "EditRefused", "Envelope", "ReviewServer", "ReviewSession", "ReviewedEvent",
    "apply_edits", "kept_events", "make_entry", "open_review", "read_auto_events",
    "read_edit_log", "rescore_study", "review_counts", "safe_study_file", "start_server",
    "window_envelope",
]
