"""Small helpers for sets of half-open time spans ``[start, end)`` in seconds."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Span:
    """A time span with a kind and optional details (position, role, reason)."""

    start_s: float
    end_s: float
    kind: str = ""
    role: str = ""
    detail: str = ""

    @property
    def duration_s(self) -> float:
        return self.end_s - self.start_s


Pair = tuple[float, float]


def merge(pairs: Iterable[Pair]) -> list[Pair]:
    """Union of spans, sorted, overlapping or touching ones joined."""
    out: list[list[float]] = []
    for a, b in sorted((float(a), float(b)) for a, b in pairs if b > a):
        if out and a <= out[-1][1]:
            out[-1][1] = max(out[-1][1], b)
        else:
            out.append([a, b])
    return [(a, b) for a, b in out]


def subtract(base: Iterable[Pair], holes: Iterable[Pair]) -> list[Pair]:
    """``base`` minus ``holes`` (both sets of spans)."""
    holes_m = merge(holes)
    result: list[Pair] = []
    for a, b in merge(base):
        cur = a
        for h0, h1 in holes_m:
            if h1 <= cur or h0 >= b:
                continue
            if h0 > cur:
                result.append((cur, h0))
            cur = max(cur, h1)
            if cur >= b:
                break
        if cur < b:
            result.append((cur, b))
    return result


def intersect(a_pairs: Iterable[Pair], b_pairs: Iterable[Pair]) -> list[Pair]:
    """Intersection of two sets of spans."""
    a_m, b_m = merge(a_pairs), merge(b_pairs)
    out: list[Pair] = []
    i = j = 0
    while i < len(a_m) and j < len(b_m):
        lo = max(a_m[i][0], b_m[j][0])
        hi = min(a_m[i][1], b_m[j][1])
        if hi > lo:
            out.append((lo, hi))
        if a_m[i][1] < b_m[j][1]:
            i += 1
        else:
            j += 1
    return out


def total(pairs: Iterable[Pair]) -> float:
    return float(sum(b - a for a, b in merge(pairs)))


def mask(t: np.ndarray, pairs: Sequence[Pair]) -> np.ndarray:
    """Boolean mask of the times ``t`` that fall inside any of the spans."""
    m = merge(pairs)
    if not m:
        return np.zeros(t.shape, dtype=bool)
    starts = np.array([a for a, _ in m])
    ends = np.array([b for _, b in m])
    idx = np.searchsorted(starts, t, side="right") - 1
    inside = idx >= 0
    idx_c = np.clip(idx, 0, len(m) - 1)
    return inside & (t < ends[idx_c])


def lookup(t: np.ndarray, spans: Sequence[Span], default: str) -> np.ndarray:
    """The ``detail`` of the (sorted, disjoint) span holding each time, else ``default``."""
    labels = np.array([s.detail for s in spans] + [default], dtype=object)
    if not spans:
        return np.full(t.shape, default, dtype=object)
    starts = np.array([s.start_s for s in spans])
    ends = np.array([s.end_s for s in spans])
    idx = np.searchsorted(starts, t, side="right") - 1
    ok = (idx >= 0) & (t < ends[np.clip(idx, 0, len(spans) - 1)])
    return labels[np.where(ok, idx, len(spans))]


def place_disjoint(
    rng: np.random.Generator,
    window: Pair,
    durations: Sequence[float],
    taken: list[Pair],
    margin_s: float,
    tries: int = 200,
) -> list[Pair]:
    """Place spans of the given durations at random inside ``window``.

    Each placed span keeps ``margin_s`` from every span in ``taken`` (which grows as
    spans are placed). A span that finds no room after ``tries`` draws is skipped.
    """
    placed: list[Pair] = []
    lo, hi = window
    for dur in durations:
        if hi - lo <= dur:
            continue
        for _ in range(tries):
            a = float(rng.uniform(lo, hi - dur))
            b = a + dur
            if all(b + margin_s <= t0 or a - margin_s >= t1 for t0, t1 in taken):
                taken.append((a, b))
                placed.append((a, b))
                break
    return placed
