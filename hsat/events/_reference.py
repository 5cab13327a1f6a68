"""Which breaths make the pre-event baseline, and the running reference for candidates.

The AASM baseline is the amplitude of *stable* breathing before the event (AASM 2007
wording, standards.md §1.3). Three kinds of breath are not stable breathing and are left
out (``exclude`` of ``hsat.breaths.pre_event_baseline``):

* breaths inside earlier candidate events (``baseline.exclude_event_breaths``);
* the recovery breaths in the ``RECOVERY_S`` after each candidate event, which are
  often far larger than baseline (hyperpnoea after an apnea);
* sighs: single breaths more than ``SIGH_FACTOR`` x the median of their neighbours.

When that leaves fewer than ``baseline.min_breaths`` breaths in the window (back-to-back
events in a severe night), the window is first widened (``WIDER_WINDOWS``: the AASM has
used no fixed window since 2012, standards.md §1.3), so that stable breathing from
further back sets the baseline rather than the enlarged recovery breaths; only then are
the recovery breaths let back in, then every breath, and the rule set's statistic
applies as written (its unstable-breathing branch takes the largest breaths, AASM 2007
wording).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from hsat.breaths import BreathSeries, pre_event_baseline
from hsat.rulesets import Baseline

#: Seconds after a candidate event whose breaths count as recovery, not baseline.
RECOVERY_S = 12.0
#: A breath larger than this multiple of its neighbours' median is a sigh.
SIGH_FACTOR = 1.7
SIGH_NEIGHBOURS = 21
#: The running reference (used only to find candidates) is this percentile of the
#: non-sigh breath amplitudes in the baseline window: above the reduced breaths of
#: events, which can make up half the window in a severe night, and below the few
#: enlarged recovery breaths.
REFERENCE_PERCENTILE = 75.0
#: Widening factors of ``baseline.window_s`` tried when too few stable breaths remain.
WIDER_WINDOWS: tuple[float, ...] = (2.5, 5.0)


def baseline_kwargs(rule: Baseline) -> dict[str, object]:
    """The rule set's baseline parameters as keyword arguments of pre_event_baseline."""
    return {
        "window_s": rule.window_s, "statistic": rule.statistic, "largest_n": rule.largest_n,
        "stable_cv": rule.stable_cv, "min_breaths": rule.min_breaths,
    }


def sigh_breaths(series: BreathSeries) -> np.ndarray:
    """True for breaths far larger than their neighbours (sighs)."""
    amp = np.asarray(series.amplitude, dtype=float)
    if len(amp) < 3:
        return np.zeros(len(amp), dtype=bool)
    local = ndimage.median_filter(amp, size=SIGH_NEIGHBOURS, mode="nearest")
    return amp > SIGH_FACTOR * local


def breaths_in(series: BreathSeries, starts_s: np.ndarray, ends_s: np.ndarray) -> np.ndarray:
    """True for breaths whose peak lies inside any [start, end) interval."""
    if len(starts_s) == 0 or len(series) == 0:
        return np.zeros(len(series), dtype=bool)
    order = np.argsort(starts_s)
    s, e = np.asarray(starts_s)[order], np.maximum.accumulate(np.asarray(ends_s)[order])
    k = np.searchsorted(s, series.peak_s, side="right") - 1
    return (k >= 0) & (series.peak_s < e[np.clip(k, 0, None)])


def running_reference(series: BreathSeries, times_s: np.ndarray, rule: Baseline) -> np.ndarray:
    """``REFERENCE_PERCENTILE`` of the valid non-sigh breath amplitudes whose peak lies in
    ``[t - window_s, t)``, for each time t (NaN with fewer than ``min_breaths``)."""
    keep = np.asarray(series.valid, bool) & ~sigh_breaths(series)
    order = np.argsort(series.peak_s[keep], kind="stable")
    peaks = series.peak_s[keep][order]
    amps = series.amplitude[keep][order]
    t = np.asarray(times_s, dtype=float)
    lo = np.searchsorted(peaks, t - rule.window_s, side="left")
    hi = np.searchsorted(peaks, t, side="left")
    count = hi - lo
    out = np.full(len(t), np.nan)
    width = int(count.max()) if len(count) else 0
    enough = count >= rule.min_breaths
    if width == 0 or not enough.any():
        return out
    chunk = max(1, 2_000_000 // width)  # bound memory: rows x width floats per block
    rows = np.flatnonzero(enough)
    q = REFERENCE_PERCENTILE / 100.0
    for start in range(0, len(rows), chunk):  # a few blocks, each vectorised
        r = rows[start:start + chunk]
        idx = lo[r, None] + np.arange(width)[None, :]
        vals = np.where(idx < hi[r, None], amps[np.minimum(idx, len(amps) - 1)], np.inf)
        vals.sort(axis=1)  # the window's amplitudes first, padding (inf) after
        # linear interpolation between order statistics, as numpy.percentile does
        pos = q * (count[r] - 1)
        below = np.floor(pos).astype(np.int64)
        above = np.minimum(below + 1, count[r] - 1)
        v0 = np.take_along_axis(vals, below[:, None], axis=1)[:, 0]
        v1 = np.take_along_axis(vals, above[:, None], axis=1)[:, 0]
        out[r] = v0 + (pos - below) * (v1 - v0)
    return out


def fixed_baselines(
    series: BreathSeries,
    onsets_s: np.ndarray,
    event_starts_s: np.ndarray,
    event_ends_s: np.ndarray,
    rule: Baseline,
) -> np.ndarray:
    """The pre-event baseline at each onset, leaving out unstable breaths (see module)."""
    kwargs = baseline_kwargs(rule)
    onsets = np.asarray(onsets_s, dtype=float)
    if not rule.exclude_event_breaths:
        return pre_event_baseline(series, onsets, exclude=sigh_breaths(series), **kwargs)
    inside = breaths_in(series, event_starts_s, event_ends_s)
    recovery = breaths_in(series, event_ends_s, np.asarray(event_ends_s) + RECOVERY_S)
    sighs = sigh_breaths(series)
    result = np.full(onsets.shape, np.nan)
    stable = inside | recovery | sighs
    attempts = [(stable, 1.0), *((stable, f) for f in WIDER_WINDOWS),
                (inside | sighs, 1.0), (inside, 1.0)]
    for exclude, factor in attempts:
        todo = ~np.isfinite(result)
        if not todo.any():
            break
        kw = dict(kwargs, window_s=rule.window_s * factor)
        result[todo] = pre_event_baseline(series, onsets[todo], exclude=exclude, **kw)
    return result
