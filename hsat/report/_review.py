"""The event review as the report states it: who reviewed, when, what changed, and from
which files the numbers come.

``hsat rescore`` (or the review page) writes a ``review`` object into summary.json and the
reviewed event table ``events-reviewed.csv``; the automatic scoring stays unchanged in
``events.csv`` and the automatic summary in ``summary-auto.json``. ``load_review`` gathers
those facts and refuses a study whose files disagree with what the rescore recorded, so a
report never says "reviewed" over an event table that was not the reviewed one.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

from reportlab.platypus import Flowable, Paragraph

from hsat.errors import UnreadableInput
from hsat.report import _style as st
from hsat.report import fmt
from hsat.report._style import Styles
from hsat.report._tables import boxed, data_table

AUTO_EVENTS = "events.csv"
REVIEWED_EVENTS = "events-reviewed.csv"
AUTO_SUMMARY = "summary-auto.json"
EDIT_LOG = "review-edits.jsonl"
#: The edit kinds counted in summary.json ``review``, in the order the report prints them.
EDIT_KINDS: tuple[str, ...] = ("added", "rejected", "retyped", "adjusted")


@dataclass(frozen=True)
class ReviewFacts:
    """The review state of a study folder, as printed.

    ``reviewed`` is true when summary.json carries a ``review`` object saying so (its
    indices were then computed from ``events-reviewed.csv``). ``pending_edits`` counts
    entries of the edit log that came after the last rescore, whose changes are therefore
    not in the printed numbers. ``auto_rei`` holds the REI of the automatic scoring per
    rule set, from ``summary-auto.json``, when it is there.
    """

    reviewed: bool = False
    reviewer: str = ""
    last_edit_at: str = ""
    counts: dict[str, int] = field(default_factory=dict)
    log_entries: int = 0
    pending_edits: int = 0
    auto_rei: dict[str, float | None] = field(default_factory=dict)
    auto_respiratory: dict[str, int | None] = field(default_factory=dict)
    files_sha256: dict[str, str] = field(default_factory=dict)

    @property
    def edited(self) -> int:
        return int(self.counts.get("edited_count", 0))

    def edited_phrase(self) -> str:
        """``3 events edited`` (``1 event``, ``no event``)."""
        n = self.edited
        return "no event edited" if n == 0 else f"{n} event{'s' if n != 1 else ''} edited"

    def edit_breakdown(self) -> str:
        """``1 added, 2 rejected, 0 retyped, 0 adjusted``."""
        return ", ".join(f"{self.counts.get(k, 0)} {k}" for k in EDIT_KINDS)

    def when(self) -> str:
        """The last edit as ``2026-03-04 08:15 UTC`` (the log's ISO 8601 UTC time)."""
        if not self.last_edit_at:
            return fmt.MISSING
        try:
            at = datetime.fromisoformat(self.last_edit_at.replace("Z", "+00:00"))
        except ValueError:
            return self.last_edit_at
        return at.strftime("%Y-%m-%d %H:%M UTC")


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _count(value: object) -> int:
    return int(value) if isinstance(value, int | float) and not isinstance(value, bool) else 0


def _log_entries(folder: Path) -> int:
    """Entries in the edit log (its non-blank lines, as the review replays them)."""
    path = folder / EDIT_LOG
    if not path.is_file():
        return 0
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise UnreadableInput(path, f"cannot read the edit log ({exc})") from None
    return sum(1 for line in text.splitlines() if line.strip())


def _auto_numbers(folder: Path) -> tuple[dict[str, float | None], dict[str, int | None]]:
    path = folder / AUTO_SUMMARY
    try:
        auto = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return {}, {}  # the comparison is a courtesy; the review facts stand without it
    indices = auto.get("indices") if isinstance(auto, dict) else None
    if not isinstance(indices, dict):
        return {}, {}
    rei = {str(n): ix.get("rei") for n, ix in indices.items() if isinstance(ix, dict)}
    resp = {str(n): (ix.get("counts") or {}).get("respiratory_events")
            for n, ix in indices.items() if isinstance(ix, dict)}
    return rei, resp


def _check_recorded(folder: Path, name: str, recorded: object) -> str:
    """The file's SHA-256; ``UnreadableInput`` when it differs from what rescore recorded."""
    path = folder / name
    if not path.is_file():
        raise UnreadableInput(path, "missing: summary.json holds reviewed results but "
                              "this file is gone; run `hsat rescore` for the study")
    actual = _sha256(path)
    if isinstance(recorded, str) and recorded and recorded != actual:
        raise UnreadableInput(path, "differs from the file the reviewed summary was computed "
                              "from (changed after `hsat rescore`); run `hsat rescore` again")
    return actual


def load_review(folder: Path, summary: dict[str, Any]) -> ReviewFacts:
    """The review facts of a study folder (see ``ReviewFacts``).

    Raises
    ------
    UnreadableInput
        summary.json holds reviewed results but events-reviewed.csv is missing, or an
        event table no longer has the SHA-256 the rescore recorded.
    """
    logged = _log_entries(folder)
    review = summary.get("review")
    if not isinstance(review, dict):
        return ReviewFacts(pending_edits=logged)
    files = {
        AUTO_EVENTS: _check_recorded(folder, AUTO_EVENTS, review.get("auto_events_sha256")),
        REVIEWED_EVENTS: _check_recorded(folder, REVIEWED_EVENTS,
                                         review.get("reviewed_events_sha256")),
    }
    if (folder / EDIT_LOG).is_file():
        files[EDIT_LOG] = _sha256(folder / EDIT_LOG)
    included = _count(review.get("log_entries"))
    auto_rei, auto_resp = _auto_numbers(folder)
    return ReviewFacts(
        reviewed=bool(review.get("reviewed")),
        reviewer=str(review.get("reviewer") or ""),
        last_edit_at=str(review.get("last_edit_at") or ""),
        counts={k: _count(review.get(k)) for k in ("edited_count", *EDIT_KINDS)},
        log_entries=included,
        pending_edits=max(logged - included, 0),
        auto_rei=auto_rei,
        auto_respiratory=auto_resp,
        files_sha256=files,
    )


def _pending_text(rv: ReviewFacts) -> str:
    return (f"<b>{rv.pending_edits} edit(s) in {EDIT_LOG} are not yet in these numbers.</b> "
            "Recompute the indices (<i>hsat rescore</i>) before interpreting or signing.")


def review_statement(rv: ReviewFacts, rule_names: list[str], styles: Styles, width: float
                     ) -> Flowable:
    """The summary page's box: reviewed by whom and when, what changed, which files."""
    if not rv.reviewed:
        text = "<b>Scoring review:</b> automated scoring, not yet reviewed event by event."
        if rv.pending_edits:
            return boxed([Paragraph(f"{text} {_pending_text(rv)}", styles.small)], width,
                         fill=st.WARN_LIGHT, border=st.WARN, pad=4)
        return Paragraph(text, styles.small)
    before = [f"{fmt.index(rv.auto_rei.get(n))}/h ({escape(n)})" for n in rule_names
              if n in rv.auto_rei]
    parts = [
        f"<b>Events reviewed</b> by {escape(fmt.text(rv.reviewer))}, last edit {rv.when()}. "
        f"<b>{rv.edited_phrase()}:</b> {rv.edit_breakdown()}.",
        f"The indices in this report are computed from the reviewed events "
        f"({REVIEWED_EVENTS}); the automatic scoring is kept unchanged in {AUTO_EVENTS}.",
    ]
    if before:
        parts.append(f"REI of the automatic scoring before review: {', '.join(before)}.")
    items: list[Flowable] = [Paragraph(" ".join(parts), styles.small)]
    if rv.pending_edits:
        items.append(Paragraph(_pending_text(rv), styles.small))
        return boxed(items, width, fill=st.WARN_LIGHT, border=st.WARN, pad=4)
    return boxed(items, width, border=st.ACCENT, pad=4)


def review_details(rv: ReviewFacts, summary: dict[str, Any], rule_names: list[str],
                   styles: Styles, width: float) -> list[Flowable]:
    """The technical section's account of the review (nothing when not reviewed)."""
    if not rv.reviewed:
        return []
    story: list[Flowable] = [Paragraph("Event review", styles.h2), Paragraph(
        f"Reviewed by {escape(fmt.text(rv.reviewer))}; last edit {rv.when()}; "
        f"{rv.log_entries} entries in the edit log {EDIT_LOG} replayed. "
        f"{rv.edited_phrase().capitalize()}: {rv.edit_breakdown()}. Events and indices in this "
        f"report come from {REVIEWED_EVENTS}; the automatic scoring is unchanged in "
        f"{AUTO_EVENTS} and its summary in {AUTO_SUMMARY}.", styles.small)]
    rows = []
    for n in rule_names:
        ix = (summary.get("indices") or {}).get(n) or {}
        rows.append([n, fmt.count(rv.auto_respiratory.get(n)),
                     fmt.count((ix.get("counts") or {}).get("respiratory_events")),
                     fmt.index(rv.auto_rei.get(n)), fmt.index(ix.get("rei"))])
    if rows:
        story.append(data_table(
            styles, ["Rule set", "events, automatic", "events, reviewed", "REI, automatic",
                     "REI, reviewed"], rows, [width - 4 * 95.0] + [95.0] * 4))
    for name, sha in rv.files_sha256.items():
        if name == REVIEWED_EVENTS:
            continue  # printed above as the events file of this report
        story.append(Paragraph(f"SHA-256 of {name}: {sha}", styles.mono))
    return story
