"""``score_events``: every detector of every rule set on one conditioned night."""

from __future__ import annotations

from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from hsat.breaths import Breaths
from hsat.events._desaturation import (
    Oximetry,
    detect_desaturations,
    link_desaturations,
    oximetry_of,
)
from hsat.events._event_desaturation import event_desaturation
from hsat.events._respiratory import (
    Reduction,
    SensorTrace,
    find_reductions,
    sensor_trace,
)
from hsat.events._scoring import EVENT_COLUMNS, Scoring, empty_table, merge_rule_set_rows
from hsat.events._traces import Grid, analysis_on, grid_for
from hsat.events._typing import apnea_type, belt_baselines, effort_breaths, hypopnea_type
from hsat.recording import POSITIONS, Conditioned
from hsat.rulesets import RuleSet

_RESPIRATORY_ROLES = ("flow", "thermal")
_BELT_ROLES = ("thorax", "abdomen")
#: Threads the channels' amplitude traces are shared out to (the machine has two cores).
TRACE_WORKERS = 2


def position_at(cond: Conditioned, t_s: np.ndarray) -> np.ndarray:
    """Decoded body position ('supine', ...) at each time; 'unknown' without a channel."""
    t = np.asarray(t_s, dtype=float)
    sig = cond.signals.get("position")
    if sig is None or len(sig.data) == 0:
        return np.full(t.shape, "unknown", dtype=object)
    idx = sig.index_of(t)
    codes = sig.data[idx]
    ok = sig.mask[idx] & np.isfinite(codes)
    codes = np.where(ok, codes, POSITIONS.index("unknown")).astype(np.int64)
    codes = np.clip(codes, 0, len(POSITIONS) - 1)
    return np.asarray(POSITIONS, dtype=object)[codes]


def _desaturations_for(oxi: Oximetry | None, rule: RuleSet) -> pd.DataFrame:
    d = rule.desaturation
    if oxi is None:
        return detect_desaturations(
            Oximetry(np.zeros(0), np.zeros(0, bool), np.zeros(0, bool)), min_drop_pct=1.0,
            baseline_window_s=d.baseline_window_s, min_duration_s=d.min_duration_s,
            max_duration_s=d.max_duration_s,
        )
    return detect_desaturations(
        oxi, min_drop_pct=min(d.drop_pct, rule.hypopnea.desaturation_pct),
        baseline_window_s=d.baseline_window_s, min_duration_s=d.min_duration_s,
        max_duration_s=d.max_duration_s,
    )


@dataclass
class _Found:
    """What the respiratory detectors found under one set of detector parameters;
    shared by rule sets that differ only in their desaturation criteria."""

    reductions: list[Reduction]
    onsets: np.ndarray
    ends: np.ndarray
    apnea_types: dict[int, tuple[str, float]]
    effort_ratio: np.ndarray
    hypopnea_types: dict[int, str] = field(default_factory=dict)


def _detector_key(rule: RuleSet) -> tuple[object, ...]:
    h = rule.hypopnea
    return (rule.baseline, rule.apnea, rule.detectors, rule.invalid_data,
            h.drop_pct, h.min_duration_s, h.max_duration_s)


def _find(cond: Conditioned, breaths: Breaths, rule: RuleSet, grid: Grid,
          allowed: np.ndarray, traces: dict[str, SensorTrace]) -> _Found:
    reductions = find_reductions(cond, traces, rule, grid, allowed)
    onsets = np.array([r.start for r in reductions], dtype=float) / grid.fs
    ends = np.array([r.end for r in reductions], dtype=float) / grid.fs
    belts = {r: traces[r] for r in _BELT_ROLES if r in traces}
    belt_base = belt_baselines(belts, onsets, ends, rule)
    absent_limit = rule.apnea.effort_absent_pct / 100.0
    types: dict[int, tuple[str, float]] = {}
    ratios = np.full(len(reductions), np.nan)
    for k, red in enumerate(reductions):  # loop over events
        effort, period, ratios[k] = effort_breaths(belts, belt_base, k, red.start, red.end,
                                                   absent_limit, grid)
        if red.kind == "apnea":
            types[k] = apnea_type(effort, onsets[k], ends[k], period)
    return _Found(reductions, onsets, ends, types, ratios)


def _score_one(
    cond: Conditioned,
    breaths: Breaths,
    rule: RuleSet,
    grid: Grid,
    found: _Found,
    desats: pd.DataFrame,
    oxi: Oximetry | None,
) -> pd.DataFrame:
    reductions, onsets, ends = found.reductions, found.onsets, found.ends
    is_hyp = np.array([r.kind == "hypopnea" for r in reductions], dtype=bool)
    needed = np.where(is_hyp, rule.hypopnea.desaturation_pct, 0.0)
    drops = event_desaturation(cond, oxi, onsets, ends, needed,
                               baseline_window_s=rule.desaturation.baseline_window_s,
                               link_window_s=rule.desaturation.link_window_s,
                               nadir=rule.desaturation.event_nadir)
    linked = link_desaturations(onsets, ends, desats,
                                link_window_s=rule.desaturation.link_window_s)
    sign = 1.0
    if "thorax" in breaths.series and "abdomen" in breaths.series:
        sign = float(breaths.series["thorax"].polarity * breaths.series["abdomen"].polarity
                     or 1)
    rows: list[dict[str, object]] = []
    drop_pct = drops["drop_pct"].to_numpy()
    nadir_pct = drops["nadir_pct"].to_numpy()
    base_pct = drops["baseline_pct"].to_numpy()
    desat_onset = desats["onset_s"].to_numpy() if len(desats) else np.zeros(0)
    for k, red in enumerate(reductions):  # loop over events
        d = int(linked[k])
        drop = float(drop_pct[k])
        row: dict[str, object] = {
            "onset_s": onsets[k], "duration_s": ends[k] - onsets[k], "sensor": red.role,
            "baseline_amplitude": red.baseline, "min_amplitude_ratio": red.min_ratio,
            "mean_amplitude_ratio": red.mean_ratio,
            "desat_pct": drop, "nadir_pct": float(nadir_pct[k]),
            "spo2_baseline_pct": float(base_pct[k]),
        }
        if d >= 0:
            row["linked_desat_onset_s"] = float(desat_onset[d])
        if red.kind == "apnea":
            name, absent_fraction = found.apnea_types[k]
            row.update(event=name, effort_absent_fraction=absent_fraction)
        else:
            if not drop >= rule.hypopnea.desaturation_pct - 1e-6:
                continue  # no desaturation meeting the rule: not a hypopnea
            row["event"] = "hypopnea"
            if rule.detectors.hypopnea_type:
                if k not in found.hypopnea_types:
                    found.hypopnea_types[k] = hypopnea_type(cond, red, grid,
                                                            found.effort_ratio[k], sign)
                row["hypopnea_type"] = found.hypopnea_types[k]
        rows.append(row)
    if rule.detectors.desaturation and len(desats):
        keep = desats["drop_pct"].to_numpy() >= rule.desaturation.drop_pct - 1e-6
        for ds in desats[keep].itertuples():  # loop over desaturations
            rows.append({
                "onset_s": ds.onset_s, "duration_s": ds.end_s - ds.onset_s,
                "event": "desaturation", "desat_pct": ds.drop_pct,
                "nadir_pct": ds.nadir_pct, "spo2_baseline_pct": ds.baseline_pct,
                "nadir_s": ds.nadir_s,
            })
    if not rows:
        return empty_table()
    df = pd.DataFrame(rows)
    df["position"] = position_at(cond, df["onset_s"].to_numpy())
    return df


def _sensor_notes(traces: dict[str, SensorTrace], rule_sets: Sequence[RuleSet]) -> tuple[
        dict[str, str], tuple[str, ...]]:
    sensors: dict[str, str] = {}
    notes: list[str] = []
    if "thermal" in traces:
        sensors["apnea"] = "thermal (nasal pressure where the thermal sensor is invalid)"
    elif "flow" in traces:
        sensors["apnea"] = "flow"
        notes.append("No oronasal thermal sensor: apneas were scored on nasal pressure, an "
                     "AASM alternative apnea sensor that can over-count apneas.")
    if "flow" in traces:
        sensors["hypopnea"] = "flow"
    elif "thermal" in traces:
        sensors["hypopnea"] = "thermal"
        notes.append("No nasal pressure: hypopneas were scored on the thermal sensor, an "
                     "AASM alternative hypopnea sensor that can under-count hypopneas.")
    belts = [r for r in _BELT_ROLES if r in traces]
    sensors["effort"] = "+".join(belts) if belts else "none"
    if not belts:
        notes.append("No usable effort belts: apneas could not be typed (unclassified).")
    if any(rs.detectors.hypopnea_type for rs in rule_sets):
        notes.append("Hypopnea type (optional AASM rule) from snoring, thoraco-abdominal "
                     "paradox and effort; inspiratory flattening is not assessed.")
    return sensors, tuple(notes)


def score_events(
    cond: Conditioned, breaths: Breaths, rule_sets: Sequence[RuleSet]
) -> Scoring:
    """Score apneas, hypopneas and desaturations under each rule set (pipeline stage 4).

    Parameters
    ----------
    cond : the conditioned night.
    breaths : its breaths (``hsat.breaths.detect_breaths``).
    rule_sets : the rule sets; each event row records the rule sets it is scored under.

    Returns
    -------
    Scoring
        One table of events (``EVENT_COLUMNS``); see ``hsat.events`` for the methods.
    """
    grid = grid_for(cond)
    allowed = analysis_on(cond, grid)
    oxi = oximetry_of(cond)
    trace_cache: dict[object, dict[str, SensorTrace]] = {}
    desat_cache: dict[object, pd.DataFrame] = {}
    found_cache: dict[object, _Found] = {}
    per_rule: dict[str, pd.DataFrame] = {}
    traces: dict[str, SensorTrace] = {}
    for rule in rule_sets:
        if rule.baseline not in trace_cache:
            # one channel's trace needs nothing of another's: two threads share them out
            roles = (*_RESPIRATORY_ROLES, *_BELT_ROLES)
            with ThreadPoolExecutor(max_workers=TRACE_WORKERS) as pool:
                made = list(pool.map(
                    lambda role, b=rule.baseline: sensor_trace(cond, breaths, role, grid, b),
                    roles))
            trace_cache[rule.baseline] = {
                role: tr for role, tr in zip(roles, made, strict=True) if tr is not None}
        traces = trace_cache[rule.baseline]
        key = (rule.desaturation, rule.hypopnea.desaturation_pct)
        if key not in desat_cache:
            desat_cache[key] = _desaturations_for(oxi, rule)
        dkey = _detector_key(rule)
        if dkey not in found_cache:
            found_cache[dkey] = _find(cond, breaths, rule, grid, allowed, traces)
        per_rule[rule.name] = _score_one(cond, breaths, rule, grid, found_cache[dkey],
                                         desat_cache[key], oxi)
    merged = merge_rule_set_rows(per_rule)
    for col in EVENT_COLUMNS:
        if col not in merged.columns:
            merged[col] = np.nan
    merged = _link_ids(merged)
    extra = [c for c in merged.columns if c not in EVENT_COLUMNS and c != "nadir_s"]
    table = merged[list(EVENT_COLUMNS) + extra]
    sensors, notes = _sensor_notes(traces, rule_sets)
    return Scoring.from_table(table, [rs.name for rs in rule_sets], sensors=sensors,
                              notes=notes)


def _link_ids(df: pd.DataFrame) -> pd.DataFrame:
    """Fill ``linked_event_id`` of desaturation rows from the events that link them."""
    if len(df) == 0:
        return df
    df = df.copy()
    df["linked_event_id"] = pd.array([pd.NA] * len(df), dtype="Int64")
    resp = df[(df["event"] != "desaturation") & df["linked_desat_onset_s"].notna()]
    by_onset = {round(float(o), 2): int(i)
                for o, i in zip(resp["linked_desat_onset_s"], resp["event_id"], strict=True)}
    des = df["event"] == "desaturation"
    ids = [by_onset.get(round(float(o), 2)) for o in df.loc[des, "onset_s"]]
    df.loc[des, "linked_event_id"] = pd.array(ids, dtype="Int64")
    return df


__all__ = ["Reduction", "position_at", "score_events"]
