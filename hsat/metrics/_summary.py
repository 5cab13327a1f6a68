"""``summarize``: the whole summary.json of one scored night."""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from hsat import __version__
from hsat.breaths import Breaths
from hsat.events import Oximetry, Scoring, find_cheyne_stokes, oximetry_of
from hsat.metrics._indices import basic_indices, event_counts, event_durations
from hsat.metrics._oximetry import (
    depth_distribution,
    hypoxic_burden,
    pulse_1hz,
    pulse_rise,
    pulse_summary,
    spo2_summary,
)
from hsat.metrics._tables import (
    hour_bounds,
    hourly_events,
    hourly_monitoring_min,
    position_minutes,
    positional_table,
)
from hsat.recording import POSITIONS, Conditioned, Interval
from hsat.rulesets import RuleSet

SCHEMA_VERSION = "1.0"

CAUTIONS: tuple[str, ...] = (
    "Automated scoring: every event and index must be reviewed against the raw signals by "
    "a qualified clinician before the report is signed; results do not replace clinical "
    "judgement. Follow local regulations and licensed practice.",
    "REI is per hour of monitoring time, which includes wake the signals could not detect; "
    "an HSAT can underestimate the severity found by polysomnography.",
    "Arousals cannot be scored without EEG: hypopneas that end only in an arousal are not "
    "counted (AASM rule 1A's arousal alternative).",
    "A negative, inconclusive or technically inadequate HSAT does not exclude obstructive "
    "sleep apnea; polysomnography is then recommended (Kapur et al., JCSM 2017).",
    "Hypoxic burden is given per hour of monitoring time (the published method uses sleep "
    "time); hypoxic burden, pulse-rate rise and T90 are research markers without validated "
    "clinical cut-offs.",
)


def _as_mapping(obj: object) -> dict[str, Any]:
    """A plain dict from a mapping, a dataclass or a pydantic model (empty for None)."""
    if obj is None:
        return {}
    if isinstance(obj, Mapping):
        return dict(obj)
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: getattr(obj, f.name) for f in dataclasses.fields(obj)}
    dump = getattr(obj, "model_dump", None)
    if callable(dump):
        return dict(dump())
    return {}


def _jsonable(value: object) -> object:
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, Mapping):
        return {str(k): _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    return value


def _age(birthdate: date | None, on: date) -> float | None:
    if birthdate is None:
        return None
    years = on.year - birthdate.year - ((on.month, on.day) < (birthdate.month, birthdate.day))
    return float(years) if years >= 0 else None


def patient_block(cond: Conditioned, intake: object = None) -> tuple[dict[str, Any],
                                                                      dict[str, Any] | None]:
    """Patient fields (intake first, then the EDF+ header) and the kit details."""
    head = cond.recording.patient
    data = _as_mapping(intake)
    pat = _as_mapping(data.get("patient"))
    study = _as_mapping(data.get("study"))
    birth = pat.get("birthdate") or head.birthdate
    if isinstance(birth, str):
        try:
            birth = date.fromisoformat(birth)
        except ValueError:
            birth = None
    out = {
        "code": str(pat.get("id") or pat.get("code") or head.code or ""),
        "name": str(pat.get("name") or head.name or ""),
        "sex": str(pat.get("sex") or head.sex or ""),
        "birthdate": birth.isoformat() if isinstance(birth, date) else None,
        "age_years": _age(birth if isinstance(birth, date) else None,
                          cond.recording.start.date()),
    }
    kit = {k: _jsonable(v) for k, v in study.items() if v not in (None, "")} or None
    return out, kit


def _intervals(items: Sequence[Interval]) -> dict[str, object]:
    periods = [{"start_s": round(iv.start_s, 1), "end_s": round(iv.end_s, 1),
                "duration_s": round(iv.duration_s, 1), "reason": iv.reason, "role": iv.role}
               for iv in items]
    return {"total_min": round(sum(iv.duration_s for iv in items) / 60.0, 1),
            "periods": periods}


def _channels(cond: Conditioned) -> dict[str, object]:
    out = {}
    for role, sig in cond.signals.items():
        valid_s = sig.valid_seconds()
        dur = sig.duration_s
        out[role] = {"label": sig.label, "fs_hz": float(sig.fs), "unit": sig.unit,
                     "valid_h": round(valid_s / 3600.0, 2),
                     "valid_pct": round(100.0 * valid_s / dur, 1) if dur > 0 else 0.0}
    return out


def _rule_set_block(rs: RuleSet) -> dict[str, object]:
    params = rs.model_dump(exclude={"name", "description", "source", "content_sha256"})
    return {"name": rs.name, "description": rs.description, "source": rs.source,
            "sha256": rs.content_sha256, "parameters": _jsonable(params)}


def _in_monitoring(cond: Conditioned, df: pd.DataFrame) -> pd.DataFrame:
    if len(df) == 0:
        return df
    return df[np.asarray(cond.in_analysis(df["onset_s"].to_numpy(float)), dtype=bool)]


def _in_oximetry(oxi: Oximetry | None, df: pd.DataFrame) -> pd.DataFrame:
    if oxi is None or len(df) == 0:
        return df.iloc[0:0]
    idx = np.clip(df["onset_s"].to_numpy(float).astype(np.int64), 0, len(oxi.scored) - 1)
    return df[oxi.scored[idx]]


def _central(resp: pd.DataFrame) -> np.ndarray:
    return ((resp["event"] == "central_apnea")
            | ((resp["event"] == "hypopnea") & (resp["hypopnea_type"] == "central"))
            ).to_numpy()


def rule_set_indices(
    cond: Conditioned, breaths: Breaths, scoring: Scoring, rs: RuleSet,
    oxi: Oximetry | None, pulse: np.ndarray, minutes: dict[str, float],
) -> dict[str, object]:
    """Every index of one rule set (the ``indices.<name>`` object of summary.json)."""
    mt_h = cond.monitoring_time_s / 3600.0
    ox_h = float(np.count_nonzero(oxi.scored)) / 3600.0 if oxi is not None else 0.0
    resp = _in_monitoring(cond, scoring.respiratory(rs.name))
    desats = _in_oximetry(oxi, scoring.desaturations(rs.name))
    counts = event_counts(resp, desats)
    out: dict[str, object] = basic_indices(counts, mt_h, ox_h, rs.severity_thresholds)
    out["counts"] = counts
    out["event_durations"] = event_durations(resp)
    hyp = resp[resp["event"] == "hypopnea"]
    out["hypopnea_types"] = {
        "obstructive": int((hyp["hypopnea_type"] == "obstructive").sum()),
        "central": int((hyp["hypopnea_type"] == "central").sum()),
        "unclassified": int((~hyp["hypopnea_type"].isin(["obstructive", "central"])).sum()),
    }
    out["positional"] = positional_table(cond, resp, float(out["rei"]), minutes)
    bounds = hour_bounds(cond)
    out["hourly"] = hourly_events(bounds, hourly_monitoring_min(cond, bounds), resp, desats)
    csb = find_cheyne_stokes(
        resp["onset_s"].to_numpy(float), resp["end_s"].to_numpy(float), _central(resp),
        breaths.get("flow") or breaths.get("thermal"), mt_h, rs.cheyne_stokes,
    ) if rs.detectors.cheyne_stokes else None
    out["cheyne_stokes"] = {
        "present": bool(csb.present) if csb else False,
        "duration_min": round(csb.duration_min, 1) if csb else 0.0,
        "central_index": round(csb.central_index, 1) if csb else 0.0,
        "periods": [{"start_s": a, "end_s": b, "events": n} for a, b, n in csb.periods]
        if csb else [],
        "criteria": csb.criteria if csb else "Cheyne-Stokes detection is off in this rule set",
    }
    hb, _window = hypoxic_burden(oxi, resp["end_s"].to_numpy(float), mt_h)
    out["hypoxic_burden"] = hb
    out["pulse_rise_bpm"] = pulse_rise(pulse, resp["onset_s"].to_numpy(float),
                                       resp["end_s"].to_numpy(float))
    out["monitoring_h"] = round(mt_h, 2)
    out["oximetry_h"] = round(ox_h, 2)
    return out


def summarize(
    cond: Conditioned,
    breaths: Breaths,
    scoring: Scoring,
    rule_sets: Sequence[RuleSet],
    intake: object = None,
) -> dict[str, Any]:
    """The summary.json content of one night (schema: hsat/schemas/summary.schema.json).

    Parameters
    ----------
    cond : the conditioned night.
    breaths : its breaths (used for the Cheyne-Stokes crescendo-decrescendo check).
    scoring : from ``hsat.events.score_events`` or ``Scoring.from_table`` (edited events).
    rule_sets : the rule sets to report, in order; the first one supplies the hypoxic
        burden and pulse-rate rise shown in ``spo2`` / ``pulse``.
    intake : optional intake details (``hsat.intake.load_intake_for``; a mapping, a
        dataclass or a pydantic model with ``patient`` and ``study`` parts).
    """
    rec = cond.recording
    oxi = oximetry_of(cond)
    n_sec = len(oxi.values) if oxi is not None else int(rec.duration_s)
    pulse = pulse_1hz(cond, n_sec)
    minutes = position_minutes(cond)
    indices = {rs.name: rule_set_indices(cond, breaths, scoring, rs, oxi, pulse, minutes)
               for rs in rule_sets}
    first = rule_sets[0] if rule_sets else None
    spo2 = spo2_summary(oxi)
    mt_h = cond.monitoring_time_s / 3600.0
    if first is not None:
        resp = _in_monitoring(cond, scoring.respiratory(first.name))
        hb, window = hypoxic_burden(oxi, resp["end_s"].to_numpy(float), mt_h)
    else:
        hb, window = None, None
    spo2["hypoxic_burden"] = hb
    spo2["hypoxic_burden_rule_set"] = first.name if first else ""
    spo2["hypoxic_burden_window_s"] = list(window) if window else None
    all_desats = _in_oximetry(oxi, scoring.events[scoring.events["event"] == "desaturation"])
    spo2["desaturation_depth"] = depth_distribution(all_desats["desat_pct"].to_numpy(float))
    pulse_block = pulse_summary(cond, oxi)
    if first is not None:
        pulse_block["event_rise_bpm"] = indices[first.name]["pulse_rise_bpm"]
        pulse_block["event_rise_rule_set"] = first.name
    mon_min = cond.monitoring_time_s / 60.0
    has_pos = "position" in cond.signals
    position = {
        "available": has_pos,
        "minutes": minutes,
        "pct_of_monitoring": {p: round(100.0 * minutes[p] / mon_min, 1) if mon_min > 0 else 0.0
                              for p in POSITIONS},
    }
    patient, kit = patient_block(cond, intake)
    summary: dict[str, Any] = {
        "schema_version": SCHEMA_VERSION,
        "software": {"name": "hsat", "version": __version__},
        "study": {
            "input_file": Path(rec.path).name, "input_sha256": rec.sha256,
            "start_time": rec.start.isoformat(), "file_type": rec.file_type,
            "equipment": rec.equipment, "recording_code": rec.recording_code,
            "profile": rec.profile_name, "lights_off_s": round(cond.lights_off_s, 1),
            "lights_on_s": round(cond.lights_on_s, 1),
        },
        "patient": patient,
        "recording_time_h": round(max(cond.recording_time_s, 0.0) / 3600.0, 2),
        "monitoring_time_h": round(mt_h, 2),
        "channels": _channels(cond),
        "exclusions": _intervals(cond.exclusions),
        "wake": _intervals(cond.wake),
        "adequacy": {
            "adequate": bool(cond.adequacy.adequate),
            "reasons": list(cond.adequacy.reasons),
            "valid_flow_h": round(cond.adequacy.valid_flow_h, 2),
            "valid_spo2_h": round(cond.adequacy.valid_spo2_h, 2),
            "valid_flow_and_spo2_h": round(cond.adequacy.valid_flow_and_spo2_h, 2),
            "minimum_h": cond.adequacy.minimum_h,
        },
        "rule_sets": [_rule_set_block(rs) for rs in rule_sets],
        "indices": indices,
        "spo2": spo2,
        "pulse": pulse_block,
        "position": position,
        "hourly": _hourly_signals(cond, oxi, pulse),
        "sensors": dict(scoring.sensors),
        "notes": [*CAUTIONS, *scoring.notes, *cond.notes, *_edit_notes(cond, scoring)],
    }
    if kit is not None:
        summary["kit"] = kit
    return _jsonable(summary)  # type: ignore[return-value]


def _edit_notes(cond: Conditioned, scoring: Scoring) -> list[str]:
    df = scoring.events
    resp = df[df["event"] != "desaturation"]
    outside = len(resp) - len(_in_monitoring(cond, resp))
    if outside:
        return [f"{outside} event(s) begin outside monitoring time and are not counted."]
    return []


def _hourly_signals(cond: Conditioned, oxi: Oximetry | None,
                    pulse: np.ndarray) -> list[dict[str, object]]:
    bounds = hour_bounds(cond)
    mins = hourly_monitoring_min(cond, bounds)
    from hsat.events import position_at
    from hsat.metrics._tables import monitoring_times

    t_mon = monitoring_times(cond)
    pos = position_at(cond, t_mon)
    rows = []
    for k, ((a, b), m) in enumerate(zip(bounds, mins, strict=True)):
        row: dict[str, object] = {"hour": k + 1, "start_s": a, "end_s": b,
                                  "monitoring_min": round(m, 1), "spo2_mean_pct": None,
                                  "spo2_min_pct": None, "pulse_mean_bpm": None,
                                  "main_position": None}
        if oxi is not None:
            sl = slice(int(a), int(b))
            x = oxi.values[sl][oxi.scored[sl]]
            if len(x):
                row["spo2_mean_pct"] = round(float(np.mean(x)), 1)
                row["spo2_min_pct"] = round(float(np.min(x)), 1)
            pr = pulse[sl][oxi.period[sl] & np.isfinite(pulse[sl])]
            if len(pr):
                row["pulse_mean_bpm"] = round(float(np.mean(pr)), 1)
        here = pos[(t_mon >= a) & (t_mon < b)]
        if len(here):
            values, counts = np.unique(here.astype(str), return_counts=True)
            row["main_position"] = str(values[int(np.argmax(counts))])
        rows.append(row)
    return rows


def summarize_events(
    cond: Conditioned,
    breaths: Breaths,
    events_table: pd.DataFrame,
    rule_sets: Sequence[RuleSet],
    intake: object = None,
    *,
    source: str = "",
) -> dict[str, Any]:
    """``summarize`` on an events table (e.g. events.csv after review edits)."""
    scoring = Scoring.from_table(events_table, [rs.name for rs in rule_sets], source=source)
    return summarize(cond, breaths, scoring, rule_sets, intake=intake)
