"""Apneas and hypopnea candidates: runs of reduced breath amplitude against the
pre-event baseline.

Method (AASM Scoring Manual v2.6/v3 adult respiratory rules and HSAT rules, paraphrased
in standards.md §1.2-§1.3 and §1.6):

1. For each channel, breath amplitudes (peak signal excursion) become a step trace on a
   10 Hz grid (``_traces``). A *running* reference is the pre-event baseline
   (``hsat.breaths.pre_event_baseline``) every ``REFERENCE_STEP_S`` seconds.
   It is the plain mean of the non-sigh breaths in the window (``_reference``).
2. Candidates are runs where amplitude <= (1 - drop) x reference: drop = apnea.drop_pct
   on the apnea sensor (oronasal thermal when valid, else nasal pressure: AASM apnea
   sensor rule), drop = hypopnea.drop_pct on nasal pressure (AASM hypopnea sensor).
3. Each candidate is re-measured against a *fixed* baseline at its onset: the AASM
   pre-event baseline of the breaths in the preceding ``baseline.window_s`` (2 min),
   stable mean or, when breathing is unstable, the mean of the largest breaths
   (AASM 2007 wording), leaving out breaths inside any candidate, recovery breaths
   and sighs (``_reference``) so back-to-back events do not distort it.
4. The event runs from the start of the first reduced breath (or the end of the last
   unreduced one) to the start of the first breath above the threshold, i.e. breath
   edges (AASM event-duration note: the first breath that approximates baseline).
   A stray breath that stays below ``BRIDGE_LIMIT`` of baseline and is shorter than
   ``BRIDGE_S`` does not end an event (common practice).
5. Runs of at least ``min_duration_s`` are kept; an apnea takes precedence over an
   overlapping hypopnea candidate (AASM: if part of an event that would meet hypopnea
   criteria meets apnea criteria, the whole event is an apnea); its duration is the
   apnea sensor's >= 90 % run (AASM: apnea duration on the thermal signal).

Events touching invalid channel data or time outside monitoring time are dropped when
their invalid fraction exceeds ``invalid_data.max_invalid_fraction`` (0 in the built-in
rule sets: such an event is not scored).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hsat.breaths import Breaths, BreathSeries
from hsat.events._reference import fixed_baselines, running_reference
from hsat.events._traces import (
    Grid,
    amplitude_on,
    breath_valid_on,
    bridge_runs,
    runs,
    signal_valid_on,
)
from hsat.recording import Conditioned
from hsat.rulesets import Baseline, RuleSet

#: Step (s) of the running reference baseline used to find candidates.
REFERENCE_STEP_S = 2.0
#: A gap shorter than this (s) inside an event does not end it ...
BRIDGE_S = 5.0
#: ... when its amplitude stays at or below these fractions of the baseline.
BRIDGE_LIMIT_APNEA = 0.5
BRIDGE_LIMIT_HYPOPNEA = 1.0
#: Candidates shorter than this fraction of the minimum duration are not re-measured.
CANDIDATE_FRACTION = 0.5
#: A re-measured event may start this many seconds before its candidate.
BACK_SEARCH_S = 8.0
_EPS = 1e-9


@dataclass(frozen=True, eq=False)
class SensorTrace:
    """One channel's breath amplitudes on the grid, with validity and running reference."""

    role: str
    series: BreathSeries
    amp: np.ndarray
    valid: np.ndarray
    reference: np.ndarray


@dataclass(frozen=True)
class Reduction:
    """One run of reduced breathing measured against its fixed pre-event baseline."""

    kind: str  # 'apnea' or 'hypopnea'
    role: str
    start: int  # grid index
    end: int  # grid index, exclusive
    baseline: float
    min_ratio: float


def sensor_trace(
    cond: Conditioned, breaths: Breaths, role: str, grid: Grid, rule: Baseline
) -> SensorTrace | None:
    """The amplitude trace and running reference of channel ``role`` (None if absent)."""
    series = breaths.get(role)
    sig = cond.signals.get(role) if role != "effort_sum" else cond.signals.get("thorax")
    if series is None or len(series) == 0:
        return None
    valid = breath_valid_on(series, grid)
    if sig is not None:
        valid &= signal_valid_on(sig, grid)
        if role == "effort_sum" and "abdomen" in cond.signals:
            valid &= signal_valid_on(cond.signals["abdomen"], grid)
    steps = np.arange(0.0, grid.n / grid.fs + REFERENCE_STEP_S, REFERENCE_STEP_S)
    ref_steps = running_reference(series, steps, rule)
    reference = ref_steps[np.minimum((grid.t / REFERENCE_STEP_S).astype(np.int64),
                                     len(steps) - 1)]
    amp = amplitude_on(series, grid, sig if role != "effort_sum" else None)
    return SensorTrace(role, series, amp, valid, reference)


def _candidates(
    trace: SensorTrace, allowed: np.ndarray, limit: float, bridge_limit: float,
    min_samples: int, grid: Grid,
) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = trace.amp / trace.reference
    reduced = allowed & trace.valid & (ratio <= limit + _EPS)
    starts, ends = runs(reduced)
    starts, ends = bridge_runs(starts, ends, ratio, max_gap=int(BRIDGE_S * grid.fs),
                               gap_limit=bridge_limit)
    keep = (ends - starts) >= max(1, int(min_samples * CANDIDATE_FRACTION))
    return starts[keep], ends[keep]


def _remeasure(
    trace: SensorTrace, start: int, end: int, baseline: float, limit: float,
    bridge_limit: float, max_samples: int, min_samples: int, grid: Grid,
) -> list[tuple[int, int, float]]:
    """The runs overlapping candidate [start, end) against a fixed baseline that last at
    least ``min_samples`` (a fixed baseline may split one candidate into several)."""
    if not np.isfinite(baseline) or baseline <= 0:
        return []
    lo = max(0, start - int(BACK_SEARCH_S * grid.fs))
    hi = min(grid.n, end + max_samples)
    ratio = trace.amp[lo:hi] / baseline
    reduced = trace.valid[lo:hi] & (ratio <= limit + _EPS)
    s, e = runs(reduced)
    s, e = bridge_runs(s, e, ratio, max_gap=int(BRIDGE_S * grid.fs), gap_limit=bridge_limit)
    hit = np.flatnonzero((e > start - lo) & (s < end - lo)
                         & (e - s + 1e-6 >= min_samples) & (e - s <= max_samples))
    return [(lo + int(s[k]), lo + int(e[k]), float(np.min(ratio[s[k]:e[k]]))) for k in hit]


def find_reductions(
    cond: Conditioned,
    traces: dict[str, SensorTrace],
    rule: RuleSet,
    grid: Grid,
    allowed: np.ndarray,
) -> list[Reduction]:
    """Apneas and hypopnea candidates of one rule set, in time order, not overlapping.

    Parameters
    ----------
    cond : the conditioned recording (only for the thermal channel's validity).
    traces : sensor traces by role ('flow', 'thermal').
    rule : the rule set.
    grid : the common grid.
    allowed : grid mask of analysed time (monitoring time); see ``_scorable`` for
        events that straddle its edges.

    Returns
    -------
    list of Reduction
        Each with its kind ('apnea' / 'hypopnea'), sensor role, grid span, fixed
        baseline and minimum amplitude ratio. Hypopnea candidates still need their
        desaturation (``hsat.events._desaturation.link_desaturations``).
    """
    apnea_limit = 1.0 - rule.apnea.drop_pct / 100.0
    hyp_limit = 1.0 - rule.hypopnea.drop_pct / 100.0
    apnea_min = int(round(rule.apnea.min_duration_s * grid.fs))
    hyp_min = int(round(rule.hypopnea.min_duration_s * grid.fs))
    apnea_max = int(round(rule.apnea.max_duration_s * grid.fs))
    hyp_max = int(round(rule.hypopnea.max_duration_s * grid.fs))

    plan: list[tuple[str, SensorTrace, np.ndarray]] = []
    everywhere = np.ones(grid.n, dtype=bool)
    thermal, flow = traces.get("thermal"), traces.get("flow")
    sensor_rule = rule.apnea.sensor
    if rule.detectors.apnea:
        if sensor_rule in ("thermal_then_flow", "thermal") and thermal is not None:
            plan.append(("apnea", thermal, everywhere))
            if sensor_rule == "thermal_then_flow" and flow is not None:
                plan.append(("apnea", flow, ~thermal.valid))
        elif flow is not None and sensor_rule != "thermal":
            plan.append(("apnea", flow, everywhere))
    hyp_trace = flow if flow is not None else thermal
    if rule.detectors.hypopnea and hyp_trace is not None:
        plan.append(("hypopnea", hyp_trace, everywhere))

    found: list[tuple[str, SensorTrace, int, int]] = []
    for kind, trace, where in plan:
        limit = apnea_limit if kind == "apnea" else hyp_limit
        bridge = BRIDGE_LIMIT_APNEA if kind == "apnea" else BRIDGE_LIMIT_HYPOPNEA
        s, e = _candidates(trace, where, limit, bridge,
                           apnea_min if kind == "apnea" else hyp_min, grid)
        found.extend((kind, trace, int(a), int(b)) for a, b in zip(s, e, strict=True))
    if not found:
        return []

    # fixed pre-event baselines, leaving out unstable breaths (``_reference``)
    cand_start_s = np.array([a for _, _, a, _ in found]) / grid.fs
    cand_end_s = np.array([b for _, _, _, b in found]) / grid.fs
    baselines = np.full(len(found), np.nan)
    for role in {t.role for _, t, _, _ in found}:
        idx = [i for i, f in enumerate(found) if f[1].role == role]
        series = found[idx[0]][1].series
        baselines[idx] = fixed_baselines(series, cand_start_s[idx], cand_start_s,
                                         cand_end_s, rule.baseline)

    measured: list[Reduction] = []
    for (kind, trace, a, b), base in zip(found, baselines, strict=True):
        limit = apnea_limit if kind == "apnea" else hyp_limit
        bridge = BRIDGE_LIMIT_APNEA if kind == "apnea" else BRIDGE_LIMIT_HYPOPNEA
        longest = apnea_max if kind == "apnea" else hyp_max
        shortest = apnea_min if kind == "apnea" else hyp_min
        for s, e, min_ratio in _remeasure(trace, a, b, base, limit, bridge, longest,
                                          shortest, grid):
            measured.append(Reduction(kind, trace.role, s, e, float(base), min_ratio))
    return _resolve_overlaps(measured, rule, grid, allowed)


def _resolve_overlaps(
    items: list[Reduction], rule: RuleSet, grid: Grid, allowed: np.ndarray
) -> list[Reduction]:
    """Apneas win over overlapping hypopnea candidates; duplicates of one kind merge;
    events straddling unanalysed time go (``_scorable``).

    A hypopnea candidate that overlaps an apnea is part of that event, which is scored as
    an apnea (AASM precedence); the apnea keeps its duration as measured on the apnea
    sensor (AASM: apnea duration from the thermal signal, standards.md §1.3).
    """
    apneas = _merge_same_kind(sorted((r for r in items if r.kind == "apnea"),
                                     key=lambda r: r.start))
    hyps = _merge_same_kind(sorted((r for r in items if r.kind == "hypopnea"),
                                   key=lambda r: r.start))
    if apneas and hyps:
        a_start = np.array([a.start for a in apneas])
        a_end = np.array([a.end for a in apneas])
        hyps = [h for h in hyps if not np.any((a_start < h.end) & (a_end > h.start))]
    result = sorted(apneas + hyps, key=lambda r: r.start)
    return [r for r in result if _scorable(r, allowed, rule.invalid_data.max_invalid_fraction)]


def _scorable(r: Reduction, allowed: np.ndarray, max_fraction: float) -> bool:
    """The stated rule for events that straddle invalid data or the edge of monitoring
    time: the fraction of the event outside analysed time must not exceed
    ``max_fraction``; with 0 (the built-in rule sets) an event that even touches such
    time is not scored, because its true extent and baseline are unknown."""
    outside = 1.0 - float(np.mean(allowed[r.start:r.end]))
    if max_fraction <= 0:
        before = allowed[r.start - 1] if r.start > 0 else False
        after = allowed[r.end] if r.end < len(allowed) else False
        return outside <= _EPS and bool(before) and bool(after)
    return outside <= max_fraction + _EPS


def _merge_same_kind(items: list[Reduction]) -> list[Reduction]:
    out: list[Reduction] = []
    for r in items:
        if out and r.start < out[-1].end:
            last = out[-1]
            out[-1] = Reduction(last.kind, last.role, last.start, max(last.end, r.end),
                                last.baseline, min(last.min_ratio, r.min_ratio))
        else:
            out.append(r)
    return out
