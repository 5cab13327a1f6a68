"""The ground truth of a synthetic night (written as ``<stem>.truth.json``).

Schema (``schema_version`` 1; all times in seconds from the recording start)::

    schema, schema_version, generator, kit, seed, preset, start, duration_s,
    settings                 every NightSpec knob
    lights_off_s, lights_on_s, lights_annotated (written as EDF+ annotations or not)
    sleep_onset_s, final_wake_s
    wake       [{start_s, end_s}]
    invalid    [{start_s, end_s, role, reason}]   role: an hsat role, or "" for all
               reasons: probe off | cannula off | mouth breathing | flat belt | recording gap
    monitoring_time_s        lights-off..lights-on minus wake minus invalid flow/SpO2/""
    events     [{id, onset_s, duration_s, event, subtype, context, position, rem,
                 flow_reduction_pct (designed), flow_reduction_measured_pct (against the
                 non-event breaths of the 2 min before), desat_pct, desat_band,
                 desat_measured_pct, nadir_s, delay_s, scored_under, ambiguous}]
    desaturations [{onset_s, nadir_s, end_s, desat_pct, desat_measured_pct}]
    expected   {rule-set name: {events, apneas, hypopneas, rei, oai, cai, mai, hi}}
    positions  [{start_s, end_s, position}]
    movements  [{start_s, end_s, kind, role}]
    periods    [{start_s, end_s, kind, role}]  kinds: rem_like | csb | weak belt |
               clipping belt | sigh
    channels   [{label, role, fs, unit, physical_min, physical_max}]
    kit_facts  {inspiration_sign, position_codes, spo2_scale, spo2_probe_off, ...}
    physiology {breaths_per_min, spo2_baseline_pct, circulatory_delay_s}
    shortfall  {event type: events that found no room}

Mouth breathing is recorded as invalid flow (role "flow", reason "mouth breathing"):
the nasal pressure is nearly flat while the belts and SpO2 carry on, and it is not an
apnea. ``desat_pct`` is the designed drop; ``desat_measured_pct`` is what a scorer
measures on the written SpO2 with the pre-event baseline = max SpO2 in the 120 s
before onset and the nadir = min SpO2 from onset to 30 s after the end (the built-in
rule sets' windows, rules/aasm-*.toml). ``scored_under`` names the rule sets that
should score the event: apneas (>= 10 s, AASM) under both; hypopneas under
``aasm-3pct`` when the measured drop is >= 3 points and ``aasm-4pct`` when >= 4 (AASM
rules 1A and 1B, standards.md section 1.2). ``ambiguous`` is true when baseline windows
of 60 or 120 s and nadir windows of 30 or 40 s disagree on that, or (non-integer SpO2)
the measured drop lies within 0.2 points of 3 or 4, or nearby events' designed
desaturations (deepening the nadir window, or depressing the whole 2-min baseline)
would move the hypopnea across the 3 % or 4 % line, or its flow drop against the
2-min baseline is under 34 % (close to the 30 % line) or has no baseline breaths.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from hsat import __version__
from hsat.recording import Signal
from hsat.synth._breaths import BreathTable
from hsat.synth._events import APNEAS, Plan
from hsat.synth._kits import KitDef
from hsat.synth._oximetry import Oximetry, event_drop
from hsat.synth._schedule import Schedule
from hsat.synth._spans import lookup, mask
from hsat.synth._spec import NightSpec

RULE_SETS = ("aasm-3pct", "aasm-4pct")
THRESHOLDS = {"aasm-3pct": 3.0, "aasm-4pct": 4.0}
MIN_EVENT_S = 10.0  # AASM: apneas and hypopneas last >= 10 s (standards.md section 1.2)


def _r(x: float) -> float:
    return round(float(x), 3)


def measured_drop(spo2: np.ndarray, fs: float, onset: float, end: float,
                  baseline_s: float = 120.0, link_s: float = 30.0) -> tuple[float, float]:
    """(drop, nadir time): max SpO2 in ``baseline_s`` before onset minus the minimum
    from onset to ``link_s`` after the end (NaN = invalid samples are skipped)."""
    i0 = max(int(np.floor((onset - baseline_s) * fs)), 0)
    i1 = int(np.floor(onset * fs))
    i2 = min(int(np.ceil((end + link_s) * fs)) + 1, len(spo2))
    before, during = spo2[i0:i1], spo2[i1:i2]
    if not np.isfinite(before).any() or not np.isfinite(during).any():
        return float("nan"), float("nan")
    k = int(np.nanargmin(during))
    return float(np.nanmax(before) - during[k]), (i1 + k) / fs


def _spo2_percent(signals: dict[str, Signal], kit: KitDef, ox: Oximetry) -> tuple[
        np.ndarray, float]:
    sig = next(s for s in signals.values() if s.role == "spo2")
    pct = sig.data / kit.spo2_scale
    off = np.isclose(sig.data, kit.spo2_probe_off) | ~np.isfinite(sig.data)
    return np.where(off, np.nan, pct), sig.fs


def _category(drop: float) -> tuple[bool, ...]:
    return tuple(drop >= THRESHOLDS[r] for r in RULE_SETS)


def _neighbours_change_category(plan: Plan, recoveries: np.ndarray, i: int,
                                averaging_s: float, integer: bool) -> bool:
    """Whether nearby events' designed desaturations change what event ``i`` scores as.

    Their drop inside this event's nadir window (onset to end + 40 s) can deepen the
    nadir a scorer finds, and a drop that lasts through the whole 120 s before onset
    lowers the baseline; either may move the event across the 3 % or 4 % line, and a
    scorer that counts each desaturation once may give it to either event.
    """
    ev = plan.events[i]
    near = [j for j, o in enumerate(plan.events)
            if j != i and abs(o.onset_s - ev.onset_s) < 300.0]
    if not near:
        return False
    # the oximeter's causal averaging shows the physiology up to averaging_s late
    lag = averaging_s + 1.0
    t_win = np.arange(ev.onset_s - lag, ev.end_s + 42.0, 0.5)
    t_pre = np.arange(ev.onset_s - 120.0 - lag, ev.onset_s, 0.5)
    win = float(np.max([event_drop(plan.events[j], recoveries[j], t_win) for j in near]))
    pre = float(np.min(np.max([event_drop(plan.events[j], recoveries[j], t_pre)
                               for j in near], axis=0)))
    own = ev.desat_designed
    if win <= own - 0.5 and pre <= 0.2:
        return False  # the neighbours cannot reach this event's nadir or baseline
    effective = max(own, win) - pre
    spread = (-0.5, 0.0, 0.5) if integer else (-0.2, 0.0, 0.2)
    return any(_category(effective + d) != _category(own) for d in spread)


def _flow_reductions(plan: Plan, table: BreathTable) -> np.ndarray:
    """Per event: 1 - (mean peak flow of its breaths) / (mean peak flow of the non-event
    breaths in the 120 s before it), the drop a scorer's pre-event baseline sees
    (AASM 2007 baseline wording, standards.md section 1.3; rules/aasm-*.toml exclude
    event breaths). NaN when no ordinary breath precedes the event."""
    spans = [(e.onset_s, e.end_s) for e in plan.events]
    ordinary = ~mask(table.onset, spans) & (table.flow_amp > 0)
    out = np.full(len(plan.events), np.nan)
    for k, ev in enumerate(plan.events):
        lo, mid, hi = np.searchsorted(table.onset, [ev.onset_s - 120.0, ev.onset_s, ev.end_s])
        pre = table.flow_amp[lo:mid][ordinary[lo:mid]]
        inner = table.flow_amp[mid:hi]
        if pre.size >= 3 and inner.size:
            out[k] = 1.0 - float(inner.mean()) / float(pre.mean())
    return out


def _event_rows(plan: Plan, sched: Schedule, spo2: np.ndarray, fs: float,
                integer: bool, recoveries: np.ndarray, averaging_s: float,
                table: BreathTable) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    reductions = _flow_reductions(plan, table)
    onsets = np.array([e.onset_s for e in plan.events])
    positions = lookup(onsets, list(sched.positions), "upright") if len(onsets) else []
    rem = mask(onsets, [(r.start_s, r.end_s) for r in sched.rem])
    for i, ev in enumerate(plan.events):
        drop, nadir_t = measured_drop(spo2, fs, ev.onset_s, ev.end_s)
        variants = [measured_drop(spo2, fs, ev.onset_s, ev.end_s, w, lk)[0]
                    for w in (60.0, 120.0) for lk in (30.0, 40.0)]
        long_enough = ev.duration_s >= MIN_EVENT_S
        if ev.event in APNEAS:
            scored = list(RULE_SETS) if long_enough else []
            ambiguous = abs(ev.duration_s - MIN_EVENT_S) < 0.5
        else:
            scored = [r for r in RULE_SETS if long_enough and drop >= THRESHOLDS[r]]
            cats = {tuple(v >= THRESHOLDS[r] for r in RULE_SETS) for v in variants}
            near = (not integer) and any(abs(drop - th) < 0.2 for th in THRESHOLDS.values())
            shared = _neighbours_change_category(plan, recoveries, i, averaging_s, integer)
            # fewer than 3 ordinary breaths before it, or a drop of flow close to the
            # 30 % line against that baseline (AASM hypopnea: >= 30 %)
            weak_flow = not np.isfinite(reductions[i]) or reductions[i] < 0.34
            ambiguous = len(cats) > 1 or near or shared or weak_flow or not np.isfinite(drop)
        rows.append({
            "id": i + 1, "onset_s": _r(ev.onset_s), "duration_s": _r(ev.duration_s),
            "event": ev.event, "subtype": ev.subtype, "context": ev.context,
            "position": str(positions[i]), "rem": bool(rem[i]),
            "flow_reduction_pct": _r(100 * ev.flow_reduction),
            "flow_reduction_measured_pct": (_r(100 * reductions[i])
                                            if np.isfinite(reductions[i]) else None),
            "desat_pct": _r(ev.desat_designed), "desat_band": ev.desat_band,
            "desat_measured_pct": _r(drop) if np.isfinite(drop) else None,
            "nadir_s": _r(nadir_t) if np.isfinite(nadir_t) else None,
            "delay_s": _r(ev.delay_s),
            "scored_under": scored, "ambiguous": bool(ambiguous),
        })
    return rows


def _expected(rows: list[dict[str, Any]], mt_s: float) -> dict[str, dict[str, float]]:
    out: dict[str, dict[str, float]] = {}
    hours = max(mt_s / 3600.0, 1e-9)
    for rs in RULE_SETS:
        sel = [r for r in rows if rs in r["scored_under"]]
        count = {k: sum(1 for r in sel if r["event"] == k) for k in (*APNEAS, "hypopnea")}
        apneas = sum(count[k] for k in APNEAS)
        out[rs] = {
            "events": len(sel), "apneas": apneas, "hypopneas": count["hypopnea"],
            "rei": _r(len(sel) / hours), "oai": _r(count["obstructive_apnea"] / hours),
            "cai": _r(count["central_apnea"] / hours), "mai": _r(count["mixed_apnea"] / hours),
            "hi": _r(count["hypopnea"] / hours),
            "ambiguous": sum(1 for r in rows if r["ambiguous"]),
        }
    return out


def build_truth(spec: NightSpec, kit: KitDef, sched: Schedule, plan: Plan,
                table: BreathTable, ox: Oximetry, signals: dict[str, Signal],
                integer: bool) -> dict[str, Any]:
    """The JSON-ready ground truth (schema in this module's docstring)."""
    spo2, fs = _spo2_percent(signals, kit, ox)
    rows = _event_rows(plan, sched, spo2, fs, integer, ox.event_recovery_s,
                       kit.spo2_averaging_s, table)
    desats = []
    for d in plan.desats:
        drop, nadir_t = measured_drop(spo2, fs, d.onset_s, d.nadir_s - 0.0, 120.0, 20.0)
        desats.append({"onset_s": _r(d.onset_s), "nadir_s": _r(d.nadir_s),
                       "end_s": _r(d.nadir_s + d.recovery_s), "desat_pct": _r(d.depth),
                       "desat_measured_pct": _r(drop) if np.isfinite(drop) else None})
    mt = sched.monitoring_time_s()
    periods = ([{"start_s": _r(r.start_s), "end_s": _r(r.end_s), "kind": "rem_like", "role": ""}
                for r in sched.rem]
               + [{"start_s": _r(c.start_s), "end_s": _r(c.end_s), "kind": "csb", "role": ""}
                  for c in sched.csb]
               + [{"start_s": _r(b.start_s), "end_s": _r(b.end_s), "kind": b.kind,
                   "role": b.role} for b in sched.belt_periods]
               + [{"start_s": _r(a), "end_s": _r(b), "kind": "sigh", "role": ""}
                  for a, b in plan.sighs])
    return {
        "schema": "hsat-synth-truth", "schema_version": 1,
        "generator": f"hsat.synth {__version__}", "kit": kit.name, "seed": spec.seed,
        "preset": spec.preset, "start": spec.start.isoformat(),
        "duration_s": _r(sched.duration_s), "settings": spec.to_dict(),
        "lights_off_s": _r(sched.lights_off_s), "lights_on_s": _r(sched.lights_on_s),
        "lights_annotated": sched.lights_annotated,
        "sleep_onset_s": _r(sched.sleep_onset_s), "final_wake_s": _r(sched.final_wake_s),
        "wake": [{"start_s": _r(w.start_s), "end_s": _r(w.end_s)} for w in sched.wake],
        "invalid": [{"start_s": _r(s.start_s), "end_s": _r(s.end_s), "role": s.role,
                     "reason": s.detail} for s in sched.invalid],
        "monitoring_time_s": _r(mt),
        "events": rows,
        "desaturations": desats,
        "expected": _expected(rows, mt),
        "positions": [{"start_s": _r(p.start_s), "end_s": _r(p.end_s), "position": p.detail}
                      for p in sched.positions],
        "movements": [{"start_s": _r(m.start_s), "end_s": _r(m.end_s), "kind": m.kind,
                       "role": m.role} for m in sched.movements],
        "periods": sorted(periods, key=lambda p: p["start_s"]),
        "channels": [{"label": ch.label, "role": ch.role, "fs": ch.fs, "unit": ch.unit,
                      "physical_min": ch.physical_range[0],
                      "physical_max": ch.physical_range[1]} for ch in kit.channels],
        "kit_facts": {"inspiration_sign": kit.inspiration_sign,
                      "position_codes": kit.position_codes, "spo2_scale": kit.spo2_scale,
                      "spo2_probe_off": kit.spo2_probe_off,
                      "pulse_probe_off": kit.pulse_probe_off, "spo2_integer": integer,
                      "spo2_averaging_s": kit.spo2_averaging_s},
        "physiology": {"breaths_per_min": _r(60.0 / table.mean_period_s),
                       "spo2_baseline_pct": _r(ox.baseline_pct),
                       "circulatory_delay_s": _r(plan.night_delay_s),
                       "breaths": len(table)},
        "shortfall": dict(plan.shortfall),
    }
