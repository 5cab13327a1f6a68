"""One study under review: its signals (read and conditioned once), events and edits.

``open_review(study_dir)`` reads the night named in ``summary.json``, checks it is the
same file (SHA-256), conditions it, finds its breaths and keeps all of it for the
server's lifetime. Each method answers one API call with JSON-ready data. Edits and
rescoring hold the session's lock so two browser tabs cannot interleave log entries.
"""

from __future__ import annotations

import getpass
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hsat.breaths import Breaths
from hsat.errors import UnreadableInput
from hsat.recording import Conditioned, Recording
from hsat.review._edits import (
    EVENT_TYPES,
    RESPIRATORY_TYPES,
    AutoEvents,
    EditRefused,
    ReviewedEvent,
    append_entry,
    apply_edits,
    make_entry,
    read_auto_events,
    read_edit_log,
    review_counts,
)
from hsat.review._measure import measure_event
from hsat.review._signals import Lane, build_lanes, lane_decimals, strip_payload, window_payload
from hsat.review._study import (
    SUMMARY,
    automatic_summary,
    read_json,
    recording_path,
    safe_study_file,
    study_folder,
)
from hsat.rulesets import RuleSet, load_rule_set

#: Shortest and longest signal window the page may ask for (the issue: 30 s to 10 min;
#: the whole night is allowed too, for the overview-sized view).
MIN_WINDOW_S = 5.0


def study_rule_sets(summary: dict[str, Any]) -> list[RuleSet]:
    """The rule sets the study was scored with, rebuilt from the summary.

    ``rule_sets[i].parameters`` is used when it validates as a whole rule set; else the
    built-in set of that name; else the defaults under that name (measurement only).
    """
    found: list[RuleSet] = []
    for item in summary.get("rule_sets", []):
        name = str(item.get("name", "")) if isinstance(item, dict) else str(item)
        params = item.get("parameters") if isinstance(item, dict) else None
        rule_set: RuleSet | None = None
        if isinstance(params, dict):
            try:
                rule_set = RuleSet.model_validate({**params, "name": name})
            except ValueError:
                rule_set = None
        if rule_set is None:
            try:
                rule_set = load_rule_set(name)
            except Exception:  # a custom set not at hand: defaults serve for measuring
                rule_set = RuleSet(name=name or "unnamed")
        found.append(rule_set)
    return found or [RuleSet(name="default")]


@dataclass(eq=False)
class ReviewSession:
    """Everything the server needs about one study; built once at start-up."""

    folder: Path
    recording: Recording
    conditioned: Conditioned
    breaths: Breaths
    lanes: dict[str, Lane]
    rule_sets: list[RuleSet]
    auto: AutoEvents
    default_reviewer: str = ""
    site: str | Path | None = None
    _lock: threading.Lock = field(default_factory=threading.Lock, init=False, repr=False)

    def __post_init__(self) -> None:
        self.night_s = float(self.recording.duration_s)
        self._decimals = lane_decimals(self.lanes)
        self._strip = strip_payload(self.lanes, self.night_s, self.conditioned)

    # --- reading -------------------------------------------------------------------
    def summary(self) -> dict[str, Any]:
        return read_json(self.folder / SUMMARY)

    def _events_and_log(self) -> tuple[list[ReviewedEvent], list[dict[str, Any]]]:
        entries = read_edit_log(self.folder)
        return apply_edits(self.auto, entries, self.folder / "review-edits.jsonl"), entries

    def study_info(self) -> dict[str, Any]:
        summary = self.summary()
        events, entries = self._events_and_log()
        return {
            "study": summary.get("study", {}),
            "patient": {k: summary.get("patient", {}).get(k, "") for k in ("code", "name")},
            "night_s": self.night_s,
            "monitoring_time_h": summary.get("monitoring_time_h"),
            "lights_off_s": self.conditioned.lights_off_s,
            "lights_on_s": self.conditioned.lights_on_s,
            "lanes": [lane.describe() for lane in self.lanes.values()],
            "event_types": list(EVENT_TYPES),
            "respiratory_types": sorted(RESPIRATORY_TYPES),
            "rule_sets": [rs.name for rs in self.rule_sets],
            "indices": summary.get("indices", {}),
            "auto_indices": automatic_summary(self.folder).get("indices", {}),
            "review": summary.get("review"),
            "pending": review_counts(events, entries),
            "exclusions": summary.get("exclusions", {}).get("periods", []),
            "wake": summary.get("wake", {}).get("periods", []),
            "default_reviewer": self.default_reviewer,
            "signed": self._signed_versions(),
            "adequate": bool(summary.get("adequacy", {}).get("adequate", True)),
        }

    def _signed_versions(self) -> list[str]:
        return sorted(p.name for p in self.folder.glob("report-v*-signed.pdf"))

    def strip(self) -> dict[str, Any]:
        return self._strip

    def window(self, t0_s: float, t1_s: float, columns: int) -> dict[str, Any]:
        if not (t1_s > t0_s):
            raise EditRefused(None, "the window's end must come after its start")
        t0_s = max(-1.0, t0_s)
        t1_s = min(self.night_s + 1.0, max(t1_s, t0_s + MIN_WINDOW_S))
        return window_payload(self.lanes, t0_s, t1_s, columns, self._decimals)

    def events(self) -> dict[str, Any]:
        events, entries = self._events_and_log()
        log = [{k: x.get(k) for k in ("at", "reviewer", "action", "event_id", "before", "after")}
               for x in entries[-50:]]
        return {"events": [self._event_json(e) for e in events],
                "pending": review_counts(events, entries), "log": log}

    @staticmethod
    def _event_json(e: ReviewedEvent) -> dict[str, Any]:
        item = e.state()
        item.update(event_id=e.event_id, retyped=e.retyped, adjusted=e.adjusted,
                    auto=({k: e.original[k] for k in ("onset_s", "duration_s", "event")}
                          if e.original else None),
                    scored={k: v for k, v in e.original.items()
                            if k not in ("onset_s", "duration_s", "event", "rule_sets")})
        return item

    def measure(self, event_id: str) -> dict[str, Any]:
        events, _ = self._events_and_log()
        chosen = next((e for e in events if e.event_id == event_id), None)
        if chosen is None:
            raise EditRefused(None, f"no event {event_id!r} in this study")
        names = set(chosen.rule_sets)
        sets = [rs for rs in self.rule_sets if rs.name in names] or self.rule_sets[:1]
        scored = _as_scored(chosen, sets[0])
        if scored is not None:
            return {"event_id": event_id, "measures": [scored]}
        measures: list[dict[str, Any]] = []
        for rs in sets:
            m = {**measure_event(self.breaths, self.lanes, chosen.onset_s,
                                 chosen.duration_s, chosen.event, rs), "source": "estimated"}
            same = next((x for x in measures if {**x, "rule_set": ""} == {**m, "rule_set": ""}),
                        None)
            if same is not None:  # rule sets with the same baseline settings: say it once
                same["rule_set"] += ", " + rs.name
            else:
                measures.append(m)
        return {"event_id": event_id, "measures": measures}

    def file(self, name: str) -> Path:
        return safe_study_file(self.folder, name)

    # --- changing ------------------------------------------------------------------
    def edit(self, request: dict[str, Any]) -> dict[str, Any]:
        """Check one edit, append it to the log, and return the new event table."""
        with self._lock:
            events, _ = self._events_and_log()
            entry = make_entry(request, events, auto_sha256=self.auto.sha256,
                               night_s=self.night_s,
                               study_rule_sets=[rs.name for rs in self.rule_sets])
            append_entry(self.folder, entry)
            result = self.events()
        result["entry"] = entry
        return result

    def rescore(self, reviewer: str) -> dict[str, Any]:
        """Mark the table reviewed by ``reviewer`` and recompute the summary from it."""
        from hsat.review._rescore import rescore_study

        with self._lock:
            events, _ = self._events_and_log()
            entry = make_entry({"action": "confirm", "reviewer": reviewer}, events,
                               auto_sha256=self.auto.sha256, night_s=self.night_s,
                               study_rule_sets=[rs.name for rs in self.rule_sets])
            append_entry(self.folder, entry)
            summary = rescore_study(self.folder, recording=self.recording.path,
                                    conditioned=self.conditioned, breaths=self.breaths)
        return {"indices": summary.get("indices", {}), "review": summary.get("review")}

    def sign(self, request: dict[str, Any]) -> dict[str, Any]:
        """Sign the report, exactly as ``hsat sign`` does (``hsat amend`` once signed)."""
        from hsat.review._signing import sign_study

        with self._lock:
            return sign_study(
                self.folder, physician=str(request.get("physician") or ""),
                interpretation=str(request.get("interpretation") or ""),
                reason=str(request.get("reason") or ""),
                acknowledge_inadequate=bool(request.get("acknowledge_inadequate")),
                site=self.site)


def _number(row: dict[str, str], key: str) -> float | None:
    try:
        value = float(row.get(key, ""))
    except ValueError:
        return None
    return value if value == value else None


def _as_scored(e: ReviewedEvent, rule_set: RuleSet) -> dict[str, Any] | None:
    """The scoring stage's own baseline and drop for an automatic event whose span the
    reviewer did not move (events.csv columns), in the page's measure format."""
    if not e.original or e.adjusted:
        return None
    row = e.original
    baseline, ratio = _number(row, "baseline_amplitude"), _number(row, "min_amplitude_ratio")
    out: dict[str, Any] = {"rule_set": ", ".join(e.rule_sets), "source": "scored"}
    if baseline is not None and ratio is not None:
        out.update(channel=row.get("sensor") or "flow", baseline=baseline,
                   excursion=round(baseline * ratio, 4), drop_pct=round(100 * (1 - ratio), 1),
                   baseline_from_s=round(e.onset_s - rule_set.baseline.window_s, 2))
    spo2_base, nadir = _number(row, "spo2_baseline_pct"), _number(row, "nadir_pct")
    if spo2_base is not None and nadir is not None:
        d = rule_set.desaturation
        out.update(spo2_baseline=spo2_base, spo2_nadir=nadir,
                   spo2_drop=_number(row, "desat_pct") or round(spo2_base - nadir, 1),
                   spo2_from_s=round(e.onset_s - d.baseline_window_s, 2),
                   spo2_to_s=round(e.end_s + d.link_window_s, 2))
    return out if len(out) > 2 else None


def read_night(edf: Path, summary: dict[str, Any]) -> tuple[Recording, Conditioned]:
    """Read and condition the study's night as ``hsat analyze`` did (same profile, the
    intake's diary exclusions); refuse a file that is not the one analysed.

    Raises
    ------
    UnreadableInput
        The recording's SHA-256 differs from ``study.input_sha256`` of the summary.
    """
    import hsat.api as api
    from hsat.intake import load_intake_for

    rec = api.read(edf, summary.get("study", {}).get("profile") or None)
    expected = str(summary.get("study", {}).get("input_sha256", "") or "")
    if expected and rec.sha256 and expected != rec.sha256:
        raise UnreadableInput(edf, "is not the recording this study was analysed from "
                              "(SHA-256 differs)")
    intake = load_intake_for(edf)
    excluded = intake.excluded_periods(rec.start) if intake is not None else None
    return rec, api.condition(rec, excluded=excluded)


def open_review(study_dir: str | Path, *, recording: str | Path | None = None,
                reviewer: str | None = None, site: str | Path | None = None
                ) -> ReviewSession:
    """Read, condition and find breaths for the study's night once; check its files.

    Raises
    ------
    UnreadableInput
        The folder is not a study folder, the recording is missing, or it is not the
        file the study was analysed from (SHA-256 differs).
    """
    from hsat.breaths import detect_breaths

    folder = study_folder(study_dir)
    summary = automatic_summary(folder)
    rec, cond = read_night(recording_path(folder, summary, recording), summary)
    auto = read_auto_events(folder)
    return ReviewSession(
        folder=folder, recording=rec, conditioned=cond, breaths=detect_breaths(cond),
        lanes=build_lanes(rec, cond), rule_sets=study_rule_sets(summary), auto=auto,
        default_reviewer=reviewer if reviewer is not None else _os_user(), site=site,
    )


def _os_user() -> str:
    try:
        return getpass.getuser()
    except Exception:  # no user name in this environment: the page asks for one
        return ""
