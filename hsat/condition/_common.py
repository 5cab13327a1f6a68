"""Shared helpers for conditioning: runs of a mask, per-second statistics, filters."""

from __future__ import annotations

import math

import numpy as np
from scipy import signal as sps

from hsat.recording import Interval


def runs(mask: np.ndarray) -> np.ndarray:
    """Start/end indices (half-open) of the True runs of ``mask``, shape (k, 2)."""
    m = np.asarray(mask, dtype=bool)
    if m.size == 0:
        return np.empty((0, 2), dtype=np.int64)
    # compare neighbours as booleans: no integer copy of the whole mask
    padded = np.concatenate(([False], m, [False]))
    edges = np.flatnonzero(padded[1:] != padded[:-1])
    return np.column_stack([edges[0::2], edges[1::2]])


def finite_and(valid: np.ndarray, data: np.ndarray) -> np.ndarray:
    """``valid & np.isfinite(data)``; ``valid`` itself (not a copy) when all data is finite.

    The min and max of the samples tell whether any is NaN or infinite without making a
    mask of the whole channel; read-only use of the result is assumed.
    """
    if len(data) and np.isfinite(np.min(data)) and np.isfinite(np.max(data)):
        return np.asarray(valid, dtype=bool)
    return valid & np.isfinite(data)


def fill_short_false(mask: np.ndarray, max_len: int) -> np.ndarray:
    """``mask`` with False runs of at most ``max_len`` samples between True runs set True."""
    out = np.asarray(mask, dtype=bool).copy()
    for a, b in runs(~out):
        if a > 0 and b < len(out) and b - a <= max_len:
            out[a:b] = True
    return out


def drop_short_true(mask: np.ndarray, min_len: int) -> np.ndarray:
    """``mask`` with True runs shorter than ``min_len`` samples removed."""
    out = np.asarray(mask, dtype=bool).copy()
    for a, b in runs(out):
        if b - a < min_len:
            out[a:b] = False
    return out


def intervals(
    mask: np.ndarray, fs: float, reason: str, role: str = "", t0_s: float = 0.0
) -> list[Interval]:
    """The True runs of a sample mask as ``Interval``s in seconds."""
    return [Interval(t0_s + a / fs, t0_s + b / fs, reason, role) for a, b in runs(mask).tolist()]


def mask_of(spans: list[Interval] | list[tuple[float, float]], n: int, fs: float) -> np.ndarray:
    """Sample mask (length ``n`` at ``fs``) of the union of spans."""
    out = np.zeros(n, dtype=bool)
    for span in spans:
        a, b = (span.start_s, span.end_s) if isinstance(span, Interval) else span
        i0 = max(int(math.floor(a * fs + 1e-9)), 0)
        i1 = min(int(math.ceil(b * fs - 1e-9)), n)
        if i1 > i0:
            out[i0:i1] = True
    return out


def seconds_grid(duration_s: float, grid_fs: float = 1.0) -> int:
    return int(math.ceil(duration_s * grid_fs - 1e-9))


def to_grid(mask: np.ndarray, fs: float, n_grid: int, grid_fs: float = 1.0) -> np.ndarray:
    """Fraction of True samples of ``mask`` in each grid cell (cells of 1/grid_fs s).

    ``mask`` may also hold numbers: the result is then their mean per cell.
    """
    per_cell = fs / grid_fs
    if per_cell == int(per_cell) and len(mask) == n_grid * int(per_cell) and (
        np.asarray(mask).dtype == bool or per_cell < 8
    ):
        # Whole cells: a reshape. Sums of booleans are exact, and numpy adds fewer than
        # 8 numbers in order, as np.bincount does, so the result is the same either way.
        k = int(per_cell)
        hits = np.asarray(mask).reshape(n_grid, k).sum(axis=1, dtype=float)
        return hits / k
    cell = np.minimum((np.arange(len(mask)) * (grid_fs / fs)).astype(np.int64), n_grid - 1)
    hits = np.bincount(cell, weights=np.asarray(mask, dtype=float), minlength=n_grid)
    counts = np.bincount(cell, minlength=n_grid)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = hits / counts
    return np.where(counts > 0, frac, 0.0)[:n_grid]


def from_grid(grid: np.ndarray, fs: float, n: int, grid_fs: float = 1.0) -> np.ndarray:
    """Expand a per-cell array back to ``n`` samples at ``fs``."""
    cell = np.minimum((np.arange(n) * (grid_fs / fs)).astype(np.int64), len(grid) - 1)
    return grid[cell]


def rolling_std(
    x: np.ndarray, valid: np.ndarray, fs: float, n_sec: int, window_s: int
) -> np.ndarray:
    """Standard deviation of the valid samples in a centred ``window_s`` window, per second.

    Built from per-second sums (``np.bincount``) and cumulative sums, so it costs one
    pass over the samples whatever the window. Seconds with no valid sample get NaN.
    """
    k = int(fs)
    if k == fs and len(x) == n_sec * k:  # whole samples per second: a reshape is enough
        s1, s2, c = _second_sums(x, valid, k, n_sec)
    else:
        # Centre first: the cumulative sums of squares then keep their precision.
        centre = float(np.median(x[valid][::16])) if valid.any() else 0.0
        xv = np.where(valid, x - centre, 0.0)
        cell = np.minimum((np.arange(len(x)) / fs).astype(np.int64), n_sec - 1)
        s1 = np.bincount(cell, weights=xv, minlength=n_sec)
        s2 = np.bincount(cell, weights=xv * xv, minlength=n_sec)
        c = np.bincount(cell, weights=valid.astype(float), minlength=n_sec)
    half = window_s // 2

    def window_sum(v: np.ndarray) -> np.ndarray:
        cs = np.concatenate([[0.0], np.cumsum(v)])
        lo = np.clip(np.arange(n_sec) - half, 0, n_sec)
        hi = np.clip(np.arange(n_sec) - half + window_s, 0, n_sec)
        return cs[hi] - cs[lo]

    tot1, tot2, cnt = window_sum(s1), window_sum(s2), window_sum(c)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = tot2 / cnt - (tot1 / cnt) ** 2
    var = np.where(cnt >= max(2, 0.5 * window_s * fs), np.maximum(var, 0.0), np.nan)
    return np.sqrt(var)


#: Seconds of samples handled at a time by ``_second_sums`` (temporaries stay small).
_SUM_BLOCK_S = 600


def _second_sums(
    x: np.ndarray, valid: np.ndarray, k: int, n_sec: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-second sum, sum of squares and count of the valid, centred samples of ``x``
    (``k`` samples a second), block by block: each second's sums are those of one row,
    so the blocks change no value."""
    # Centre first: the cumulative sums of squares then keep their precision. The centre
    # is the median of every 16th valid sample (counted over the whole channel).
    picked, seen = [], 0
    step = _SUM_BLOCK_S * k
    for a in range(0, len(x), step):
        chosen = x[a : a + step][valid[a : a + step]]
        picked.append(chosen[(-seen) % 16 :: 16])
        seen += len(chosen)
    centre = float(np.median(np.concatenate(picked))) if seen else 0.0
    s1, s2, c = np.empty(n_sec), np.empty(n_sec), np.empty(n_sec)
    for a in range(0, n_sec, _SUM_BLOCK_S):
        b = min(a + _SUM_BLOCK_S, n_sec)
        ok = valid[a * k : b * k]
        xv = np.where(ok, x[a * k : b * k] - centre, 0.0).reshape(b - a, k)
        s1[a:b] = xv.sum(axis=1)
        s2[a:b] = np.square(xv).sum(axis=1)
        c[a:b] = ok.reshape(b - a, k).sum(axis=1)
    return s1, s2, c


def fill_invalid(x: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """A copy with invalid samples linearly interpolated (edges held), for filtering."""
    out = np.array(x, dtype=float, copy=True)
    good = valid & np.isfinite(out)
    if good.all():
        return out
    if not good.any():
        return np.zeros_like(out)
    # Only the invalid runs are touched: each gets the straight line between its valid
    # neighbours, computed as np.interp does (slope * (i - left) + y_left), so the values
    # are the same to the last bit; a run at either end holds its one neighbour.
    gaps = runs(~good)
    start, stop = gaps[:, 0], gaps[:, 1]
    lengths = stop - start
    run_of = np.repeat(np.arange(len(start)), lengths)
    first = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    idx = np.arange(int(lengths.sum())) + np.repeat(start - first, lengths)
    y_left = out[np.maximum(start - 1, 0)]
    y_right = out[np.minimum(stop, len(out) - 1)]
    y_left = np.where(start == 0, y_right, y_left)
    y_right = np.where(stop == len(out), y_left, y_right)
    x_left = (start - 1).astype(float)
    slope = (y_right - y_left) / (stop - x_left)
    out[idx] = slope[run_of] * (idx - x_left[run_of]) + y_left[run_of]
    return out


#: Samples filtered per ``sosfilt`` call in ``zero_phase``: small enough that the
#: working copy sosfilt makes stays in cache instead of costing fresh memory.
FILTER_CHUNK = 1 << 16


def zero_phase(sos: np.ndarray, x: np.ndarray, *, overwrite: bool = False) -> np.ndarray:
    """``scipy.signal.sosfiltfilt(sos, x)`` with its default odd padding, in place.

    The same steps as sosfiltfilt (odd extension of ``3 * ntaps`` samples at both ends,
    steady-state initial conditions from ``sosfilt_zi`` scaled by the first sample, a
    forward and a backward ``sosfilt`` pass) give the same values to the last bit; only
    the passes run chunk by chunk, carrying the filter state, over one buffer:
    sosfiltfilt itself makes three copies of the whole signal, and fresh memory is
    what a long night pays for most. With ``overwrite`` a float64 ``x`` is that buffer.
    """
    x = np.asarray(x, dtype=float)
    ntaps = 2 * len(sos) + 1 - min(int((sos[:, 2] == 0).sum()), int((sos[:, 5] == 0).sum()))
    edge = 3 * ntaps
    if x.ndim != 1 or len(x) <= edge:
        return sps.sosfiltfilt(sos, x)
    y = x if overwrite and x.flags.c_contiguous and x.flags.writeable else x.copy()
    left = 2 * y[0] - y[edge:0:-1]  # the odd extension, as scipy's odd_ext
    right = 2 * y[-1] - y[-2 : -(edge + 2) : -1]
    zi_unit = sps.sosfilt_zi(sos)
    left, state = sps.sosfilt(sos, left, zi=zi_unit * left[0])
    for a in range(0, len(y), FILTER_CHUNK):
        y[a : a + FILTER_CHUNK], state = sps.sosfilt(sos, y[a : a + FILTER_CHUNK], zi=state)
    right, state = sps.sosfilt(sos, right, zi=state)
    # backward pass from the end of the padded signal; the padding's output is dropped
    _, state = sps.sosfilt(sos, right[::-1], zi=zi_unit * right[-1])
    backward = y[::-1]
    for a in range(0, len(y), FILTER_CHUNK):
        backward[a : a + FILTER_CHUNK], state = sps.sosfilt(
            sos, backward[a : a + FILTER_CHUNK], zi=state)
    return y


def band_limit(
    x: np.ndarray, fs: float, low_hz: float | None, high_hz: float | None, order: int = 2,
    *, overwrite: bool = False,
) -> np.ndarray:
    """Zero-phase Butterworth band-limiting (``zero_phase``: scipy's ``sosfiltfilt``).

    A corner at or above 0.45 * fs is skipped (nothing to remove below Nyquist).
    """
    nyq = fs / 2
    lo = low_hz if low_hz and low_hz > 0 else None
    hi = high_hz if high_hz and high_hz < 0.9 * nyq else None
    if lo is None and hi is None:
        return np.asarray(x, dtype=float)
    if lo and hi:
        sos = sps.butter(order, [lo, hi], btype="bandpass", fs=fs, output="sos")
    elif lo:
        sos = sps.butter(order, lo, btype="highpass", fs=fs, output="sos")
    else:
        sos = sps.butter(order, hi, btype="lowpass", fs=fs, output="sos")
    if len(x) <= 3 * (2 * len(sos) + 1):
        return np.asarray(x, dtype=float) - (np.mean(x) if lo else 0.0)
    return zero_phase(sos, x, overwrite=overwrite)


def typical_level(level: np.ndarray) -> float:
    """A channel's typical breathing level from its per-second rolling std.

    The median over the seconds that are not near-flat relative to the channel's own
    95th percentile, so long flat or low stretches do not pull the reference down.
    """
    finite = level[np.isfinite(level)]
    if finite.size == 0:
        return 0.0
    top = float(np.percentile(finite, 95))
    if top <= 0:
        return 0.0
    active = finite[finite > 0.1 * top]
    return float(np.median(active)) if active.size else 0.0
