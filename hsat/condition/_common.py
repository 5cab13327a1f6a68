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
    edges = np.diff(np.concatenate([[0], m.view(np.int8), [0]]))
    return np.column_stack([np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)])


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
    """Fraction of True samples of ``mask`` in each grid cell (cells of 1/grid_fs s)."""
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
    # Centre first: the cumulative sums of squares then keep their precision.
    centre = float(np.median(x[valid][::16])) if valid.any() else 0.0
    xv = np.where(valid, x - centre, 0.0)
    k = int(fs)
    if k == fs and len(x) == n_sec * k:  # whole samples per second: a reshape is enough
        s1 = xv.reshape(n_sec, k).sum(axis=1)
        s2 = np.square(xv).reshape(n_sec, k).sum(axis=1)
        c = valid.reshape(n_sec, k).sum(axis=1).astype(float)
    else:
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


def fill_invalid(x: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """A copy with invalid samples linearly interpolated (edges held), for filtering."""
    out = np.array(x, dtype=float, copy=True)
    good = valid & np.isfinite(out)
    if good.all():
        return out
    if not good.any():
        return np.zeros_like(out)
    idx = np.arange(len(out))
    out[~good] = np.interp(idx[~good], idx[good], out[good])
    return out


def band_limit(
    x: np.ndarray, fs: float, low_hz: float | None, high_hz: float | None, order: int = 2
) -> np.ndarray:
    """Zero-phase Butterworth band-limiting (``scipy.signal.sosfiltfilt``).

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
    return sps.sosfiltfilt(sos, x)


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
