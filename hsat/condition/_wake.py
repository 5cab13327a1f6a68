"""Lights-off/on and the wake judgement for the monitoring time.

The AASM HSAT rules take periods judged awake out of the monitoring time and allow
judging wake from body position, movement (actigraphy), the respiratory pattern or the
patient's diary (standards.md §1.6, from memory). hsat judges wake like this:

1. **lights**: time before the lights-off and after the lights-on annotation is out of
   the recording time (no annotation: the recording's start / end);
2. **upright**: the decoded body position is upright for >= 30 s (people sleep lying
   down; body-position sensor, AASM HSAT, standards.md §1.6; common practice);
3. **signs of wake** in each 30-s epoch (each against the night's own median between
   lights-off and lights-on, which is a sleeping level when the patient slept for more
   than half of that time):

   - *movement*: a movement burst on a belt or the activity channel, or raised
     restlessness on the activity channel (actigraphy, AASM HSAT, standards.md §1.6);
   - *fast breathing*: breaths per minute > 1.10x the night's median; breathing awake is
     faster and less regular than in NREM sleep (respiratory pattern, AASM HSAT,
     standards.md §1.6; the size of the rise is common practice);
   - *raised pulse*: the epoch's median pulse rate >= 5 bpm above the night's median;
     the heart rate falls from wake into NREM sleep (common practice, size from memory),
     and the AASM rules for PAT-based HSAT estimate sleep from pulse rate with
     actigraphy (standards.md §1.6, from memory). A raised pulse alone never starts a
     wake period (a post-event surge or REM raises it too); it only keeps one going
     (item 6).

   An epoch **looks awake** when it shows at least two of these three signs. 2 min or
   more of consecutive such epochs, holding at least one movement, are **sustained
   signs of wake**. REM sleep can show the other two (faster, irregular breathing and
   a higher pulse, more so after events) but comes with muscle atonia, hence without
   body movement; irregular breathing is no sign at all for the same reason (common
   practice);
4. **start and end of the night**: from lights-off until the first 4-minute stretch of
   quiet epochs, and from the last such stretch until lights-on. An epoch is restless
   when it holds a movement or lies in sustained signs of wake; on a recording with no
   valid pulse rate, also when breathing is both fast (> 1.15x the median) and
   irregular (breath-interval coefficient of variation > 0.2 over 2 min) (common
   practice: sleep onset is the start of sustained quiet);
5. **awake in mid-night**: sustained signs of wake between sleep onset and sleep end;
6. **around a wake period**: the epochs next to any period judged awake above that
   still look awake, keep a raised pulse or move for most of the epoch join it, epoch by
   epoch (e.g. lying awake before getting up and after lying down again): the pulse
   falls and movement stops on falling asleep, and wake does not start or end with the
   posture (common practice). An epoch belongs to the state filling most of it, as in
   the AASM epoch rule for sleep staging (from memory); the median pulse already does;
7. periods the user excluded (e.g. from the patient's diary) are exclusions, not wake.

Wake lying still, breathing calmly with a resting pulse, shows none of these signs: no
HSAT signal reveals it, which is why the REI (per hour of monitoring time) can
underestimate the AHI (standards.md §8).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal as sps

from hsat.condition._common import (
    drop_short_true,
    fill_invalid,
    intervals,
    rolling_std,
    runs,
)
from hsat.recording import Interval, Signal

EPOCH_S = 30
QUIET_EPOCHS = 8  # 4 min of quiet epochs marks sleep onset
UPRIGHT_MIN_S = 30
FAST_FACTOR = 1.15  # with irregular breathing, at the edges of the night
IRREGULAR_CV = 0.20
AWAKE_FAST_FACTOR = 1.10  # one sign of three
PULSE_RISE_BPM = 5.0
AWAKE_SIGNS_NEEDED = 2
SUSTAINED_EPOCHS = 4  # 2 min
ACTIVITY_WINDOW_S = 10
RESTLESS_ACTIVITY_FACTOR = 1.4

HOW_WAKE_IS_JUDGED = (
    "time before lights-off / after lights-on (annotations, else recording start/end); "
    "upright body position for >= 30 s; per 30-s epoch, signs of wake: movement (belts, "
    "activity channel), breathing > 1.10x and pulse >= 5 bpm above the night's median; "
    ">= 2 min of epochs with two of those signs, holding a movement, is wake; at the "
    "start and end of the night, restless time (movement or such wake; without a pulse "
    "channel also fast irregular breathing) until the first / after the last 4 min of "
    "quiet; and epochs next to a wake period that still show wake signs or a raised "
    "pulse join it"
)

UPRIGHT = "judged awake: upright"
AT_START = "judged awake: restless at the start of the night"
AT_END = "judged awake: restless at the end of the night"
MIDNIGHT = "judged awake: signs of wake in mid-night"
ADJOINING = "judged awake: signs of wake next to a wake period"


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


def pulse_epochs(pulse: Signal | None, n_epochs: int) -> np.ndarray:
    """Per 30-s epoch: the median pulse rate (bpm); NaN with under half of it valid."""
    out = np.full(n_epochs, np.nan)
    if pulse is None or pulse.fs <= 0 or len(pulse.data) == 0:
        return out
    valid = pulse.mask & np.isfinite(pulse.data)
    # one reading per second is plenty for a 30-s median
    idx = (np.arange(n_epochs * EPOCH_S) * pulse.fs).astype(np.int64)
    inside = idx < len(pulse.data)
    idx = np.minimum(idx, len(pulse.data) - 1)
    x = np.where(valid[idx] & inside, pulse.data[idx], np.nan).reshape(n_epochs, EPOCH_S)
    enough = np.isfinite(x).sum(axis=1) >= EPOCH_S // 2
    if enough.any():
        out[enough] = np.nanmedian(x[enough], axis=1)
    return out


def _per_epoch(seconds: np.ndarray, n_epochs: int, share: float = 0.0) -> np.ndarray:
    """Per epoch: more than ``share`` of its seconds are True (0: any)."""
    pad = n_epochs * EPOCH_S - len(seconds)
    s = np.concatenate([seconds, np.zeros(max(pad, 0), dtype=bool)])[: n_epochs * EPOCH_S]
    return s.reshape(n_epochs, EPOCH_S).sum(axis=1) > share * EPOCH_S


def _above(x: np.ndarray, window: tuple[int, int], *, factor: float = 1.0,
           rise: float = 0.0) -> np.ndarray:
    """``x > factor * median + rise`` per epoch, the median taken over ``window``."""
    a, b = window
    part = x[a:b]
    if not np.isfinite(part).any():
        return np.zeros(len(x), dtype=bool)
    ref = float(np.nanmedian(part))
    return np.nan_to_num(x, nan=-np.inf) > factor * ref + rise


def _sign_epochs(
    moving: np.ndarray, rate: np.ndarray, cv: np.ndarray, pulse_bpm: np.ndarray,
    n_epochs: int, window: tuple[int, int],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(restless, sustained, still awake) per epoch; module docstring, items 3, 4, 6."""
    a, b = window
    moved = _per_epoch(moving, n_epochs)
    mostly_moving = _per_epoch(moving, n_epochs, share=0.5)
    fast = _above(rate, window, factor=AWAKE_FAST_FACTOR)
    raised = _above(pulse_bpm, window, rise=PULSE_RISE_BPM - 1e-9)
    signs = moved.astype(int) + fast + raised
    inside = np.zeros(n_epochs, dtype=bool)
    inside[a:b] = True
    awake = (signs >= AWAKE_SIGNS_NEEDED) & inside
    sustained = _with_any(drop_short_true(awake, SUSTAINED_EPOCHS), moved)
    restless = moved | sustained
    if not np.isfinite(pulse_bpm[a:b]).any():  # no pulse: breathing stands in for it
        very_fast = _above(rate, window, factor=FAST_FACTOR)
        restless |= very_fast & (np.nan_to_num(cv, nan=0.0) > IRREGULAR_CV)
    restless &= inside
    still_awake = (awake | mostly_moving | raised) & inside
    return restless, sustained, still_awake


def _with_any(mask: np.ndarray, needed: np.ndarray) -> np.ndarray:
    """The runs of ``mask`` that hold at least one ``needed`` epoch."""
    out = np.zeros_like(mask)
    for a, b in runs(mask).tolist():
        if needed[a:b].any():
            out[a:b] = True
    return out


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


def _adjoining(awake: np.ndarray, seed: np.ndarray) -> np.ndarray:
    """Epochs of ``awake`` connected (through ``awake`` epochs) to a ``seed`` epoch."""
    return _with_any(awake | seed, seed) & awake & ~seed


def _epoch_spans(mask: np.ndarray, reason: str, lo_s: float, hi_s: float) -> list[Interval]:
    out = []
    for a, b in runs(mask).tolist():
        start, end = max(a * EPOCH_S, lo_s), min(b * EPOCH_S, hi_s)
        if end > start:
            out.append(Interval(float(start), float(end), reason))
    return out


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
    pulse: Signal | None = None,
) -> WakeResult:
    """Lights window, lights exclusions and wake periods (see the module docstring).

    ``pulse`` is the conditioned pulse-rate channel; without it the raised-pulse sign
    is never present.
    """
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

    n_epochs = int(np.ceil(n_sec / EPOCH_S))
    wake: list[Interval] = []
    up_epochs = np.zeros(n_epochs, dtype=bool)
    if upright is not None:
        up = drop_short_true(upright, UPRIGHT_MIN_S)
        up[: int(off)] = False
        up[int(np.ceil(on)) :] = False
        wake += intervals(up, 1.0, UPRIGHT)
        up_epochs = _per_epoch(up, n_epochs)
    a, b = int(off // EPOCH_S), int(np.ceil(on / EPOCH_S))
    restless, sustained, still_awake = _sign_epochs(
        moving, breath_rate, breath_cv, pulse_epochs(pulse, n_epochs), n_epochs, (a, b)
    )
    onset, end = _edge_wake(restless, a, b)
    edges = np.zeros(n_epochs, dtype=bool)
    if onset > a:
        wake.append(Interval(off, min(onset * EPOCH_S, on), AT_START))
        edges[a:onset] = True
    if end < b and end * EPOCH_S < on:
        wake.append(Interval(max(end * EPOCH_S, off), on, AT_END))
        edges[end:b] = True
    midnight = sustained & ~edges
    wake += _epoch_spans(midnight, MIDNIGHT, off, on)
    beside = _adjoining(still_awake, up_epochs | edges | midnight)
    wake += _epoch_spans(beside, ADJOINING, off, on)
    return WakeResult(off, on, lights, _merge(wake), notes)


def _merge(spans: list[Interval]) -> list[Interval]:
    """Sorted wake periods; overlapping ones joined, keeping the first reason."""
    out: list[Interval] = []
    for s in sorted(spans, key=lambda i: i.start_s):
        if out and s.start_s <= out[-1].end_s:
            last = out[-1]
            if s.end_s > last.end_s:
                reason = last.reason if s.reason in last.reason else f"{last.reason}; {s.reason}"
                out[-1] = Interval(last.start_s, s.end_s, reason, last.role)
        else:
            out.append(s)
    return out
