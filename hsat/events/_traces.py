"""Amplitude traces on a common time grid, and runs of reduced breathing.

Every respiratory channel keeps its own sample rate; the detectors work on a 10 Hz grid
of breath amplitudes (``amplitude_at``: each breath's peak-to-trough excursion held over
the breath), so no detector depends on a kit's rates, gain or sign of inspiration.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import ndimage

from hsat.breaths import BreathSeries, amplitude_at, block_means
from hsat.recording import Conditioned, Signal

#: Grid rate of the amplitude traces (Hz): 0.1 s resolution of event boundaries.
GRID_FS = 10.0


@dataclass(frozen=True, eq=False)
class Grid:
    """Sample times ``i / fs`` for ``i in range(n)`` on the recording axis."""

    fs: float
    n: int

    @cached_property
    def t(self) -> np.ndarray:
        """The grid times (computed once; read-only, as every detector shares them)."""
        times = np.arange(self.n) / self.fs
        times.flags.writeable = False
        return times

    def index(self, t_s: float | np.ndarray) -> np.ndarray:
        """Grid index at or after each time, clipped to the grid."""
        return np.clip(np.ceil(np.asarray(t_s) * self.fs - 1e-9).astype(np.int64), 0, self.n)


def grid_for(cond: Conditioned) -> Grid:
    """The grid covering the whole recording."""
    return Grid(GRID_FS, int(np.ceil(cond.recording.duration_s * GRID_FS)))


def signal_valid_on(sig: Signal | None, grid: Grid) -> np.ndarray:
    """A channel's validity mask sampled at the grid times (False outside the channel)."""
    if sig is None or len(sig.data) == 0:
        return np.zeros(grid.n, dtype=bool)
    t = grid.t
    inside = (t >= sig.t0_s) & (t < sig.t0_s + sig.duration_s)
    return sig.mask[sig.index_of(t)] & inside


def analysis_on(cond: Conditioned, grid: Grid) -> np.ndarray:
    """``cond.analysis_mask`` (monitoring time) sampled at the grid times."""
    return np.asarray(cond.in_analysis(grid.t), dtype=bool)


def breath_valid_on(series: BreathSeries, grid: Grid) -> np.ndarray:
    """False where the breath covering a grid time is flagged invalid."""
    t = grid.t
    if len(series) == 0:
        return np.ones(grid.n, dtype=bool)
    idx = np.searchsorted(series.onset_s, t, side="right") - 1
    safe = np.clip(idx, 0, len(series) - 1)
    covered = (idx >= 0) & (t < series.end_s[safe])
    return ~covered | series.valid[safe]


#: Moving-average length (s) applied before taking inspiratory peaks.
SMOOTH_S = 0.25


def inspiratory_series(series: BreathSeries, sig: Signal,
                       thin: tuple[np.ndarray, float] | None = None) -> BreathSeries:
    """The series with each breath's amplitude replaced by its inspiratory excursion.

    For airflow channels (nasal pressure, thermal) the excursion is measured from zero
    flow (the conditioned signal is high-passed, so zero is no flow) to the inspiratory
    peak, in the direction of inspiration the breath detector found
    (``series.polarity``). A flow-limited breath loses inspiratory flow while its
    expiration can stay near normal, so a peak-to-trough excursion under-reads the
    reduction the AASM rule measures (common practice: the inspiratory peak of the
    nasal-pressure signal).
    """
    if len(series) == 0 or series.polarity == 0 or len(sig.data) == 0:
        return series
    x, fs = thin if thin is not None else thinned(sig)
    x = series.polarity * x
    # a moving average over SMOOTH_S removes snore vibration (tens of Hz; at low sample
    # rates aliased down to ~10 Hz) while keeping a breath's peak (gain > 0.99 at 0.5 Hz)
    x = ndimage.uniform_filter1d(x, max(1, int(round(SMOOTH_S * fs))), mode="nearest")
    last = len(x) - 1
    i_on = np.clip(np.rint((series.onset_s - sig.t0_s) * fs), 0, last).astype(np.int64)
    i_end = np.clip(np.rint((series.end_s - sig.t0_s) * fs), 0, last).astype(np.int64)
    i_end = np.maximum(i_end, i_on + 1)
    i_end[:-1] = np.minimum(i_end[:-1], np.maximum(i_on[1:], i_on[:-1] + 1))
    edges = np.empty(2 * len(i_on), dtype=np.int64)
    edges[0::2], edges[1::2] = i_on, np.minimum(i_end, last)
    edges = np.maximum.accumulate(edges)  # reduceat needs non-decreasing edges
    peak = np.maximum.reduceat(x, edges)[0::2]
    return BreathSeries(series.role, series.onset_s, series.peak_s, series.end_s,
                        np.clip(peak, 0.0, None), series.valid, series.polarity)


#: Where the signal's own excursion falls below this fraction of the covering breath's
#: amplitude, the "breath" is a pause (see ``amplitude_on``).
PAUSE_FRACTION = 0.25


def typical_period_s(series: BreathSeries) -> float:
    """Median duration of the valid breaths, clipped to 2-8 s (adult breathing)."""
    dur = np.asarray(series.end_s - series.onset_s)[np.asarray(series.valid, bool)]
    return float(np.clip(np.median(dur), 2.0, 8.0)) if len(dur) else 4.0


#: The excursion is measured over this fraction of a typical breath ...
EXCURSION_WINDOW = 0.5
#: ... after removing the moving average over this many typical breaths.
DETREND_WINDOW = 2.0


def excursion_on(sig: Signal, grid: Grid, period_s: float,
                 thin: tuple[np.ndarray, float] | None = None) -> np.ndarray:
    """Peak-to-trough excursion of the signal in a centred window, at grid times.

    The signal is first detrended by its moving average over ``DETREND_WINDOW``
    typical breaths (which passes a breath-rate sine unchanged and removes a linear
    drift), then its excursion is taken over ``EXCURSION_WINDOW`` of a breath: at least
    half a breath's peak-to-trough wherever a sine-like breath is under way, close to
    nothing in a pause, however the sensor drifts.
    """
    if len(sig.data) == 0:
        return np.zeros(grid.n)
    x, fs = thin if thin is not None else thinned(sig)
    trend = max(3, int(round(DETREND_WINDOW * period_s * fs)))
    w = max(3, int(round(EXCURSION_WINDOW * period_s * fs)))
    x = x - ndimage.uniform_filter1d(x, trend, mode="nearest")
    env = (ndimage.maximum_filter1d(x, w, mode="nearest")
           - ndimage.minimum_filter1d(x, w, mode="nearest"))
    idx = np.clip(np.rint((grid.t - sig.t0_s) * fs).astype(np.int64), 0, len(x) - 1)
    return env[idx]


#: Channels faster than this are averaged down to about it before envelope work (Hz):
#: breathing lies below ~1 Hz, and averaging also damps snore vibration.
THIN_TO_HZ = 12.5
#: Blocks averaged at a time by ``thinned`` (its temporaries stay small).
_THIN_BLOCKS = 1 << 15


def thinned(sig: Signal) -> tuple[np.ndarray, float]:
    """The channel's valid data (0 where invalid) averaged in blocks to ~THIN_TO_HZ."""
    k = int(sig.fs // THIN_TO_HZ)
    if k <= 1:
        x = np.where(sig.mask & np.isfinite(sig.data), sig.data, 0.0).astype(float, copy=False)
        return x, float(sig.fs)
    # block by block (each mean is of its own k samples): no copy of the whole channel
    n = len(sig.data) // k * k
    blocks = np.empty(n // k + (1 if n < len(sig.data) else 0))
    step = k * _THIN_BLOCKS
    mask = sig.mask
    for a in range(0, len(sig.data), step):
        data, ok = sig.data[a : a + step], mask[a : a + step]
        x = np.where(ok & np.isfinite(data), data, 0.0).astype(float, copy=False)
        whole = len(x) // k * k
        blocks[a // k : (a + whole) // k] = block_means(x[:whole], k)
        if whole < len(x):
            blocks[-1] = x[whole:].mean()
    return blocks, float(sig.fs) / k


def amplitude_on(series: BreathSeries, grid: Grid, sig: Signal | None = None,
                 inspiratory: BreathSeries | None = None,
                 thin: tuple[np.ndarray, float] | None = None) -> np.ndarray:
    """Breath amplitude at every grid time (0 where no breath covers it).

    ``series`` holds the breaths with their peak-to-trough amplitude; ``inspiratory``,
    when given, the same breaths with the amplitude to report (``inspiratory_series``).
    A detector's stray "breath" must not cover a pause (the slow drift of a thermal
    sensor or a belt after a sigh, or when effort stops): where the channel's own
    peak-to-trough excursion over part of a breath (``excursion_on``) is below
    ``PAUSE_FRACTION`` of the breath's peak-to-trough amplitude, the sensor is not
    breathing there whatever the breath list says, and that excursion (half of it for
    an inspiratory amplitude) is used instead.
    """
    p2p = amplitude_at(series, grid.t)
    amp = p2p if inspiratory is None else amplitude_at(inspiratory, grid.t)
    if sig is None:
        return amp
    env = excursion_on(sig, grid, typical_period_s(series), thin)
    in_pause = env < PAUSE_FRACTION * p2p
    return np.where(in_pause, env * (0.5 if inspiratory is not None else 1.0), amp)


def runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive) indices of each run of True in ``mask``."""
    m = np.concatenate(([False], np.asarray(mask, dtype=bool), [False]))
    edges = np.flatnonzero(m[1:] != m[:-1])
    return edges[0::2], edges[1::2]


def bridge_runs(
    starts: np.ndarray,
    ends: np.ndarray,
    values: np.ndarray,
    *,
    max_gap: int,
    gap_limit: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Join runs whose gap is short and never rises above ``gap_limit``.

    A stray breath that is a little too large (or a detection blip) inside an event does
    not end it; a real recovery breath (above ``gap_limit``) or a long gap does.

    Parameters
    ----------
    starts, ends : runs as from ``runs``, in order.
    values : the trace the runs were found on (e.g. amplitude / baseline).
    max_gap : longest gap to join, in samples.
    gap_limit : largest value allowed inside a joined gap.
    """
    if len(starts) < 2:
        return starts, ends
    gap_start = ends[:-1]
    gap_end = starts[1:]
    gap_len = gap_end - gap_start
    gap_max = np.full(len(gap_start), np.inf)
    for k in np.flatnonzero(gap_len <= max_gap):  # a loop over gaps, not samples
        gap_max[k] = np.max(np.nan_to_num(values[gap_start[k] : gap_end[k]], nan=np.inf))
    join = (gap_len <= max_gap) & (gap_max <= gap_limit)
    keep_start = np.concatenate(([True], ~join))
    keep_end = np.concatenate((~join, [True]))
    return starts[keep_start], ends[keep_end]
