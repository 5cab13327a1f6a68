"""Apnea type from respiratory effort, and the optional hypopnea type.

Apnea type (AASM Scoring Manual, adult respiratory rules; standards.md §1.2, from memory
there): *obstructive* when inspiratory effort continues or increases throughout the
absent airflow, *central* when effort is absent throughout, *mixed* when effort is absent
in the first part and resumes in the second; *unclassified* here when no effort belt is
valid over the event (a Type III kit without usable belts cannot type an apnea).

Effort is judged breath by breath on the belts: an effort breath is a belt breath whose
amplitude reaches ``apnea.effort_absent_pct`` of the belt's own pre-event baseline (the
same AASM pre-event baseline as the airflow, computed on the belt). Obstructive: effort
breaths from the start of the event; central: none before the breathing resumes; mixed:
none in a first part longer than 1.5 breath periods, then at least two. Belts are taken
one by one, never summed, because thoraco-abdominal paradox during obstruction cancels
in a sum.

Hypopnea type (AASM, OPTIONAL rule; standards.md §1.2): obstructive when snoring,
increased inspiratory flattening or thoraco-abdominal paradox is present during the event
(paradox only if absent before it); otherwise central. hsat looks at snoring and paradox,
and in addition calls a hypopnea central only when effort falls with the airflow
(hsat's own addition, because a Type III kit without a snore channel would otherwise call
every non-paradoxical hypopnea central). Flattening is not assessed.
"""

from __future__ import annotations

import numpy as np

from hsat.events._reference import fixed_baselines
from hsat.events._respiratory import Reduction, SensorTrace
from hsat.events._traces import Grid
from hsat.recording import Conditioned
from hsat.rulesets import RuleSet

#: A belt is usable for an event when valid over at least this fraction of it.
BELT_VALID_FRACTION = 0.9
#: Effort breaths of the two belts coincide when their peaks are this many typical
#: breath periods apart at most.
COINCIDENCE_PERIODS = 0.5
#: Obstructive: the first effort breath comes within this many typical periods of the
#: event's onset (the last breath before a pause peaks before it; effort continues).
OBSTRUCTIVE_LEAD_PERIODS = 1.5
#: Central: no effort breath before this many typical periods from the event's end
#: (breaths that resume airflow may begin just before the end).
CENTRAL_TAIL_PERIODS = 0.5
#: Mixed: at least this many effort breaths after the absent first part.
MIXED_MIN_BREATHS = 2
#: Central hypopnea: mean belt effort at or below this fraction of baseline ...
CENTRAL_HYPOPNEA_EFFORT = 0.75
#: ... and no snoring: snore power in the event below this multiple of the power before.
SNORE_POWER_FACTOR = 2.0
#: Paradox: thorax-abdomen correlation below this during the event (and not before).
PARADOX_CORRELATION = -0.2


def belt_baselines(
    belts: dict[str, SensorTrace], onsets_s: np.ndarray, ends_s: np.ndarray, rule: RuleSet,
) -> dict[str, np.ndarray]:
    """Pre-event baseline of each belt at each onset (same breath choice as airflow)."""
    return {role: fixed_baselines(tr.series, onsets_s, onsets_s, ends_s, rule.baseline)
            for role, tr in belts.items()}


def _effort_peaks(tr: SensorTrace, base: float, start_s: float, end_s: float,
                  absent_limit: float, grid: Grid) -> np.ndarray:
    """Peak times of the belt's breaths in [start, end) that carry effort: their
    amplitude, where the belt is really moving (``_traces.amplitude_on``), reaches
    ``absent_limit`` of the belt's baseline."""
    peaks = tr.series.peak_s
    sel = (peaks >= start_s) & (peaks < end_s)
    times = peaks[sel]
    if len(times) == 0:
        return times
    amp = tr.amp[np.clip(grid.index(times), 0, grid.n - 1)]
    return times[amp >= absent_limit * base]


def effort_breaths(
    belts: dict[str, SensorTrace], baselines: dict[str, np.ndarray], k: int,
    start: int, end: int, absent_limit: float, grid: Grid,
) -> tuple[np.ndarray | None, float, float]:
    """Times of the effort breaths inside event ``k`` (None: no usable belt), the typical
    belt breath period, and the mean effort ratio of the stronger belt.

    With two usable belts an effort breath must show on both (peaks within
    ``COINCIDENCE_PERIODS``), so noise on one weak belt is not taken for effort; one
    usable belt decides alone.
    """
    start_s, end_s = start / grid.fs, end / grid.fs
    found: list[np.ndarray] = []
    periods: list[float] = []
    best_ratio = np.nan
    for role, tr in belts.items():
        base = baselines[role][k]
        if not np.isfinite(base) or base <= 0:
            continue
        if np.mean(tr.valid[start:end]) < BELT_VALID_FRACTION:
            continue
        found.append(_effort_peaks(tr, base, start_s, end_s, absent_limit, grid))
        periods.append(tr.period_s)
        ratio = float(np.mean(tr.amp[start:end] / base))
        best_ratio = ratio if not np.isfinite(best_ratio) else max(best_ratio, ratio)
    if not found:
        return None, 4.0, best_ratio
    period = float(np.median(periods))
    times = found[0]
    if len(found) == 2:
        other = found[1]
        if len(times) and len(other):
            gap = np.min(np.abs(times[:, None] - other[None, :]), axis=1)
            times = times[gap <= COINCIDENCE_PERIODS * period]
        else:
            times = times[:0]
    return np.sort(times), period, best_ratio


def apnea_type(effort: np.ndarray | None, start_s: float, end_s: float,
               period_s: float) -> tuple[str, float]:
    """Type of one apnea from its effort breaths; returns (event name, fraction of the
    event before the first effort breath)."""
    if effort is None:
        return "unclassified_apnea", float("nan")
    duration = max(end_s - start_s, 1e-9)
    inside = effort[effort < end_s - CENTRAL_TAIL_PERIODS * period_s]
    if len(inside) == 0:
        return "central_apnea", 1.0
    lead = float(inside[0] - start_s)
    fraction = min(1.0, max(0.0, lead / duration))
    if lead <= OBSTRUCTIVE_LEAD_PERIODS * period_s:
        return "obstructive_apnea", fraction
    if len(effort[effort >= inside[0]]) >= MIXED_MIN_BREATHS:
        return "mixed_apnea", fraction
    return "central_apnea", fraction


def _snoring(cond: Conditioned, start_s: float, end_s: float) -> bool | None:
    sig = cond.signals.get("snore")
    if sig is None:
        return None
    i0, i1 = sig.index_of(start_s), sig.index_of(end_s)
    b0 = sig.index_of(max(0.0, start_s - 60.0))
    ok = sig.mask
    during = sig.data[i0:i1][ok[i0:i1]]
    before = sig.data[b0:i0][ok[b0:i0]]
    if len(during) < 2 or len(before) < 2:
        return None
    before_power = float(np.mean((before - np.mean(before)) ** 2))
    during_power = float(np.mean((during - np.mean(during)) ** 2))
    return during_power > SNORE_POWER_FACTOR * max(before_power, 1e-12)


def _belt_correlation(cond: Conditioned, start_s: float, end_s: float) -> float:
    th, ab = cond.signals.get("thorax"), cond.signals.get("abdomen")
    if th is None or ab is None or end_s - start_s < 2.0:
        return float("nan")
    t = np.arange(start_s, end_s, 0.1)
    x = th.data[th.index_of(t)]
    y = ab.data[ab.index_of(t)]
    ok = th.mask[th.index_of(t)] & ab.mask[ab.index_of(t)]
    if ok.sum() < 20:
        return float("nan")
    x, y = x[ok] - np.mean(x[ok]), y[ok] - np.mean(y[ok])
    denom = float(np.sqrt(np.sum(x * x) * np.sum(y * y)))
    return float(np.sum(x * y) / denom) if denom > 0 else float("nan")


def hypopnea_type(
    cond: Conditioned, red: Reduction, grid: Grid, effort_ratio: float,
    polarity_sign: float,
) -> str:
    """'obstructive', 'central' or '' (cannot tell) for one scored hypopnea.

    ``polarity_sign`` is +1 when both belts record inspiration the same way, -1 when
    one is inverted (so a negative raw correlation is normal breathing).
    """
    start_s, end_s = red.start / grid.fs, red.end / grid.fs
    snore = _snoring(cond, start_s, end_s)
    corr_during = polarity_sign * _belt_correlation(cond, start_s, end_s)
    corr_before = polarity_sign * _belt_correlation(cond, max(0.0, start_s - 60.0), start_s)
    paradox = (np.isfinite(corr_during) and corr_during < PARADOX_CORRELATION
               and not (np.isfinite(corr_before) and corr_before < PARADOX_CORRELATION))
    if snore or paradox:
        return "obstructive"
    if not np.isfinite(effort_ratio):
        return ""
    return "central" if effort_ratio <= CENTRAL_HYPOPNEA_EFFORT else "obstructive"
