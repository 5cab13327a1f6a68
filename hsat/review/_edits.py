"""The reviewer's edits: the append-only edit log and the reviewed event table.

The automatic scoring in ``events.csv`` is never changed. Every edit the reviewer makes is
one JSON line appended to ``review-edits.jsonl``::

    {"v": 1, "at": "2025-03-04T08:15:02.113Z", "reviewer": "Dr A. Okafor",
     "action": "reject", "event_id": "a17",
     "before": {"onset_s": 3605.2, "duration_s": 14.0, "event": "hypopnea",
                "rule_sets": ["aasm-3pct"], "status": "auto"},
     "after":  {..., "status": "rejected"},
     "auto_events_sha256": "<SHA-256 of events.csv the edit was made against>"}

``action`` is one of ``accept`` (keep the event; also brings back a rejected one),
``reject``, ``retype`` (change the event type), ``adjust`` (new start/end), ``add`` (a
missed event; its id is ``u1``, ``u2``, ...), or ``confirm`` (the reviewer declares the
table reviewed; no event, ``before``/``after`` are null).

Automatic events are named ``a0``, ``a1``, ... by their row in ``events.csv``. The reviewed
table is rebuilt by replaying the log over the automatic events; each entry's ``before``
must match the state the replay has reached, so a reordered, edited or foreign log is
refused rather than silently misapplied.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from hsat.errors import EXIT_USAGE, HsatError, UnreadableInput
from hsat.outputs import append_line

AUTO_EVENTS = "events.csv"
EDIT_LOG = "review-edits.jsonl"
REVIEWED_EVENTS = "events-reviewed.csv"

#: Event names of the study-folder contract (DEVELOPERS.md, ``events.csv``).
EVENT_TYPES: tuple[str, ...] = (
    "obstructive_apnea", "central_apnea", "mixed_apnea", "unclassified_apnea",
    "hypopnea", "desaturation",
)
#: Events counted in the REI: apneas of every type and hypopneas (AASM HSAT rules).
RESPIRATORY_TYPES: frozenset[str] = frozenset(EVENT_TYPES) - {"desaturation"}
ACTIONS: tuple[str, ...] = ("accept", "reject", "retype", "adjust", "add", "confirm")
#: Sanity bounds on an edited or added event's duration (not a scoring rule: they only
#: stop a slip of the mouse from creating a zero-length or hour-long event).
MIN_EDIT_DURATION_S = 1.0
MAX_EDIT_DURATION_S = 600.0
_LEAD_COLUMNS = ("onset_s", "duration_s", "event", "rule_sets")


class EditRefused(HsatError):
    """An edit request that cannot be applied (unknown event, bad value, wrong state)."""

    exit_code = EXIT_USAGE


@dataclass(frozen=True)
class ReviewedEvent:
    """One event as the review sees it.

    ``status`` is ``auto`` (untouched), ``accepted`` (kept or changed by the reviewer),
    ``rejected`` or ``added``. ``original`` holds the row of ``events.csv`` as read (all
    columns, as text) for automatic events, and is empty for added ones.
    """

    event_id: str
    onset_s: float
    duration_s: float
    event: str
    rule_sets: tuple[str, ...]
    status: str
    original: dict[str, str] = field(default_factory=dict)

    @property
    def end_s(self) -> float:
        return self.onset_s + self.duration_s

    def state(self) -> dict[str, Any]:
        """The fields an edit changes, as written in the log's before/after."""
        return {
            "onset_s": round(self.onset_s, 3), "duration_s": round(self.duration_s, 3),
            "event": self.event, "rule_sets": list(self.rule_sets), "status": self.status,
        }

    @property
    def retyped(self) -> bool:
        return bool(self.original) and self.event != self.original.get("event")

    @property
    def adjusted(self) -> bool:
        if not self.original:
            return False
        return (abs(self.onset_s - float(self.original["onset_s"])) > 1e-3
                or abs(self.duration_s - float(self.original["duration_s"])) > 1e-3)


@dataclass(frozen=True)
class AutoEvents:
    """The automatic scoring of a study, as read from ``events.csv``."""

    path: Path
    columns: tuple[str, ...]
    events: tuple[ReviewedEvent, ...]
    sha256: str


def _split_rule_sets(text: str) -> tuple[str, ...]:
    return tuple(s.strip() for s in (text or "").split(";") if s.strip())


def read_auto_events(study_dir: str | Path) -> AutoEvents:
    """Read ``events.csv`` of a study folder; raise ``UnreadableInput`` naming the problem."""
    path = Path(study_dir) / AUTO_EVENTS
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise UnreadableInput(path, f"cannot read the automatic events ({exc.strerror})") from None
    try:
        reader = csv.DictReader(io.StringIO(raw.decode("utf-8")))
        columns = tuple(reader.fieldnames or ())
        rows = list(reader)
    except (UnicodeDecodeError, csv.Error) as exc:
        raise UnreadableInput(path, f"not a readable CSV file ({exc})") from None
    missing = [c for c in _LEAD_COLUMNS if c not in columns]
    if missing:
        raise UnreadableInput(path, f"missing column(s) {', '.join(missing)}")
    events = []
    for i, row in enumerate(rows):
        try:
            onset, duration = float(row["onset_s"]), float(row["duration_s"])
        except (TypeError, ValueError):
            raise UnreadableInput(
                path, f"row {i + 2}: onset_s/duration_s are not numbers") from None
        events.append(ReviewedEvent(
            event_id=f"a{i}", onset_s=onset, duration_s=duration, event=row["event"],
            rule_sets=_split_rule_sets(row["rule_sets"]), status="auto",
            original={k: (v if v is not None else "") for k, v in row.items() if k is not None},
        ))
    return AutoEvents(path, columns, tuple(events), hashlib.sha256(raw).hexdigest())


def read_edit_log(study_dir: str | Path) -> list[dict[str, Any]]:
    """All entries of ``review-edits.jsonl`` (empty when there is no log yet)."""
    path = Path(study_dir) / EDIT_LOG
    if not path.exists():
        return []
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise UnreadableInput(path, f"cannot read the edit log ({exc})") from None
    entries = []
    for n, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            entry = json.loads(line)
        except json.JSONDecodeError:
            raise UnreadableInput(path, f"line {n} is not valid JSON") from None
        if not isinstance(entry, dict) or entry.get("action") not in ACTIONS:
            raise UnreadableInput(path, f"line {n} is not an edit entry")
        entries.append(entry)
    return entries


def _same_state(a: dict[str, Any] | None, b: dict[str, Any] | None) -> bool:
    if a is None or b is None:
        return a is b
    return (
        abs(float(a["onset_s"]) - float(b["onset_s"])) < 1e-6
        and abs(float(a["duration_s"]) - float(b["duration_s"])) < 1e-6
        and a["event"] == b["event"] and list(a["rule_sets"]) == list(b["rule_sets"])
        and a["status"] == b["status"]
    )


def _from_state(event_id: str, state: dict[str, Any], original: dict[str, str]) -> ReviewedEvent:
    return ReviewedEvent(
        event_id=event_id, onset_s=float(state["onset_s"]),
        duration_s=float(state["duration_s"]), event=str(state["event"]),
        rule_sets=tuple(state["rule_sets"]), status=str(state["status"]), original=original,
    )


def apply_edits(auto: AutoEvents, entries: Iterable[dict[str, Any]],
                log_path: str | Path = EDIT_LOG) -> list[ReviewedEvent]:
    """Replay the edit log over the automatic events; return every event in onset order.

    Rejected events stay in the list (``status == "rejected"``) so the page can show and
    restore them; ``kept_events`` leaves them out.
    """
    table: dict[str, ReviewedEvent] = {e.event_id: e for e in auto.events}
    for n, entry in enumerate(entries, start=1):
        where = f"entry {n}"
        sha = entry.get("auto_events_sha256")
        if sha != auto.sha256:
            raise UnreadableInput(
                log_path, f"{where} was made against a different {AUTO_EVENTS} "
                "(the study was re-analysed after review); move the old log aside to start over",
            )
        action, event_id = entry["action"], entry.get("event_id")
        if action == "confirm":
            continue
        current = table.get(str(event_id))
        before = current.state() if current is not None else None
        if not _same_state(before, entry.get("before")):
            raise UnreadableInput(log_path, f"{where} ({action} {event_id}) does not follow "
                                  "from the entries before it; the log was altered")
        after = entry.get("after")
        if not isinstance(after, dict):
            raise UnreadableInput(log_path, f"{where} has no 'after' state")
        original = current.original if current is not None else {}
        table[str(event_id)] = _from_state(str(event_id), after, original)
    return sorted(table.values(), key=lambda e: (e.onset_s, e.event_id))


def kept_events(events: Iterable[ReviewedEvent]) -> list[ReviewedEvent]:
    """The reviewed scoring: every event that is not rejected, in onset order."""
    return [e for e in events if e.status != "rejected"]


def review_counts(events: Sequence[ReviewedEvent], entries: Sequence[dict[str, Any]]
                  ) -> dict[str, Any]:
    """The ``review`` object of summary.json.

    ``added`` counts added events still kept; ``rejected`` automatic events finally
    rejected; ``retyped``/``adjusted`` kept automatic events whose type / start or end
    differ from the automatic scoring. ``edited_count`` counts distinct events in any of
    these (an event both retyped and adjusted counts once). An edit later undone (reject,
    then accept) leaves no count. ``reviewed`` is true once the log has any entry.
    """
    added = [e for e in events if e.status == "added"]
    rejected = [e for e in events if e.status == "rejected" and e.original]
    kept_auto = [e for e in events if e.status != "rejected" and e.original]
    retyped = [e for e in kept_auto if e.retyped]
    adjusted = [e for e in kept_auto if e.adjusted]
    edited = {e.event_id for e in (*added, *rejected, *retyped, *adjusted)}
    reviewers = sorted({str(x.get("reviewer", "")) for x in entries if x.get("reviewer")})
    last_at = max((str(x.get("at", "")) for x in entries), default="")
    return {
        "reviewed": bool(entries),
        "reviewer": "; ".join(reviewers),
        "edited_count": len(edited),
        "added": len(added),
        "rejected": len(rejected),
        "retyped": len(retyped),
        "adjusted": len(adjusted),
        "log_entries": len(entries),
        "last_edit_at": last_at,
        "edit_log": EDIT_LOG,
        "reviewed_events": REVIEWED_EVENTS,
    }


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _bounded(value: object, name: str, low: float, high: float) -> float:
    try:
        x = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise EditRefused(None, f"{name} must be a number, got {value!r}") from None
    if not low <= x <= high:
        raise EditRefused(None, f"{name} must lie in [{low:g}, {high:g}], got {x:g}")
    return x


def _span(request: dict[str, Any], night_s: float) -> tuple[float, float]:
    onset = _bounded(request.get("onset_s"), "onset_s", 0.0, night_s)
    duration = _bounded(request.get("duration_s"), "duration_s",
                        MIN_EDIT_DURATION_S, MAX_EDIT_DURATION_S)
    if onset + duration > night_s + 1e-6:
        raise EditRefused(None, f"the event would end after the recording ({night_s:g} s)")
    return round(onset, 3), round(duration, 3)


def _event_type(value: object) -> str:
    if value not in EVENT_TYPES:
        raise EditRefused(None, f"event type must be one of {', '.join(EVENT_TYPES)}, "
                          f"got {value!r}")
    return str(value)


def _check_printable_name(reviewer: str) -> None:
    """The report prints the reviewer's name and the log is append-only: refuse a name
    the report font cannot draw before it is written, not when the report is rendered."""
    from hsat.report import describe_chars, load_fonts, undrawable

    bad = undrawable(reviewer, load_fonts())
    if bad:
        raise EditRefused(None, f"the reviewer's name contains characters the report font "
                          f"cannot draw: {describe_chars(bad)}; give it in Latin, Greek or "
                          "Cyrillic script (a transliteration)")


def make_entry(
    request: dict[str, Any],
    events: Sequence[ReviewedEvent],
    *,
    auto_sha256: str,
    night_s: float,
    study_rule_sets: Sequence[str],
) -> dict[str, Any]:
    """Check an edit request against the current table and build its log entry.

    ``request`` holds ``action``, ``reviewer`` and, by action, ``event_id``, ``event``
    (type), ``onset_s``/``duration_s`` and optionally ``rule_sets`` (``add``; all the
    study's rule sets when omitted). Raises ``EditRefused`` with the reason.
    """
    action = request.get("action")
    if action not in ACTIONS:
        raise EditRefused(None, f"action must be one of {', '.join(ACTIONS)}, got {action!r}")
    reviewer = str(request.get("reviewer") or "").strip()
    if not reviewer or len(reviewer) > 200 or any(ord(c) < 32 for c in reviewer):
        raise EditRefused(None, "the reviewer's name is required (one line, at most 200 "
                          "characters)")
    _check_printable_name(reviewer)
    entry: dict[str, Any] = {"v": 1, "at": _now(), "reviewer": reviewer, "action": action,
                             "event_id": None, "before": None, "after": None,
                             "auto_events_sha256": auto_sha256}
    if action == "confirm":
        return entry
    by_id = {e.event_id: e for e in events}
    if action == "add":
        onset, duration = _span(request, night_s)
        chosen = request.get("rule_sets") or list(study_rule_sets)
        if not isinstance(chosen, list) or not set(chosen) <= set(study_rule_sets) or not chosen:
            raise EditRefused(None, f"rule_sets must be a non-empty subset of "
                              f"{', '.join(study_rule_sets)}")
        n_added = sum(1 for e in events if e.event_id.startswith("u"))
        new = ReviewedEvent(f"u{n_added + 1}", onset, duration,
                            _event_type(request.get("event")),
                            tuple(r for r in study_rule_sets if r in chosen), "added")
        entry.update(event_id=new.event_id, after=new.state())
        return entry
    event_id = str(request.get("event_id") or "")
    current = by_id.get(event_id)
    if current is None:
        raise EditRefused(None, f"no event {event_id!r} in this study")
    if current.status == "rejected" and action != "accept":
        raise EditRefused(None, f"event {event_id} is rejected; keep it first to change it")
    kept_status = "added" if current.status == "added" else "accepted"
    if action == "accept":
        after = replace(current, status=kept_status)
    elif action == "reject":
        after = replace(current, status="rejected")
    elif action == "retype":
        after = replace(current, event=_event_type(request.get("event")), status=kept_status)
    else:  # adjust
        onset, duration = _span(request, night_s)
        after = replace(current, onset_s=onset, duration_s=duration, status=kept_status)
    entry.update(event_id=event_id, before=current.state(), after=after.state())
    return entry


def append_entry(study_dir: str | Path, entry: dict[str, Any]) -> None:
    """Append one entry to the study's edit log (created owner-only when missing)."""
    append_line(Path(study_dir) / EDIT_LOG, json.dumps(entry, separators=(",", ":"),
                                                       ensure_ascii=False))


#: Columns of events.csv that still hold when the reviewer moves an event's start or end;
#: the others (baseline, amplitude ratio, desaturation, ...) were measured on the
#: automatic span and are left empty for a moved or added event.
_SPAN_FREE_COLUMNS = frozenset({"event_id", "position", "sensor", "linked_event_id",
                                "hypopnea_type"})


def reviewed_csv_text(auto: AutoEvents, events: Sequence[ReviewedEvent],
                      position_at: Callable[[float], str] | None = None) -> str:
    """``events-reviewed.csv``: the kept events with the columns of ``events.csv`` first,
    then ``review_id`` and ``review_status`` (``auto``, ``accepted``, ``retyped``,
    ``adjusted``, ``retyped+adjusted`` or ``added``).

    Columns measured on the automatic span are left empty for a moved or added event,
    and ``hypopnea_type`` for an event no longer a hypopnea. ``position_at(t)`` gives
    the body position at a time, to fill ``position`` for added and moved events.
    """
    columns = list(auto.columns) + [c for c in ("review_id", "review_status")
                                    if c not in auto.columns]
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=columns, lineterminator="\n")
    writer.writeheader()
    for e in kept_events(events):
        moved = not e.original or e.adjusted
        row = {c: e.original.get(c, "") for c in auto.columns}
        if moved:
            row = {c: (v if c in _SPAN_FREE_COLUMNS else "") for c, v in row.items()}
            if position_at is not None and "position" in row:
                row["position"] = position_at(e.onset_s + e.duration_s / 2)
        if e.event != "hypopnea" and "hypopnea_type" in row:
            row["hypopnea_type"] = ""
        if "end_s" in row:
            row["end_s"] = f"{e.end_s:.3f}"
        flags = [name for name, on in (("retyped", e.retyped), ("adjusted", e.adjusted)) if on]
        status = "added" if e.status == "added" else ("+".join(flags) or e.status)
        row.update(onset_s=f"{e.onset_s:.3f}", duration_s=f"{e.duration_s:.3f}",
                   event=e.event, rule_sets=";".join(e.rule_sets), review_id=e.event_id,
                   review_status=status)
        writer.writerow(row)
    return out.getvalue()
