"""Apneas and hypopnea candidates: runs of reduced breath amplitude against the
pre-event baseline.

Method (AASM Scoring Manual v2.6/v3 adult respiratory rules and HSAT rules, paraphrased
in standards.md §1.2-§1.3 and §1.6):

1. For each channel, breath amplitudes (peak signal excursion; the inspiratory one for
   airflow, ``_traces.inspiratory_series``) become a step trace on a 10 Hz grid
   (``_traces``), where the channel's own excursion shows a pause the breath list
   covers, that excursion is used. A *running* reference, used only to find
   candidates, is the upper quartile of the non-sigh breaths in the preceding
   ``baseline.window_s`` every ``REFERENCE_STEP_S`` seconds (``_reference``).
2. Candidates are runs where amplitude <= (1 - drop) x reference: drop = apnea.drop_pct
   on the apnea sensor (oronasal thermal when valid, else nasal pressure: AASM apnea
   sensor rule; nasal pressure, an AASM alternative apnea sensor, also counts where the
   thermal sensor shows at least a hypopnea-level drop, see ``_ratio``), drop =
   hypopnea.drop_pct on nasal pressure (AASM hypopnea sensor).
3. Each candidate is re-measured against a *fixed* baseline at its onset: the AASM
   pre-event baseline of the breaths in the preceding ``baseline.window_s`` (2 min),
   stable mean or, when breathing is unstable, the mean of the largest breaths
   (AASM 2007 wording), leaving out breaths inside any candidate, recovery breaths
   and sighs (``_reference``) so back-to-back events do not distort it.
4. The event runs from the start of the first reduced breath (or the end of the last
   unreduced one) to the start of the first breath above the threshold, i.e. breath
   edges (AASM event-duration note: the first breath that approximates baseline).
   A stray breath that stays below ``BRIDGE_LIMIT_*`` of baseline and is shorter than
   ``BRIDGE_S`` does not end an event (common practice), but a run that needs such
   bridging must average ``BRIDGED_MARGIN`` below the threshold, so that irregular
   breathing hovering about it (REM sleep) does not string itself into an event.
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
    inspiratory_series,
    runs,
    signal_valid_on,
    thinned,
    typical_period_s,
)
from hsat.recording import Conditioned
from hsat.rulesets import Baseline, RuleSet

#: Channels whose breath amplitude is the inspiratory excursion (``inspiratory_series``).
AIRFLOW_ROLES = ("flow", "thermal")
#: Step (s) of the running reference baseline used to find candidates.
REFERENCE_STEP_S = 2.0
#: A gap shorter than this (s) inside an event does not end it (a stray breath in an
#: apnea is short; a hypopnea's breaths vary more) ...
BRIDGE_S = {"apnea": 3.0, "hypopnea": 5.0}
#: ... when its amplitude stays at or below these fractions of the baseline.
BRIDGE_LIMIT_APNEA = 0.5
BRIDGE_LIMIT_HYPOPNEA = 1.0
#: A hypopnea run that needed bridging must average at least this far below the threshold.
BRIDGED_MARGIN = 0.08
#: Reduced stretches shorter than this (s) are ignored before bridging: the gap between
#: two breaths is not a reduced breath.
MIN_STRETCH_S = 1.0
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
    period_s: float = 4.0  # typical breath duration (``_traces.typical_period_s``)


@dataclass(frozen=True)
class Reduction:
    """One run of reduced breathing measured against its fixed pre-event baseline."""

    kind: str  # 'apnea' or 'hypopnea'
    role: str
    start: int  # grid index
    end: int  # grid index, exclusive
    baseline: float
    min_ratio: float
    mean_ratio: float = float("nan")


def sensor_trace(
    cond: Conditioned, breaths: Breaths, role: str, grid: Grid, rule: Baseline
) -> SensorTrace | None:
    """The amplitude trace and running reference of channel ``role`` (None if absent)."""
    series = breaths.get(role)
    sig = cond.signals.get(role) if role != "effort_sum" else cond.signals.get("thorax")
    if series is None or len(series) == 0:
        return None
    thin = thinned(sig) if sig is not None and role != "effort_sum" else None
    inspiratory = (inspiratory_series(series, sig, thin)
                   if role in AIRFLOW_ROLES and sig is not None else None)
    valid = breath_valid_on(series, grid)
    if sig is not None:
        valid &= signal_valid_on(sig, grid)
        if role == "effort_sum" and "abdomen" in cond.signals:
            valid &= signal_valid_on(cond.signals["abdomen"], grid)
    scored = inspiratory if inspiratory is not None else series
    if role in AIRFLOW_ROLES:  # belts are only measured against fixed baselines
        steps = np.arange(0.0, grid.n / grid.fs + REFERENCE_STEP_S, REFERENCE_STEP_S)
        ref_steps = running_reference(scored, steps, rule)
        reference = ref_steps[np.minimum((grid.t / REFERENCE_STEP_S).astype(np.int64),
                                         len(steps) - 1)]
    else:
        reference = np.full(grid.n, np.nan)
    amp = amplitude_on(series, grid, sig if role != "effort_sum" else None, inspiratory,
                       thin)
    return SensorTrace(role, scored, amp, valid, reference, typical_period_s(series))


@dataclass(frozen=True, eq=False)
class _Plan:
    """One detector pass: a kind, its sensor, an optional confirming sensor, a region."""

    kind: str
    primary: SensorTrace
    helper: SensorTrace | None
    region: np.ndarray


def _ratio(plan: _Plan, sl: slice, base_p: float | np.ndarray,
           base_h: float | np.ndarray, confirm: float) -> np.ndarray:
    """Amplitude / baseline over ``sl`` (inf where the primary sensor is invalid).

    With a helper (nasal pressure beside the thermal sensor for apneas), the helper's
    ratio is used where it is lower and the primary sensor itself already shows reduced
    airflow (ratio <= ``confirm``): the slow drift of a thermal sensor after a large
    breath does not then hide an apnea, and mouth breathing (flat nasal pressure,
    normal thermal signal) is never one.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        r = plan.primary.amp[sl] / base_p
        if plan.helper is not None:
            rh = plan.helper.amp[sl] / base_h
            use = plan.helper.valid[sl] & np.isfinite(rh) & (r <= confirm + _EPS)
            r = np.where(use, np.minimum(r, rh), r)
    return np.where(plan.primary.valid[sl] & np.isfinite(r), r, np.inf)


def _stretches(mask: np.ndarray, grid: Grid, kind: str) -> tuple[np.ndarray, np.ndarray]:
    s, e = runs(mask)
    if kind == "apnea":  # no breath at all is never a short gap to ignore
        return s, e
    keep = (e - s) >= int(MIN_STRETCH_S * grid.fs)
    return s[keep], e[keep]


def _candidates(plan: _Plan, limit: float, bridge_limit: float, min_samples: int,
                confirm: float, grid: Grid) -> tuple[np.ndarray, np.ndarray]:
    helper_ref = plan.helper.reference if plan.helper is not None else 1.0
    ratio = _ratio(plan, slice(None), plan.primary.reference, helper_ref, confirm)
    starts, ends = _stretches(plan.region & (ratio <= limit + _EPS), grid, plan.kind)
    starts, ends = bridge_runs(starts, ends, ratio,
                               max_gap=int(BRIDGE_S[plan.kind] * grid.fs),
                               gap_limit=bridge_limit)
    keep = (ends - starts) >= max(1, int(min_samples * CANDIDATE_FRACTION))
    return starts[keep], ends[keep]


def _remeasure(
    plan: _Plan, start: int, end: int, base_p: float, base_h: float, limit: float,
    bridge_limit: float, max_samples: int, min_samples: int, confirm: float, grid: Grid,
) -> list[tuple[int, int, float, float]]:
    """The runs overlapping candidate [start, end) against fixed baselines that last at
    least ``min_samples`` (a fixed baseline may split one candidate into several)."""
    if not np.isfinite(base_p) or base_p <= 0:
        return []
    lo = max(0, start - int(BACK_SEARCH_S * grid.fs))
    hi = min(grid.n, end + max_samples)
    ratio = _ratio(plan, slice(lo, hi), base_p, base_h if np.isfinite(base_h) else np.inf,
                   confirm)
    s, e = _stretches(plan.region[lo:hi] & (ratio <= limit + _EPS), grid, plan.kind)
    s, e = bridge_runs(s, e, ratio, max_gap=int(BRIDGE_S[plan.kind] * grid.fs),
                       gap_limit=bridge_limit)
    hit = np.flatnonzero((e > start - lo) & (s < end - lo)
                         & (e - s + 1e-6 >= min_samples) & (e - s <= max_samples))
    out = []
    for k in hit:  # loop over runs
        seg = np.minimum(ratio[s[k]:e[k]], 2.0)
        mean = float(np.mean(seg))
        if (plan.kind == "hypopnea" and np.max(seg) > limit + _EPS
                and mean > limit - BRIDGED_MARGIN):
            continue  # held together only by bridged breaths: not a clear reduction
        out.append((lo + int(s[k]), lo + int(e[k]), float(np.min(seg)), mean))
    return out


def _plans(traces: dict[str, SensorTrace], rule: RuleSet, grid: Grid) -> list[_Plan]:
    everywhere = np.ones(grid.n, dtype=bool)
    thermal, flow = traces.get("thermal"), traces.get("flow")
    plans: list[_Plan] = []
    sensor = rule.apnea.sensor
    if rule.detectors.apnea:
        if sensor in ("thermal_then_flow", "thermal") and thermal is not None:
            helper = flow if sensor == "thermal_then_flow" else None
            plans.append(_Plan("apnea", thermal, helper, everywhere))
            if sensor == "thermal_then_flow" and flow is not None:
                plans.append(_Plan("apnea", flow, None, ~thermal.valid))
        elif flow is not None and sensor != "thermal":
            plans.append(_Plan("apnea", flow, None, everywhere))
    hyp = flow if flow is not None else thermal
    if rule.detectors.hypopnea and hyp is not None:
        plans.append(_Plan("hypopnea", hyp, None, everywhere))
    return plans


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
    cond : the conditioned recording.
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
        desaturation (``hsat.events._event_desaturation``).
    """
    limits = {"apnea": 1.0 - rule.apnea.drop_pct / 100.0,
              "hypopnea": 1.0 - rule.hypopnea.drop_pct / 100.0}
    shortest = {"apnea": int(round(rule.apnea.min_duration_s * grid.fs)),
                "hypopnea": int(round(rule.hypopnea.min_duration_s * grid.fs))}
    longest = {"apnea": int(round(rule.apnea.max_duration_s * grid.fs)),
               "hypopnea": int(round(rule.hypopnea.max_duration_s * grid.fs))}
    bridges = {"apnea": BRIDGE_LIMIT_APNEA, "hypopnea": BRIDGE_LIMIT_HYPOPNEA}
    confirm = limits["hypopnea"]

    found: list[tuple[_Plan, int, int]] = []
    for plan in _plans(traces, rule, grid):
        s, e = _candidates(plan, limits[plan.kind], bridges[plan.kind],
                           shortest[plan.kind], confirm, grid)
        found.extend((plan, int(a), int(b)) for a, b in zip(s, e, strict=True))
    if not found:
        return []

    # fixed pre-event baselines of each sensor, leaving out unstable breaths
    cand_start_s = np.array([a for _, a, _ in found]) / grid.fs
    cand_end_s = np.array([b for _, _, b in found]) / grid.fs
    base = {role: fixed_baselines(tr.series, cand_start_s, cand_start_s, cand_end_s,
                                  rule.baseline)
            for role, tr in traces.items() if role in ("flow", "thermal")}

    measured: list[Reduction] = []
    for k, (plan, a, b) in enumerate(found):  # loop over candidates
        kind = plan.kind
        b_p = float(base[plan.primary.role][k])
        b_h = float(base[plan.helper.role][k]) if plan.helper is not None else np.nan
        for s, e, min_ratio, mean_ratio in _remeasure(plan, a, b, b_p, b_h, limits[kind],
                                                      bridges[kind],
                                          longest[kind], shortest[kind], confirm, grid):
            measured.append(Reduction(kind, plan.primary.role, s, e, b_p, min_ratio,
                                      mean_ratio))
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
                                last.baseline, min(last.min_ratio, r.min_ratio),
                                last.mean_ratio)
        else:
            out.append(r)
    return out
