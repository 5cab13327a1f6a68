"""The desaturation of each respiratory event: the hypopnea criterion.

AASM hypopnea rules 1A/1B need a ">= 3 % / >= 4 % desaturation from pre-event baseline"
(standards.md §1.2; percent = SpO2 points). Here:

* the pre-event SpO2 baseline is the highest valid sample in the
  ``desaturation.baseline_window_s`` before onset (common practice: the maximum in the
  30-120 s before onset, standards.md §1.3);
* the event's nadir is a SpO2 nadir (``_desaturation.spo2_troughs``) inside the link
  window, from onset to ``desaturation.link_window_s`` after the end (standards.md §2,
  common practice ~30 s); its value is the lowest valid sample of the channel's own
  samples within ``NADIR_HALF_WIDTH_S`` of it, so integer-percent oximeters keep
  whole-point drops;
* each nadir is counted once (standards.md §2): events are taken in time order, and
  each takes, among the free nadirs that give it the drop it needs (none for an apnea),
  the one closest to ``TYPICAL_DELAY_S`` after its end (the circulatory delay from the
  end of an event to the SpO2 nadir, about 20-30 s, common practice). A desaturation
  already taken by an earlier event cannot make a later hypopnea.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from hsat.events._desaturation import Oximetry, spo2_troughs
from hsat.recording import Conditioned

#: Event end to SpO2 nadir (s), for choosing between several nadirs in the window.
TYPICAL_DELAY_S = 25.0
#: The nadir value is the lowest native sample within this many seconds of the 1 Hz nadir.
NADIR_HALF_WIDTH_S = 2.0
_EPS = 1e-6


def event_desaturation(
    cond: Conditioned,
    oxi: Oximetry | None,
    onsets_s: np.ndarray,
    ends_s: np.ndarray,
    min_drop_pct: np.ndarray,
    *,
    baseline_window_s: float,
    link_window_s: float,
    nadir: str = "window_minimum",
) -> pd.DataFrame:
    """Baseline, nadir, drop and nadir time of each event's desaturation.

    Parameters
    ----------
    min_drop_pct : per event, the drop it needs to take a nadir (the rule's hypopnea
        desaturation for hypopnea candidates, 0 for apneas).

    Returns
    -------
    pandas.DataFrame
        Columns ``baseline_pct, nadir_pct, drop_pct, nadir_s``; NaN where the event took
        no nadir (``baseline_pct`` may still be given).
    """
    n = len(onsets_s)
    out = {k: np.full(n, np.nan) for k in ("baseline_pct", "nadir_pct", "drop_pct", "nadir_s")}
    sig = cond.signals.get("spo2")
    if sig is None or oxi is None or n == 0 or len(sig.data) == 0:
        return pd.DataFrame(out)
    _, troughs, left_edges = spo2_troughs(oxi, baseline_window_s)
    # a nadir counts only inside scored oximetry time (valid SpO2, monitoring period)
    keep = oxi.scored[troughs]
    troughs, left_edges = troughs[keep], left_edges[keep]
    ok = sig.mask & np.isfinite(sig.data)
    masked = np.where(ok, sig.data, np.nan)
    values = np.full(len(troughs), np.nan)
    half = int(np.ceil(NADIR_HALF_WIDTH_S * sig.fs))
    centre = np.round((troughs + 0.5 - sig.t0_s) * sig.fs).astype(np.int64)
    for j, c in enumerate(centre):  # loop over nadirs
        seg = masked[max(0, c - half): c + half + 1]
        if np.isfinite(seg).any():
            values[j] = float(np.nanmin(seg))
    times = left_edges.astype(float)
    i0 = np.clip(np.floor((onsets_s - baseline_window_s - sig.t0_s) * sig.fs), 0,
                 len(sig.data)).astype(np.int64)
    i1 = np.clip(np.floor((onsets_s - sig.t0_s) * sig.fs), 0, len(sig.data)).astype(np.int64)
    i2 = np.clip(np.ceil((ends_s + link_window_s - sig.t0_s) * sig.fs) + 1, 0,
                 len(sig.data)).astype(np.int64)
    free = np.isfinite(values)
    for k in np.argsort(onsets_s, kind="stable"):  # loop over events
        before = masked[i0[k]:i1[k]]
        if not np.isfinite(before).any():
            continue
        base = float(np.nanmax(before))
        out["baseline_pct"][k] = base
        if nadir == "window_minimum":
            during = masked[i1[k]:i2[k]]
            if np.isfinite(during).any():
                j = int(np.nanargmin(during))
                out["nadir_pct"][k] = float(during[j])
                out["drop_pct"][k] = base - float(during[j])
                out["nadir_s"][k] = sig.t0_s + (i1[k] + j) / sig.fs
            continue
        window = free & (times >= onsets_s[k] - _EPS) & (times <= ends_s[k] + link_window_s)
        cand = np.flatnonzero(window & (base - values >= min_drop_pct[k] - _EPS))
        if len(cand) == 0:
            continue
        best = int(cand[np.argmin(np.abs(times[cand] - (ends_s[k] + TYPICAL_DELAY_S)))])
        free[best] = False
        out["nadir_pct"][k] = values[best]
        out["drop_pct"][k] = base - values[best]
        out["nadir_s"][k] = times[best]
    return pd.DataFrame(out)
