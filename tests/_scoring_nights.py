"""Hand-made nights for the scoring tests: breaths, SpO2 and a Conditioned built directly.

Breath series are written breath by breath (onset, peak, end, amplitude), so a test
controls exactly what the event detectors see: an apnea of 9.5 s is a 9.5 s pause, a
31 % drop is a run of breaths at 0.69 of the surrounding amplitude.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import numpy as np

from hsat.breaths import Breaths, BreathSeries
from hsat.recording import POSITION_CODES, Adequacy, Conditioned, Interval, Recording, Signal

#: (duration_s, amplitude, number_of_breaths); 0 breaths = a pause (no breathing).
Segment = tuple[float, float, int]
NORMAL_PERIOD_S = 4.0


def normal(duration_s: float, amplitude: float = 1.0) -> Segment:
    """Regular breathing at one breath per 4 s."""
    return (duration_s, amplitude, int(round(duration_s / NORMAL_PERIOD_S)))


def pause(duration_s: float) -> Segment:
    return (duration_s, 0.0, 0)


def breath_series(role: str, segments: Sequence[Segment], t0_s: float = 0.0) -> BreathSeries:
    """Consecutive breaths; a pause ends the previous breath where the pause starts."""
    onsets, peaks, ends, amps = [], [], [], []
    t = t0_s
    for duration, amplitude, count in segments:
        if count == 0:
            t += duration
            continue
        period = duration / count
        for k in range(count):
            onsets.append(t + k * period)
            peaks.append(t + k * period + 0.4 * period)
            ends.append(t + (k + 1) * period)
            amps.append(amplitude)
        t += duration
    n = len(onsets)
    return BreathSeries(role, np.array(onsets), np.array(peaks), np.array(ends),
                        np.array(amps, dtype=float), np.ones(n, dtype=bool), 1)


def waveform(series: BreathSeries, duration_s: float, fs: float) -> np.ndarray:
    """A signal matching the breaths: one sine cycle per breath, peak-to-trough equal to
    the breath's amplitude, zero in pauses."""
    t = np.arange(int(round(duration_s * fs))) / fs
    if len(series) == 0:
        return np.zeros(len(t))
    k = np.clip(np.searchsorted(series.onset_s, t, side="right") - 1, 0, len(series) - 1)
    on, end, amp = series.onset_s[k], series.end_s[k], series.amplitude[k]
    inside = (t >= on) & (t < end)
    phase = (t - on) / np.maximum(end - on, 1e-9)
    return np.where(inside, 0.5 * amp * np.sin(2 * np.pi * phase), 0.0)


def spo2_trace(duration_s: float, baseline: float = 96.0,
               dips: Sequence[tuple[float, float]] = ()) -> np.ndarray:
    """1 Hz SpO2 at ``baseline`` with dips (nadir_time_s, depth_points): a 15 s linear
    fall to the nadir, held 2 s, and a 10 s linear recovery."""
    t = np.arange(int(duration_s), dtype=float)
    x = np.full(len(t), baseline)
    for nadir_s, depth in dips:
        fall = np.clip((t - (nadir_s - 15.0)) / 15.0, 0, 1)
        rise = np.clip(1.0 - (t - (nadir_s + 2.0)) / 10.0, 0, 1)
        shape = np.where(t <= nadir_s, fall, np.where(t <= nadir_s + 2.0, 1.0, rise))
        x = np.minimum(x, baseline - depth * shape)
    return x


def _signal(role: str, fs: float, data: np.ndarray, valid: np.ndarray | None = None,
            unit: str = "") -> Signal:
    return Signal(role=role, label=role, fs=fs, data=np.asarray(data, float), unit=unit,
                  valid=valid)


def make_night(
    duration_s: float,
    breaths: dict[str, Sequence[Segment]],
    spo2: np.ndarray | None = None,
    *,
    positions: np.ndarray | None = None,
    pulse: np.ndarray | None = None,
    analysed: np.ndarray | None = None,
    spo2_valid: np.ndarray | None = None,
    wake: Sequence[tuple[float, float]] = (),
    lights: tuple[float, float] | None = None,
) -> tuple[Conditioned, Breaths]:
    """A Conditioned and its Breaths built directly from hand-made parts.

    ``analysed`` is a 1 Hz monitoring-time mask (all True by default); each breath role
    gets a 25 Hz waveform matching its breaths (``waveform``); SpO2, pulse and position
    are 1 Hz.
    """
    n1 = int(duration_s)
    signals: dict[str, Signal] = {}
    series = {role: breath_series(role, segs) for role, segs in breaths.items()}
    for role, ser in series.items():
        signals[role] = _signal(role, 25.0, waveform(ser, duration_s, 25.0))
    if spo2 is None:
        spo2 = np.full(n1, 96.0)
    signals["spo2"] = _signal("spo2", 1.0, spo2, spo2_valid, "%")
    signals["pulse"] = _signal("pulse", 1.0, pulse if pulse is not None else np.full(n1, 60.0),
                               None, "bpm")
    if positions is None:
        positions = np.full(n1, POSITION_CODES["supine"], dtype=float)
    signals["position"] = _signal("position", 1.0, positions)
    rec = Recording(path="handmade.edf", start=datetime(2026, 3, 2, 22, 0, 0),
                    duration_s=float(duration_s), signals=signals, file_type="EDF+C",
                    equipment="hand-made", sha256="0" * 64)
    mask = np.ones(n1, dtype=bool) if analysed is None else np.asarray(analysed, bool)
    off, on = lights if lights is not None else (0.0, float(duration_s))
    hours = float(mask.sum()) / 3600.0
    adequacy = Adequacy(hours >= 4.0, () if hours >= 4.0 else ("less than 4 h",),
                        hours, hours, hours, 4.0)
    cond = Conditioned(
        recording=rec, signals=signals, exclusions=(),
        wake=tuple(Interval(a, b, "judged awake") for a, b in wake),
        lights_off_s=off, lights_on_s=on, mask_fs=1.0, analysis_mask=mask,
        monitoring_time_s=float(mask.sum()), adequacy=adequacy,
    )
    return cond, Breaths(series)
