"""Vectorised reductions over many index segments of one array (no loop over breaths)."""

from __future__ import annotations

import numpy as np


def segment_indices(
    start: np.ndarray, stop: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Flat sample indices of the inclusive segments [start_i, stop_i] (start_i <= stop_i).

    Returns (indices, segment number of each index, offset of each segment in the flat
    array); segments may overlap.
    """
    lengths = np.asarray(stop, dtype=np.int64) - np.asarray(start, dtype=np.int64) + 1
    if np.any(lengths < 1):
        raise ValueError("segment_indices: every segment needs start <= stop")
    offsets = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    segment = np.repeat(np.arange(len(lengths)), lengths)
    indices = np.arange(int(lengths.sum())) - offsets[segment] + np.asarray(start)[segment]
    return indices, segment, offsets


def segment_argmin(s: np.ndarray, start: np.ndarray, stop: np.ndarray) -> np.ndarray:
    """Index of the (first) minimum of ``s`` in each inclusive segment [start_i, stop_i]."""
    if len(start) == 0:
        return np.zeros(0, dtype=np.int64)
    indices, segment, offsets = segment_indices(start, stop)
    values = s[indices]
    lowest = np.minimum.reduceat(values, offsets)
    position = np.arange(len(indices))
    first = np.minimum.reduceat(np.where(values == lowest[segment], position, len(indices)),
                                offsets)
    return indices[first]


def segment_last_at_most(
    s: np.ndarray, start: np.ndarray, stop: np.ndarray, level: np.ndarray
) -> np.ndarray:
    """Last index in each segment [start_i, stop_i] where ``s <= level_i``.

    ``s[start_i] <= level_i`` must hold (the search then always finds one).
    """
    if len(start) == 0:
        return np.zeros(0, dtype=np.int64)
    indices, segment, offsets = segment_indices(start, stop)
    position = np.where(s[indices] <= level[segment], np.arange(len(indices)), -1)
    last = np.maximum.reduceat(position, offsets)
    if np.any(last < 0):
        raise ValueError("segment_last_at_most: a segment starts above its level")
    return indices[last]


def block_means(x: np.ndarray, k: int) -> np.ndarray:
    """``x.reshape(-1, k).mean(axis=1)`` (``len(x)`` a multiple of ``k``), faster.

    For ``k <= 8`` the columns are added as numpy's row reduction adds them (in order
    below 8, pairwise at 8), so the means are the same to the last bit; numpy itself
    pays a call per row.
    """
    if k > 8 or k < 2:
        return x.reshape(-1, k).mean(axis=1)
    cols = x.reshape(-1, k)
    c = [cols[:, j] for j in range(k)]
    if k == 8:
        total = ((c[0] + c[1]) + (c[2] + c[3])) + ((c[4] + c[5]) + (c[6] + c[7]))
    else:
        total = c[0] + c[1]
        for col in c[2:]:
            total += col
    total /= k
    return total
