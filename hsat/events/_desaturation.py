"""Oxygen desaturations: detection on 1 Hz SpO2 and linking to respiratory events.

Method (the AASM defines no desaturation algorithm, standards.md §2; this is hsat's own,
in the family of the fiducial-point method of Jung et al. 2018 as described by Levy et
al., npj Digit Med 2021, standards.md §2):

1. SpO2 is put on a 1 Hz grid (mean of each second; oximetry indices are usually computed
   at 1 Hz, standards.md §2). Invalid samples (probe off, artefact) are marked.
2. Nadirs are local minima whose prominence on both sides is at least
   ``NADIR_PROMINENCE_PCT`` (so the 1-point jitter of integer-percent oximeters makes no
   nadirs). A plateau's first sample is the nadir time.
3. The pre-drop baseline of a nadir is the highest SpO2 between the previous nadir and
   this one, within ``desaturation.baseline_window_s`` before it; the desaturation starts
   at the last sample at that level (point A) and its depth is baseline - nadir.
4. It ends at the first sample after the nadir that is back within 1 point of the
   baseline or 3 points above the nadir (Jung/Levy point C), at most
   ``desaturation.max_duration_s`` after A.
5. A desaturation counts when depth >= ``drop_pct`` (percentage points, standards.md
   §1.2), A to C lasts >= ``min_duration_s`` and A to the nadir <= ``max_duration_s``,
   and every sample from A to the nadir is valid oximetry.

The desaturation of a respiratory event (the hypopnea criterion) is in
``_event_desaturation``.

Linking (standards.md §2, common practice): a desaturation whose nadir falls between a
respiratory event's onset and ``desaturation.link_window_s`` after its end is linked to
it; each desaturation is linked once, events taking the deepest free one in time order.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import signal

from hsat.recording import Conditioned, Interval

#: Both-sided prominence (SpO2 points) a local minimum needs to be a nadir.
NADIR_PROMINENCE_PCT = 1.5
#: End of a desaturation: back within this many points of the baseline ...
RECOVERY_TO_BASELINE_PCT = 1.0
#: ... or this many points above the nadir (Jung/Levy point C).
RECOVERY_ABOVE_NADIR_PCT = 3.0
_EPS = 1e-6


@dataclass(frozen=True, eq=False)
class Oximetry:
    """SpO2 on a 1 Hz grid: ``values[i]`` is the mean over second ``i`` (NaN if invalid).

    ``period`` marks seconds inside lights-off to lights-on, not judged awake and not
    excluded; ``scored`` = ``valid & period``, the seconds that count for oximetry
    indices.
    """

    values: np.ndarray
    valid: np.ndarray
    period: np.ndarray

    @property
    def scored(self) -> np.ndarray:
        return self.valid & self.period

    @property
    def t(self) -> np.ndarray:
        return np.arange(len(self.values), dtype=float)


def _in_intervals(t: np.ndarray, intervals: Sequence[Interval]) -> np.ndarray:
    inside = np.zeros(len(t), dtype=bool)
    for iv in intervals:  # a loop over intervals, not samples
        inside |= (t >= iv.start_s) & (t < iv.end_s)
    return inside


def oximetry_of(cond: Conditioned) -> Oximetry | None:
    """The night's SpO2 at 1 Hz with its validity and scored-time masks (None if absent)."""
    sig = cond.signals.get("spo2")
    if sig is None or len(sig.data) == 0:
        return None
    n = int(np.floor(cond.recording.duration_s))
    edges = np.arange(n + 1, dtype=float)
    idx = np.clip(np.round((edges - sig.t0_s) * sig.fs).astype(np.int64), 0, len(sig.data))
    ok = sig.mask & np.isfinite(sig.data)
    data = np.where(ok, sig.data, 0.0)
    csum = np.concatenate(([0.0], np.cumsum(data)))
    cvalid = np.concatenate(([0], np.cumsum(ok.astype(np.int64))))
    count = idx[1:] - idx[:-1]
    nvalid = cvalid[idx[1:]] - cvalid[idx[:-1]]
    # a second with no sample of its own (rates below 1 Hz) takes the nearest sample
    empty = count == 0
    near = np.clip(np.round((edges[:-1] + 0.5 - sig.t0_s) * sig.fs).astype(np.int64),
                   0, len(sig.data) - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        values = (csum[idx[1:]] - csum[idx[:-1]]) / nvalid
    valid = (nvalid == count) & (count > 0)
    values = np.where(empty, np.where(ok[near], sig.data[near], np.nan), values)
    valid = np.where(empty, ok[near], valid)
    values = np.where(valid, values, np.nan)
    t = edges[:-1]
    lights = (t >= cond.lights_off_s) & (t < cond.lights_on_s)
    excluded = _in_intervals(t, [iv for iv in cond.exclusions if iv.role in ("", "spo2")])
    awake = _in_intervals(t, cond.wake)
    return Oximetry(values, valid, lights & ~excluded & ~awake)


DESATURATION_COLUMNS = (
    "onset_s", "nadir_s", "end_s", "baseline_pct", "nadir_pct", "drop_pct",
)


def spo2_troughs(oxi: Oximetry, window_s: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The gap-filled 1 Hz SpO2 and its nadirs (method step 2 of the module docstring).

    Returns
    -------
    filled : SpO2 with invalid seconds holding the last valid value.
    troughs : index of each nadir (the middle of a flat minimum).
    left_edges : index of the first sample of each nadir's flat minimum.
    """
    x = oxi.values
    n = len(x)
    none = np.zeros(0, dtype=np.int64)
    if n < 3 or not oxi.valid.any():
        return np.nan_to_num(x), none, none
    # fill invalid seconds with the last valid value so peak finding sees no NaN;
    # desaturations that touch them are vetoed by the callers
    pos = np.where(oxi.valid, np.arange(n), 0)
    np.maximum.accumulate(pos, out=pos)
    filled = x[pos]
    first_valid = int(np.argmax(oxi.valid))
    filled[:first_valid] = x[first_valid]
    troughs, props = signal.find_peaks(-filled, plateau_size=1)
    if len(troughs) == 0:
        return filled, none, none
    with warnings.catch_warnings():  # flat stretches have prominence 0: dropped below
        warnings.filterwarnings("ignore", message="some peaks have a prominence of 0")
        prom = signal.peak_prominences(-filled, troughs, wlen=int(2 * window_s) + 1)[0]
    keep = prom >= NADIR_PROMINENCE_PCT - _EPS
    return filled, troughs[keep], props["left_edges"][keep]


def detect_desaturations(
    oxi: Oximetry,
    *,
    min_drop_pct: float,
    baseline_window_s: float,
    min_duration_s: float,
    max_duration_s: float,
) -> pd.DataFrame:
    """Desaturations of at least ``min_drop_pct`` points (method in the module docstring).

    Returns
    -------
    pandas.DataFrame
        Columns ``DESATURATION_COLUMNS`` (seconds and SpO2 %), one row per desaturation,
        in time order; only desaturations lying wholly in scored oximetry time
        (``oxi.scored`` from A to the nadir).
    """
    x = oxi.values
    n = len(x)
    filled, troughs, left_edges = spo2_troughs(oxi, baseline_window_s)
    if len(troughs) == 0:
        return pd.DataFrame({c: np.zeros(0) for c in DESATURATION_COLUMNS})
    bad_cum = np.concatenate(([0], np.cumsum(~oxi.scored)))
    rows = []
    previous = 0
    window = int(baseline_window_s)
    for t_idx, nadir_idx in zip(troughs, left_edges, strict=True):  # loop over nadirs
        start = max(previous, int(nadir_idx) - window)
        previous = int(t_idx)
        seg = filled[start : nadir_idx + 1]
        if len(seg) == 0:
            continue
        base = float(np.max(seg))
        a_idx = start + int(len(seg) - 1 - np.argmax(seg[::-1]))  # last sample at the max
        nadir = float(filled[nadir_idx])
        drop = base - nadir
        if drop < min_drop_pct - _EPS:
            continue
        if nadir_idx - a_idx > max_duration_s:
            continue
        if bad_cum[nadir_idx + 1] - bad_cum[a_idx] > 0:
            continue
        target = min(base - RECOVERY_TO_BASELINE_PCT, nadir + RECOVERY_ABOVE_NADIR_PCT)
        stop = min(n, a_idx + int(max_duration_s) + 1)
        after = np.flatnonzero(filled[nadir_idx:stop] >= target - _EPS)
        c_idx = nadir_idx + int(after[0]) if len(after) else stop - 1
        if c_idx - a_idx < min_duration_s - _EPS:
            continue
        rows.append((float(a_idx), float(nadir_idx), float(c_idx), base, nadir, drop))
    return pd.DataFrame(rows, columns=list(DESATURATION_COLUMNS)).astype(float)


def link_desaturations(
    event_onsets_s: np.ndarray,
    event_ends_s: np.ndarray,
    desats: pd.DataFrame,
    *,
    link_window_s: float,
) -> np.ndarray:
    """Index of the desaturation linked to each event (-1 when none).

    Events are taken in time order; each takes the deepest not-yet-linked desaturation
    whose nadir lies in ``[onset, end + link_window_s]`` (standards.md §2, common
    practice: each desaturation is counted once). This link is reported
    (``linked_event_id`` of desaturation rows); the hypopnea criterion itself is
    ``_event_desaturation``.
    """
    linked = np.full(len(event_onsets_s), -1, dtype=np.int64)
    if len(desats) == 0 or len(event_onsets_s) == 0:
        return linked
    nadir = desats["nadir_s"].to_numpy()
    depth = desats["drop_pct"].to_numpy()
    free = np.ones(len(desats), dtype=bool)
    lo = np.searchsorted(nadir, event_onsets_s - _EPS, side="left")
    hi = np.searchsorted(nadir, event_ends_s + link_window_s + _EPS, side="right")
    for i in np.argsort(event_onsets_s, kind="stable"):  # loop over events
        cand = np.arange(lo[i], hi[i])
        cand = cand[free[cand]]
        if len(cand) == 0:
            continue
        best = int(cand[np.argmax(depth[cand])])
        linked[i] = best
        free[best] = False
    return linked
