"""Server-side reduction of long signals to what a screen can show.

A 10-hour night of 100 Hz airflow holds 3.6 million samples; a browser lane is at most a
couple of thousand pixels wide. ``window_envelope`` slices the requested span and keeps, per
pixel column, the lowest and highest sample (a min/max envelope), so that no peak or
dropout disappears while the payload stays a few kilobytes. ``night_strip`` summarises
the whole night at one point per 30 s for the overview strip.

Both are vectorised with ``numpy.fmin.reduceat``/``numpy.fmax.reduceat`` (NaN-ignoring);
no Python loop touches samples.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Most pixel columns one lane is reduced to; two values (min, max) per column keep a
#: lane at <= 2000 points, which is plenty for any screen and small to send.
MAX_COLUMNS = 1000
#: The overview strip's resolution: one point per this many seconds.
STRIP_STEP_S = 30.0


@dataclass(frozen=True)
class Envelope:
    """One lane of a window: either raw samples or a min/max envelope per column.

    ``t_s`` are column start times (or sample times when ``raw``). ``lo``/``hi`` are the
    lowest and highest value in each column; for raw samples both equal the sample.
    NaN marks columns with no valid sample.
    """

    t_s: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    raw: bool


def _column_edges(n: int, columns: int) -> np.ndarray:
    """Start index of each of ``columns`` near-equal bins over ``n`` samples."""
    return (np.arange(columns, dtype=np.int64) * n) // columns


def window_envelope(
    data: np.ndarray,
    fs: float,
    t0_signal_s: float,
    t0_s: float,
    t1_s: float,
    columns: int,
) -> Envelope:
    """Reduce the samples of ``data`` within [t0_s, t1_s) to at most ``columns`` columns.

    Parameters
    ----------
    data : float samples; NaN where the sample is invalid.
    fs : sample rate in Hz.
    t0_signal_s : time of sample 0 in seconds.
    t0_s, t1_s : the window in seconds (clipped to the signal).
    columns : pixel columns wanted; capped at ``MAX_COLUMNS``.

    Returns
    -------
    Envelope
        Raw samples when the window holds no more than ``2 * columns`` of them (nothing
        to reduce), else one (min, max) pair per column.
    """
    columns = int(max(1, min(columns, MAX_COLUMNS)))
    i0 = int(np.clip(np.floor((t0_s - t0_signal_s) * fs), 0, len(data)))
    i1 = int(np.clip(np.ceil((t1_s - t0_signal_s) * fs), i0, len(data)))
    chunk = data[i0:i1]
    n = len(chunk)
    if n <= 2 * columns:
        t = t0_signal_s + (i0 + np.arange(n)) / fs
        return Envelope(t, chunk, chunk, raw=True)
    edges = _column_edges(n, columns)
    with np.errstate(invalid="ignore"):
        lo = np.fmin.reduceat(chunk, edges)
        hi = np.fmax.reduceat(chunk, edges)
    t = t0_signal_s + (i0 + edges) / fs
    return Envelope(t, lo, hi, raw=False)


def _binned(data: np.ndarray, fs: float, t0_signal_s: float, duration_s: float,
            step_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Sample index of each step's start, and the number of steps, over the night."""
    steps = max(1, int(np.ceil(duration_s / step_s)))
    starts_t = np.arange(steps) * step_s
    idx = np.clip(np.floor((starts_t - t0_signal_s) * fs).astype(np.int64), 0, len(data))
    return idx, starts_t


def strip_mean_min(
    data: np.ndarray, fs: float, t0_signal_s: float, duration_s: float,
    step_s: float = STRIP_STEP_S,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per ``step_s`` step: (start time, mean of valid samples, lowest valid sample).

    NaN samples are left out; a step with none gives NaN.
    """
    idx, starts_t = _binned(data, fs, t0_signal_s, duration_s, step_s)
    if len(data) == 0:
        empty = np.full(len(starts_t), np.nan)
        return starts_t, empty, empty
    finite = np.isfinite(data)
    values = np.where(finite, data, 0.0)
    # reduceat needs indices < len; empty bins (equal consecutive indices) are fixed below.
    safe = np.minimum(idx, len(data) - 1)
    sums = np.add.reduceat(values, safe)
    counts = np.add.reduceat(finite.astype(np.int64), safe)
    with np.errstate(invalid="ignore"):
        lows = np.fmin.reduceat(data, safe)
    empty_bin = np.diff(np.append(idx, len(data))) <= 0
    counts = np.where(empty_bin, 0, counts)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    lows = np.where(counts > 0, lows, np.nan)
    return starts_t, means, lows


def strip_mode(
    codes: np.ndarray, fs: float, t0_signal_s: float, duration_s: float, n_codes: int,
    step_s: float = STRIP_STEP_S,
) -> np.ndarray:
    """Per ``step_s`` step, the most frequent integer code (-1 where no valid sample).

    Used for body position: a 30 s step shows the position held longest in it.
    """
    idx, starts_t = _binned(codes, fs, t0_signal_s, duration_s, step_s)
    steps = len(starts_t)
    if len(codes) == 0:
        return np.full(steps, -1, dtype=np.int64)
    finite = np.isfinite(codes)
    step_of_sample = np.searchsorted(idx, np.arange(len(codes)), side="right") - 1
    code = np.clip(np.where(finite, codes, 0).astype(np.int64), 0, n_codes - 1)
    flat = step_of_sample[finite] * n_codes + code[finite]
    counts = np.bincount(flat, minlength=steps * n_codes).reshape(steps, n_codes)
    mode = counts.argmax(axis=1)
    return np.where(counts.sum(axis=1) > 0, mode, -1)
