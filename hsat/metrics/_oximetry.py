"""Oximetry and pulse-rate summaries: SpO2 statistics, T90/T88, bands, desaturation
depths, hypoxic burden and the event-related pulse-rate rise.

Every statistic is over *scored oximetry time*: valid SpO2 between lights off and lights
on, not judged awake, not excluded (``hsat.events.oximetry_of``), at 1 Hz (oximetry
indices are usually computed at 1 Hz, standards.md §2).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import signal

from hsat.events import Oximetry
from hsat.recording import Conditioned

#: SpO2 bands (lower inclusive, upper exclusive), % points.
SPO2_BANDS: tuple[tuple[str, float | None, float | None], ...] = (
    (">=95", 95.0, None), ("90-<95", 90.0, 95.0), ("85-<90", 85.0, 90.0),
    ("80-<85", 80.0, 85.0), ("<80", None, 80.0),
)
#: Desaturation depth bins (points; lower inclusive, upper exclusive).
DEPTH_BINS: tuple[tuple[float, float | None], ...] = (
    (3.0, 4.0), (4.0, 6.0), (6.0, 10.0), (10.0, 20.0), (20.0, None),
)
#: Hypoxic burden: pre-event SpO2 baseline = maximum in this many seconds before event
#: end; the ensemble spans this many seconds either side of event end (standards.md §5.1).
HB_BASELINE_S = 100
HB_ENSEMBLE_S = 120
#: Pulse-rate rise: baseline = mean pulse in the 30 s before onset; response = maximum
#: pulse from 10 s before to 30 s after event end (a per-event simplification of the
#: ensemble method of Azarbarzin et al. 2021, standards.md §5.2).
PULSE_BEFORE_S = 30
PULSE_AFTER_S = (-10, 30)


def _r(x: float | None, nd: int = 1) -> float | None:
    return None if x is None or not np.isfinite(x) else round(float(x), nd)


def _row_percentile(rows: np.ndarray, q: float) -> np.ndarray:
    """``np.nanpercentile(rows, q, axis=1)``: rows without NaN in one vectorised call
    (the same linear interpolation, so the same values), the others one by one."""
    out = np.empty(len(rows))
    complete = ~np.isnan(rows).any(axis=1)
    if complete.any():
        out[complete] = np.percentile(rows[complete], q, axis=1)
    for i in np.flatnonzero(~complete):
        out[i] = np.nanpercentile(rows[i], q)
    return out


def spo2_summary(oxi: Oximetry | None) -> dict[str, object]:
    """SpO2 baseline, mean, nadir, T90/T88 and time in bands over scored oximetry time.

    T90 = time with SpO2 < 90 % and T88 = time with SpO2 < 88 %, as % of scored
    oximetry time and in minutes (standards.md §2: state the inequality). The baseline
    is the median over full minutes of each minute's 95th percentile (hsat's choice: the
    level SpO2 returns to between desaturations).
    """
    empty: dict[str, object] = {
        "valid_h": 0.0, "baseline_pct": None, "mean_pct": None, "nadir_pct": None,
        "nadir_time_s": None, "t90_pct": None, "t88_pct": None, "t90_min": None,
        "t88_min": None,
        "inequalities": {"t90": "SpO2 < 90 %", "t88": "SpO2 < 88 %"},
        "time_in_bands": [
            {"label": lab, "lower_pct": lo, "upper_pct": hi, "minutes": 0.0, "pct": 0.0}
            for lab, lo, hi in SPO2_BANDS
        ],
    }
    if oxi is None or not oxi.scored.any():
        return empty
    x = oxi.values[oxi.scored]
    t = oxi.t[oxi.scored]
    n = len(x)
    full = (len(oxi.values) // 60) * 60
    per_min = np.where(oxi.scored[:full], oxi.values[:full], np.nan).reshape(-1, 60)
    good = np.sum(np.isfinite(per_min), axis=1) >= 30
    baseline = (float(np.median(_row_percentile(per_min[good], 95)))
                if good.any() else float(np.percentile(x, 95)))
    nadir_i = int(np.argmin(x))
    out = dict(empty)
    out.update({
        "valid_h": round(n / 3600.0, 2),
        "baseline_pct": _r(baseline),
        "mean_pct": _r(float(np.mean(x))),
        "nadir_pct": _r(float(x[nadir_i])),
        "nadir_time_s": float(t[nadir_i]),
        "t90_pct": _r(100.0 * np.count_nonzero(x < 90.0) / n, 2),
        "t88_pct": _r(100.0 * np.count_nonzero(x < 88.0) / n, 2),
        "t90_min": _r(np.count_nonzero(x < 90.0) / 60.0, 2),
        "t88_min": _r(np.count_nonzero(x < 88.0) / 60.0, 2),
    })
    bands = []
    for label, lo, hi in SPO2_BANDS:
        sel = np.ones(n, dtype=bool)
        if lo is not None:
            sel &= x >= lo
        if hi is not None:
            sel &= x < hi
        k = int(np.count_nonzero(sel))
        bands.append({"label": label, "lower_pct": lo, "upper_pct": hi,
                      "minutes": round(k / 60.0, 2), "pct": round(100.0 * k / n, 2)})
    out["time_in_bands"] = bands
    return out


def depth_distribution(drops: np.ndarray) -> dict[str, object]:
    """Counts of desaturations by depth (points) in ``DEPTH_BINS``."""
    bins = []
    for lo, hi in DEPTH_BINS:
        sel = drops >= lo - 1e-9
        if hi is not None:
            sel &= drops < hi - 1e-9
        label = f"{lo:g}-<{hi:g}" if hi is not None else f">={lo:g}"
        bins.append({"label": label, "lower_pct": lo, "upper_pct": hi,
                     "count": int(np.count_nonzero(sel))})
    return {"min_drop_pct": DEPTH_BINS[0][0], "bins": bins}


def _window_values(x: np.ndarray, centre: np.ndarray, lo: int, hi: int) -> np.ndarray:
    """Rows ``x[c + lo : c + hi]`` for each centre (NaN outside ``x``)."""
    offsets = np.arange(lo, hi)
    idx = centre[:, None] + offsets[None, :]
    inside = (idx >= 0) & (idx < len(x))
    return np.where(inside, x[np.clip(idx, 0, len(x) - 1)], np.nan)


def _window_around(ens: np.ndarray, nadir: int, tol: float = 0.05) -> tuple[int, int]:
    """The nearest peaks of the ensemble before and after its nadir (plateaus count; at
    the ends of the ensemble, the last/first sample within ``tol`` of the side's max)."""
    peaks, props = signal.find_peaks(ens, plateau_size=1)
    right_edges, left_edges = props["right_edges"], props["left_edges"]
    before = right_edges[right_edges < nadir]
    after = left_edges[left_edges > nadir]
    if len(before):
        start = int(before[-1])
    else:
        side = ens[: nadir + 1]
        start = int(np.flatnonzero(side >= np.max(side) - tol)[-1])
    if len(after):
        end = int(after[0])
    else:
        side = ens[nadir:]
        end = nadir + int(np.flatnonzero(side >= np.max(side) - tol)[0])
    return start, end


def hypoxic_burden(
    oxi: Oximetry | None, event_ends_s: np.ndarray, monitoring_h: float
) -> tuple[float | None, tuple[float, float] | None]:
    """Hypoxic burden (%min/h) and its search window (s relative to event end).

    Azarbarzin et al., Eur Heart J 2019 (standards.md §5.1; details there partly from
    memory): SpO2 around each event is aligned at event end and averaged (the
    ensemble); the search window runs from the last peak of the ensemble before its
    nadir to the first peak after it. Each event's area is the integral of
    (baseline - SpO2)+ over the window, baseline = the maximum SpO2 in the 100 s before
    event end. Where windows of adjacent events overlap, each second is counted once
    (the largest of the overlapping contributions; the sources leave this open). The
    sum (%min) is divided by *monitoring time* here, not sleep time as in the paper.
    """
    ends = np.asarray(event_ends_s, dtype=float)
    if oxi is None or len(ends) == 0 or monitoring_h <= 0:
        return (0.0 if oxi is not None and monitoring_h > 0 else None), None
    x = np.where(oxi.valid, oxi.values, np.nan)
    centre = np.round(ends).astype(np.int64)
    rows = _window_values(x, centre, -HB_ENSEMBLE_S, HB_ENSEMBLE_S + 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        ensemble = np.nanmean(rows, axis=0)
    if not np.isfinite(ensemble).any():
        return None, None
    ens = pd.Series(ensemble).interpolate(limit_direction="both").to_numpy()
    ens = np.convolve(ens, np.ones(5) / 5, mode="same")  # 5 s smoothing before peak search
    zero = HB_ENSEMBLE_S
    search = slice(zero - 30, zero + 60)  # the nadir lies around/after event end
    nadir = search.start + int(np.argmin(ens[search]))
    w_start, w_end = _window_around(ens, nadir)
    lo, hi = w_start - zero, w_end - zero
    base_rows = _window_values(x, centre, -HB_BASELINE_S, 1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        baselines = np.nanmax(base_rows, axis=1)
    deficit = np.zeros(len(x))
    for c, base in zip(centre, baselines, strict=True):  # loop over events
        if not np.isfinite(base):
            continue
        a, b = max(0, c + lo), min(len(x), c + hi + 1)
        if b <= a:
            continue
        seg = np.nan_to_num(base - x[a:b], nan=0.0).clip(min=0.0)
        deficit[a:b] = np.maximum(deficit[a:b], seg)
    area_pct_min = float(np.sum(deficit)) / 60.0
    return round(area_pct_min / monitoring_h, 1), (float(lo), float(hi))


def pulse_summary(cond: Conditioned, oxi: Oximetry | None) -> dict[str, object]:
    """Mean, minimum and maximum pulse rate where pulse is valid inside the analysed
    period (lights off to on, not awake, not excluded)."""
    sig = cond.signals.get("pulse")
    out: dict[str, object] = {"valid_h": 0.0, "mean_bpm": None, "min_bpm": None,
                              "max_bpm": None, "event_rise_bpm": None,
                              "event_rise_rule_set": ""}
    if sig is None or oxi is None:
        return out
    pr = pulse_1hz(cond, len(oxi.values))
    x = pr[oxi.period & np.isfinite(pr)]
    if len(x) == 0:
        return out
    out.update(valid_h=round(len(x) / 3600.0, 2), mean_bpm=_r(float(np.mean(x))),
               min_bpm=_r(float(np.min(x))), max_bpm=_r(float(np.max(x))))
    return out


def pulse_1hz(cond: Conditioned, n: int) -> np.ndarray:
    """Pulse rate at 1 Hz (nearest sample), NaN where invalid or absent."""
    sig = cond.signals.get("pulse")
    if sig is None or len(sig.data) == 0:
        return np.full(n, np.nan)
    t = np.arange(n, dtype=float) + 0.5
    idx = sig.index_of(t)
    ok = sig.mask[idx] & np.isfinite(sig.data[idx])
    return np.where(ok, sig.data[idx], np.nan)


def pulse_rise(pulse: np.ndarray, onsets_s: np.ndarray, ends_s: np.ndarray) -> float | None:
    """Mean event-related pulse-rate rise (bpm) over events with valid pulse around them."""
    if len(onsets_s) == 0:
        return None
    on = np.round(np.asarray(onsets_s)).astype(np.int64)
    end = np.round(np.asarray(ends_s)).astype(np.int64)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        before = np.nanmean(_window_values(pulse, on, -PULSE_BEFORE_S, 0), axis=1)
        after = np.nanmax(_window_values(pulse, end, PULSE_AFTER_S[0], PULSE_AFTER_S[1] + 1),
                          axis=1)
    rise = after - before
    rise = rise[np.isfinite(rise)]
    return _r(float(np.mean(rise))) if len(rise) else None
