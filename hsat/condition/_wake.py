"""Lights-off/on and the wake judgement for the monitoring time.

The AASM HSAT rules take periods judged awake out of the monitoring time and allow
judging wake from body position, movement (actigraphy), the respiratory pattern or the
patient's diary (standards.md §1.6, from memory). hsat judges wake like this:

1. **lights**: time before the lights-off and after the lights-on annotation is out of
   the recording time (no annotation: the recording's start / end);
2. **upright**: the decoded body position is upright for >= 30 s (people sleep lying
   down; common practice);
3. **start and end of the night**: from lights-off until the first 4-minute stretch of
   quiet breathing, and from the last such stretch until lights-on, when that time is
   restless. A 30-s epoch is restless when it holds a movement burst (broadband motion
   on a belt, or a burst or raised restlessness on the activity channel) or when breathing
   is both fast (rate > 1.15x the night's median) and irregular (breath-interval
   coefficient of variation > 0.2 over 2 min); wakeful breathing is faster and more
   variable than NREM sleep breathing (common practice). Only the edges of the night
   are judged this way: irregular REM breathing in mid-night is not wake;
4. periods the user excluded (e.g. from the patient's diary) are exclusions, not wake.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as sps

from hsat.condition._common import drop_short_true, fill_invalid, intervals, rolling_std
from hsat.recording import Interval, Signal

EPOCH_S = 30
QUIET_EPOCHS = 8  # 4 min of quiet breathing marks sleep onset
UPRIGHT_MIN_S = 30
FAST_FACTOR = 1.15
IRREGULAR_CV = 0.20
ACTIVITY_WINDOW_S = 10
RESTLESS_ACTIVITY_FACTOR = 1.4

HOW_WAKE_IS_JUDGED = (
    "time before lights-off / after lights-on (annotations, else recording start/end); "
    "upright body position for >= 30 s; at the start and end of the night, restless time "
    "(movement bursts on the belts or activity channel, or fast irregular breathing) until "
    "the first / after the last 4 min of quiet breathing"
)


@dataclass(frozen=True)
class WakeResult:
    lights_off_s: float
    lights_on_s: float
    lights_exclusions: list[Interval]
    wake: list[Interval]
    notes: list[str]


def activity_movement(sig: Signal, n_sec: int) -> np.ndarray:
    """Per second: the activity channel shows movement or raised restlessness.

    A movement burst: the 10-s rolling std above its night-long median plus 6 robust
    deviations (MAD x 1.4826; common practice for an outlier rule). Raised restlessness:
    the 30-s rolling std above 1.4x its night-long median, since awake people fidget more
    than sleeping ones (the premise of actigraphic sleep/wake scoring, common practice).
    """
    valid = sig.mask & np.isfinite(sig.data)
    filled = fill_invalid(sig.data, valid)
    burst = rolling_std(filled, valid, sig.fs, n_sec, ACTIVITY_WINDOW_S)
    calm = rolling_std(filled, valid, sig.fs, n_sec, EPOCH_S)
    moving = np.zeros(n_sec, dtype=bool)
    if np.isfinite(burst).any():
        med = float(np.nanmedian(burst))
        mad = float(np.nanmedian(np.abs(burst - med))) * 1.4826
        threshold = med + 6 * max(mad, 1e-6 * max(abs(med), 1.0))
        moving |= np.nan_to_num(burst, nan=0.0) > threshold
    if np.isfinite(calm).any():
        ref = float(np.nanmedian(calm))
        if ref > 0:
            moving |= np.nan_to_num(calm, nan=0.0) > RESTLESS_ACTIVITY_FACTOR * ref
    return moving


def breath_epochs(sig: Signal, typical: float, n_epochs: int) -> tuple[np.ndarray, np.ndarray]:
    """Per 30-s epoch: breaths per minute and the 2-min breath-interval CV.

    Breaths are the peaks of the conditioned effort (or flow) trace at least 1.5 s apart
    and with a prominence of half its typical standard deviation.
    """
    rate = np.full(n_epochs, np.nan)
    cv = np.full(n_epochs, np.nan)
    if typical <= 0:
        return rate, cv
    x = np.nan_to_num(sig.data, nan=0.0)
    peaks, _ = sps.find_peaks(x, distance=max(int(1.5 * sig.fs), 1), prominence=0.5 * typical)
    if peaks.size < 3:
        return rate, cv
    t = peaks / sig.fs
    gaps = np.diff(t)
    mid = t[1:]
    ok = gaps < 15  # longer pauses are apneas or invalid data, not breathing rhythm
    epoch = np.minimum((mid / EPOCH_S).astype(np.int64), n_epochs - 1)
    count = np.bincount(epoch[ok], minlength=n_epochs).astype(float)
    s1 = np.bincount(epoch[ok], weights=gaps[ok], minlength=n_epochs)
    s2 = np.bincount(epoch[ok], weights=gaps[ok] ** 2, minlength=n_epochs)
    kernel = np.ones(4)
    c4 = np.convolve(count, kernel, mode="same")
    m4 = np.convolve(s1, kernel, mode="same")
    q4 = np.convolve(s2, kernel, mode="same")
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = m4 / c4
        sd = np.sqrt(np.maximum(q4 / c4 - mean**2, 0.0))
        cv = np.where(c4 >= 6, sd / mean, np.nan)
        rate = np.where(c4 >= 6, 60.0 / mean, np.nan)
    return rate, cv


def _restless_epochs(
    moving: np.ndarray, rate: np.ndarray, cv: np.ndarray, n_epochs: int, window: tuple[int, int]
) -> np.ndarray:
    pad = n_epochs * EPOCH_S - len(moving)
    moved = np.concatenate([moving, np.zeros(max(pad, 0), dtype=bool)])[: n_epochs * EPOCH_S]
    restless = moved.reshape(n_epochs, EPOCH_S).any(axis=1)
    a, b = window
    ref = np.nanmedian(rate[a:b]) if np.isfinite(rate[a:b]).any() else np.nan
    if np.isfinite(ref):
        fast = np.nan_to_num(rate, nan=0.0) > FAST_FACTOR * ref
        irregular = np.nan_to_num(cv, nan=0.0) > IRREGULAR_CV
        restless |= fast & irregular
    return restless


def _edge_wake(restless: np.ndarray, a: int, b: int) -> tuple[int, int]:
    """Epoch index where sleep starts after ``a`` and where it ends before ``b``."""
    quiet = ~restless[a:b]
    n = len(quiet)
    if n < QUIET_EPOCHS:
        return a, b
    window = np.convolve(quiet.astype(int), np.ones(QUIET_EPOCHS, dtype=int), mode="valid")
    full = np.flatnonzero(window == QUIET_EPOCHS)
    if full.size == 0:
        return a, a
    onset = a + int(full[0])
    end = a + int(full[-1]) + QUIET_EPOCHS
    return onset, end


def judge_wake(
    *,
    duration_s: float,
    lights_off_s: float | None,
    lights_on_s: float | None,
    n_sec: int,
    upright: np.ndarray | None,
    moving: np.ndarray,
    breath_rate: np.ndarray,
    breath_cv: np.ndarray,
) -> WakeResult:
    """Lights window, lights exclusions and wake periods (see the module docstring)."""
    notes: list[str] = []
    off = 0.0 if lights_off_s is None else min(max(lights_off_s, 0.0), duration_s)
    on = duration_s if lights_on_s is None else min(max(lights_on_s, off), duration_s)
    if lights_off_s is None:
        notes.append("no lights-off annotation: the recording start is used")
    if lights_on_s is None:
        notes.append("no lights-on annotation: the recording end is used")
    lights: list[Interval] = []
    if off > 0:
        lights.append(Interval(0.0, off, "before lights off"))
    if on < duration_s:
        lights.append(Interval(on, duration_s, "after lights on"))

    wake: list[Interval] = []
    if upright is not None:
        up = drop_short_true(upright, UPRIGHT_MIN_S)
        up[: int(off)] = False
        up[int(np.ceil(on)) :] = False
        wake += intervals(up, 1.0, "judged awake: upright")
    n_epochs = int(np.ceil(n_sec / EPOCH_S))
    a, b = int(off // EPOCH_S), int(np.ceil(on / EPOCH_S))
    restless = _restless_epochs(moving, breath_rate, breath_cv, n_epochs, (a, b))
    onset, end = _edge_wake(restless, a, b)
    if onset > a:
        wake.append(
            Interval(
                off, min(onset * EPOCH_S, on), "judged awake: restless at the start of the night"
            )
        )
    if end < b and end * EPOCH_S < on:
        wake.append(
            Interval(max(end * EPOCH_S, off), on, "judged awake: restless at the end of the night")
        )
    return WakeResult(off, on, lights, _merge(wake), notes)


def _merge(spans: list[Interval]) -> list[Interval]:
    """Sorted wake periods; overlapping ones joined, keeping the first reason."""
    out: list[Interval] = []
    for s in sorted(spans, key=lambda i: i.start_s):
        if out and s.start_s <= out[-1].end_s:
            last = out[-1]
            if s.end_s > last.end_s:
                reason = last.reason if s.reason == last.reason else f"{last.reason}; {s.reason}"
                out[-1] = Interval(last.start_s, s.end_s, reason, last.role)
        else:
            out.append(s)
    return out
