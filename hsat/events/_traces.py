"""Amplitude traces on a common time grid, and runs of reduced breathing.

Every respiratory channel keeps its own sample rate; the detectors work on a 10 Hz grid
of breath amplitudes (``amplitude_at``: each breath's peak-to-trough excursion held over
the breath), so no detector depends on a kit's rates, gain or sign of inspiration.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from hsat.breaths import BreathSeries, amplitude_at
from hsat.recording import Conditioned, Signal

#: Grid rate of the amplitude traces (Hz): 0.1 s resolution of event boundaries.
GRID_FS = 10.0


@dataclass(frozen=True, eq=False)
class Grid:
    """Sample times ``i / fs`` for ``i in range(n)`` on the recording axis."""

    fs: float
    n: int

    @property
    def t(self) -> np.ndarray:
        return np.arange(self.n) / self.fs

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


#: A breath's amplitude holds from its onset until at most this many local median breath
#: durations after its peak (see ``cap_breath_ends``).
EXPIRATION_CAP = 1.0
_NEIGHBOURS = 21


def cap_breath_ends(series: BreathSeries) -> BreathSeries:
    """The series with implausibly long breaths cut short after their peak.

    Adult expiration takes about 60 % of a breath (common practice); a "breath" that
    runs on for many breath lengths after its peak is the start of a pause (the slow
    drift of a thermal sensor or a belt after a sigh or when effort stops), so its
    amplitude must not cover the pause. Each breath ends at the earlier of its own end
    and ``EXPIRATION_CAP`` x the local median breath duration (21 breaths) after its peak.
    """
    if len(series) < 3:
        return series
    dur = np.asarray(series.end_s - series.onset_s, dtype=float)
    local = ndimage.median_filter(dur, size=_NEIGHBOURS, mode="nearest")
    end = np.minimum(series.end_s, series.peak_s + EXPIRATION_CAP * local)
    end = np.maximum(end, series.peak_s)
    return BreathSeries(series.role, series.onset_s, series.peak_s, end, series.amplitude,
                        series.valid, series.polarity)


#: Where the signal's own excursion falls below this fraction of the covering breath's
#: amplitude, the "breath" is a pause (see ``amplitude_on``).
PAUSE_FRACTION = 0.25


def typical_period_s(series: BreathSeries) -> float:
    """Median duration of the valid breaths, clipped to 2-8 s (adult breathing)."""
    dur = np.asarray(series.end_s - series.onset_s)[np.asarray(series.valid, bool)]
    return float(np.clip(np.median(dur), 2.0, 8.0)) if len(dur) else 4.0


def excursion_on(sig: Signal, grid: Grid, window_s: float) -> np.ndarray:
    """Peak-to-trough excursion of the signal within a centred window, at grid times.

    The signal is first detrended by its moving average over the same window, so the
    slow drift of a sensor during a pause is not taken for breathing (a sine of period
    ``window_s`` passes unchanged and keeps its full excursion).
    """
    if len(sig.data) == 0:
        return np.zeros(grid.n)
    x = np.where(sig.mask & np.isfinite(sig.data), sig.data, 0.0).astype(float)
    w = max(3, int(round(window_s * sig.fs)))
    x = x - ndimage.uniform_filter1d(x, w, mode="nearest")
    env = (ndimage.maximum_filter1d(x, w, mode="nearest")
           - ndimage.minimum_filter1d(x, w, mode="nearest"))
    return env[sig.index_of(grid.t)]


def amplitude_on(series: BreathSeries, grid: Grid, sig: Signal | None = None) -> np.ndarray:
    """Breath amplitude at every grid time (0 where no breath covers it).

    Two checks keep a detector's stray "breath" from covering a pause: implausibly long
    breaths are cut short after their peak (``cap_breath_ends``), and where the
    channel's own excursion over one typical breath (``excursion_on``) is below
    ``PAUSE_FRACTION`` of the breath's amplitude, that excursion is used instead (the
    sensor is not breathing there, whatever the breath list says).
    """
    amp = amplitude_at(cap_breath_ends(series), grid.t)
    if sig is None:
        return amp
    env = excursion_on(sig, grid, typical_period_s(series))
    return np.where(env < PAUSE_FRACTION * amp, env, amp)


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
