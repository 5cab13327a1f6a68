"""Airflow: nasal-pressure linearisation, band-limiting, flat-line / cannula-off detection.

Nasal pressure varies roughly with the square of flow through the cannula, so its
sign-preserving square root is closer to flow (AASM Scoring Manual: nasal pressure "with
or without square-root transformation", standards.md §1.2, from memory). Sign-preserving
means an inverted sensor stays a clean (inverted) flow trace; polarity does not matter
here.

Band-limits (AASM technical specifications, standards.md §1.2, from memory): nasal
pressure DC or low-frequency filter <= 0.03 Hz, so a 0.03 Hz first-order high-pass removes
only transducer drift and offset (before the square root, which needs zero at no flow);
thermal 0.1-15 Hz. A 15 Hz low-pass after the root removes snore vibration and sensor
noise. Every filter is zero-phase (``scipy.signal.sosfiltfilt``), so events do not shift.

Flat-line detection (common practice; thresholds are hsat's own choice). The 10-s rolling
standard deviation of the high-passed pressure (before the root; the band-limited thermal
signal) is compared with the channel's own typical breathing level (``typical_level``). An apnea
also drops flow by >= 90 % (AASM), so amplitude alone cannot tell a 10-60 s apnea from a
cannula off. What does:

* **duration**: a respiratory event rarely lasts 3 min (the built-in rule sets stop at
  180 s), while a cannula off or a shift to mouth breathing lasts minutes. A stretch
  flatter than 5 % of typical (for 90 % of it) lasting >= 180 s is "cannula off / flat
  flow" whatever the other channels do;
* **the rest of the body**: a stretch below 20 % of typical pressure (about 45 % of
  typical flow) for >= 120 s while both belts still breathe at >= 40 % of their typical
  level for 80 % of it and SpO2 falls by less than 3 points (up to 30 s after it) is
  "nearly flat flow (mouth breathing or cannula shift)" ("cannula off / flat flow" when
  its median is below 5 %): air is moving (belts) and gas
  exchange holds (SpO2), so the sensor, not the patient, has stopped. Breathing that
  low for minutes would desaturate; an obstructive apnea keeps the belts going but
  desaturates; a central apnea stops the belts.

Blips above the flat level of up to 3 s, and body movements of up to 20 s, do not split
a flat stretch.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
from scipy import signal as sps

from hsat.condition._common import (
    band_limit,
    fill_invalid,
    fill_short_false,
    finite_and,
    intervals,
    mask_of,
    rolling_std,
    runs,
    typical_level,
)
from hsat.errors import ChannelError
from hsat.recording import Interval, Signal

FLAT_WINDOW_S = 10
VERY_FLAT_FRACTION = 0.05
MOVEMENT_BRIDGE_S = 20
NEARLY_FLAT_FRACTION = 0.20
BLIP_S = 3
VERY_FLAT_MIN_S = 180
NEARLY_FLAT_MIN_S = 120
SPO2_STEADY_DROP = 3.0
CANNULA_OFF = "cannula off / flat flow"
MOUTH_BREATHING = "nearly flat flow (mouth breathing or cannula shift)"
NO_VALUE = "no value recorded"


@dataclass(frozen=True)
class ChannelResult:
    """One conditioned channel with its exclusions and per-second activity level."""

    signal: Signal
    exclusions: list[Interval]
    level: np.ndarray  # 10-s rolling std per second (NaN where invalid)
    typical: float
    notes: list[str] = field(default_factory=list)
    moving: np.ndarray | None = None  # per second: a movement burst (belts only)


def linearise(x: np.ndarray) -> np.ndarray:
    """Sign-preserving square root of nasal pressure: ``sign(p) * sqrt(|p|)``."""
    out = np.abs(x)
    np.sqrt(out, out=out)
    return np.copysign(out, x, out=out)


def _root_low_pass(detrended: np.ndarray, fs: float) -> np.ndarray:
    """The linearised pressure, low-passed at 15 Hz (a new array)."""
    return band_limit(linearise(detrended), fs, None, 15.0, order=2, overwrite=True)


def breathing_band_fraction(x: np.ndarray, fs: float) -> float:
    """Share of 0.08-5 Hz power lying in the breathing band 0.08-0.8 Hz (Welch PSD).

    Breathing (6-48 breaths/min, common practice) puts most of the power there; a
    disconnected sensor's noise spreads it evenly (about 15 %).
    """
    step = max(int(fs // 10), 1)
    y = x[::step] if step > 1 else x
    f_s = fs / step
    nper = int(min(len(y), 120 * f_s))
    if nper < 16:
        return 0.0
    freqs, psd = sps.welch(y, fs=f_s, nperseg=nper)
    band = (freqs >= 0.08) & (freqs <= 5.0)
    total = psd[band].sum()
    if total <= 0:
        return 0.0
    return float(psd[(freqs >= 0.08) & (freqs <= 0.8)].sum() / total)


def _band_fraction_of_valid(x: np.ndarray, valid: np.ndarray, fs: float) -> float:
    """``breathing_band_fraction`` of ``x`` with invalid samples set to 0.

    The fraction only looks at every ``fs // 10``-th sample, so only those are copied.
    """
    step = max(int(fs // 10), 1)
    thinned = np.where(valid[::step], x[::step], 0.0)
    return breathing_band_fraction(thinned, fs / step)


def _spo2_drop(spo2_grid: np.ndarray | None, a: int, b: int) -> float | None:
    """Largest fall of SpO2 within [a, b + 30 s) (circulatory delay), None if unknown."""
    if spo2_grid is None:
        return None
    seg = spo2_grid[a : min(b + 30, len(spo2_grid))]
    seg = seg[np.isfinite(seg)]
    if seg.size < 0.5 * (b - a):
        return None
    running_max = np.maximum.accumulate(seg)
    return float(np.max(running_max - seg))


def flat_runs(level: np.ndarray, typical: float, belts_breathing: np.ndarray | None,
              spo2_grid: np.ndarray | None,
              moving: np.ndarray | None = None) -> list[tuple[int, int, str]]:
    """Flat stretches (second indices, half-open) and their reason; see module docstring.

    Candidate stretches are those below the nearly-flat level; a body movement of up to
    20 s inside one (it shakes the tubing) does not split it.
    """
    out: list[tuple[int, int, str]] = []
    if typical <= 0:
        return out
    lead = FLAT_WINDOW_S // 2
    tail = FLAT_WINDOW_S - lead - 1
    n = len(level)
    lvl = np.where(np.isfinite(level), level, np.inf) / typical
    low = fill_short_false(lvl < NEARLY_FLAT_FRACTION, BLIP_S)
    if moving is not None:
        for a, b in runs(~low).tolist():
            if a > 0 and b < n and b - a <= MOVEMENT_BRIDGE_S + FLAT_WINDOW_S \
                    and moving[a:b].any():
                low[a:b] = True
    for a, b in runs(low).tolist():
        start, end = max(a - lead, 0), min(b + tail, n)
        if end - start < NEARLY_FLAT_MIN_S:
            continue
        very = lvl[a:b] < VERY_FLAT_FRACTION
        reason = CANNULA_OFF if np.median(lvl[a:b]) < VERY_FLAT_FRACTION else MOUTH_BREATHING
        if very.mean() >= 0.9 and end - start >= VERY_FLAT_MIN_S:
            out.append((start, end, CANNULA_OFF))
            continue
        breathing = None if belts_breathing is None else float(np.mean(belts_breathing[a:b]))
        drop = _spo2_drop(spo2_grid, a, b)
        if breathing is not None and breathing >= 0.8 and drop is not None \
                and drop < SPO2_STEADY_DROP:
            out.append((start, end, reason))
            continue
        # Neither test passed as a whole: keep only the long, very flat parts.
        for c, d in runs(very).tolist():
            s0, e0 = max(a + c - lead, 0), min(a + d + tail, n)
            if e0 - s0 >= VERY_FLAT_MIN_S:
                out.append((s0, e0, CANNULA_OFF))
    return sorted(out)


def condition_airflow(
    sig: Signal,
    *,
    is_pressure: bool,
    gaps: list[Interval],
    n_sec: int,
    belts_breathing: np.ndarray | None,
    spo2_grid: np.ndarray | None,
    path: str,
    moving: np.ndarray | None = None,
) -> ChannelResult:
    """Condition the airflow channel (``flow`` or ``thermal``); see the module docstring.

    Raises
    ------
    ChannelError
        The flow role holds no valid sample, or no breathing rhythm all night.
    """
    fs = sig.fs
    valid0 = finite_and(sig.mask, sig.data)
    if sig.role == "flow" and not valid0.any():
        raise ChannelError(path, f"airflow channel {sig.label!r} holds no valid data")
    x = fill_invalid(sig.data, valid0)
    with ThreadPoolExecutor(max_workers=1) as pool:
        cleaning = None
        if is_pressure:
            # x is this function's own copy: filtered in place. The root and low-pass
            # need nothing of the flat-line measures below, so a second thread runs them.
            detrended = band_limit(x, fs, 0.03, None, order=1, overwrite=True)
            cleaning = pool.submit(_root_low_pass, detrended, fs)
            unit = f"sqrt({sig.unit})" if sig.unit else "a.u."
        else:
            detrended = band_limit(x, fs, 0.1, 15.0, order=2, overwrite=True)
            unit = sig.unit
        level = rolling_std(detrended, valid0, fs, n_sec, FLAT_WINDOW_S)
        typical = typical_level(level)
        if sig.role == "flow" and (
            typical <= 0 or _band_fraction_of_valid(detrended, valid0, fs) < 0.3
        ):
            raise ChannelError(
                path,
                (
                    f"airflow channel {sig.label!r} is flat or noise only for the whole "
                    "recording (no breathing rhythm): cannula never connected?"
                ),
            )
        clean = detrended if cleaning is None else cleaning.result()
    gap_mask = mask_of(gaps, len(x), fs)
    exclusions = intervals(~valid0 & ~gap_mask, fs, NO_VALUE, sig.role)
    invalid = ~valid0
    flat = flat_runs(level, typical, belts_breathing, spo2_grid, moving)
    for a, b, reason in flat:
        exclusions.append(Interval(float(a), float(b), reason, sig.role))
    invalid |= mask_of([(float(a), float(b)) for a, b, _ in flat], len(x), fs)
    if np.may_share_memory(clean, sig.data):
        clean = clean.copy()
    np.copyto(clean, np.nan, where=invalid)  # a new array of this function's: in place
    out = sig.replace(
        data=clean,
        valid=~invalid,
        unit=unit,
        prefilter=("HP 0.03 Hz, sqrt, LP 15 Hz" if is_pressure else "HP 0.1 Hz, LP 15 Hz"),
    )
    return ChannelResult(out, sorted(exclusions, key=lambda i: i.start_s), level, typical)
