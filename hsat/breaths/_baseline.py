"""Pre-event baseline amplitude for each candidate event onset.

AASM 2007 manual (standards.md §1.3, wording from memory there): the baseline is the mean
amplitude of stable breathing in the 2 minutes before event onset; when breathing is not
stable, the mean of the 3 largest breaths in those 2 minutes. From 2012 the manual keeps
"pre-event baseline" without a fixed window, so window, statistic and the stability test
are parameters (rule-set data), not constants here.
"""

from __future__ import annotations

import numpy as np

from hsat.breaths._series import BreathSeries

STATISTICS: tuple[str, ...] = ("stable_mean", "largest")


def pre_event_baseline(
    series: BreathSeries,
    onset_s: np.ndarray,
    *,
    window_s: float,
    statistic: str,
    largest_n: int,
    stable_cv: float,
    min_breaths: int,
    exclude: np.ndarray | None = None,
) -> np.ndarray:
    """Baseline breath amplitude before each onset.

    Parameters
    ----------
    series : breaths of the channel the event is scored on.
    onset_s : candidate event onsets (s).
    window_s : the breaths whose *peak* lies in ``[onset - window_s, onset)`` count
        (120 s in the AASM 2007 wording).
    statistic : 'stable_mean' -- the mean amplitude when the breathing is stable, i.e. the
        coefficient of variation (sample SD / mean, ddof=1) is <= ``stable_cv``, else the
        mean of the ``largest_n`` largest breaths (AASM 2007, standards.md §1.3);
        'largest' -- always the mean of the ``largest_n`` largest breaths.
    largest_n : number of largest breaths (3 in the AASM 2007 wording). With fewer
        breaths in the window, all of them are used.
    stable_cv : CV at or below which breathing counts as stable (a rule-set choice; the
        manual gives no number).
    min_breaths : fewer usable breaths than this gives NaN.
    exclude : bool per breath, True for breaths not to use (e.g. inside earlier events).
        Invalid breaths (``series.valid`` False) are always left out.

    Returns
    -------
    numpy.ndarray
        One baseline per onset, in the series' amplitude units; NaN where there are fewer
        than ``min_breaths`` usable breaths.
    """
    if statistic not in STATISTICS:
        raise ValueError(f"pre_event_baseline: unknown statistic {statistic!r}; use {STATISTICS}")
    if window_s <= 0 or largest_n < 1 or min_breaths < 1:
        raise ValueError("pre_event_baseline: window_s, largest_n and min_breaths must be > 0")
    onsets = np.asarray(onset_s, dtype=float)
    flat = onsets.ravel()
    keep = np.asarray(series.valid, dtype=bool).copy()
    if exclude is not None:
        if len(exclude) != len(series):
            raise ValueError(
                f"pre_event_baseline: exclude has {len(exclude)} entries, series has "
                f"{len(series)} breaths"
            )
        keep &= ~np.asarray(exclude, dtype=bool)
    order = np.argsort(series.peak_s[keep], kind="stable")
    peaks = series.peak_s[keep][order]
    amps = series.amplitude[keep][order]

    lo = np.searchsorted(peaks, flat - window_s, side="left")
    hi = np.searchsorted(peaks, flat, side="left")
    count = hi - lo
    cum = np.concatenate(([0.0], np.cumsum(amps)))
    cum_sq = np.concatenate(([0.0], np.cumsum(amps * amps)))
    with np.errstate(invalid="ignore", divide="ignore"):
        total = cum[hi] - cum[lo]
        mean = total / count
        var = (cum_sq[hi] - cum_sq[lo] - count * mean * mean) / (count - 1)
        cv = np.sqrt(np.maximum(var, 0.0)) / mean

    enough = count >= min_breaths
    need_largest = enough.copy()
    if statistic == "stable_mean":
        stable = enough & (count >= 2) & (cv <= stable_cv)
        need_largest &= ~stable
    else:
        stable = np.zeros_like(enough)
    result = np.full(flat.shape, np.nan)
    result[stable] = mean[stable]
    for k in np.flatnonzero(need_largest):
        window = amps[lo[k] : hi[k]]
        n = min(largest_n, len(window))
        result[k] = float(np.mean(np.partition(window, len(window) - n)[len(window) - n :]))
    return result.reshape(onsets.shape)
