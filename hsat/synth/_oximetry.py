"""SpO2, pulse rate and photoplethysmogram from a simple physiological model.

SpO2 (common practice, not from a single source): a baseline of 94-97 % with slow drift;
each event draws a desaturation that starts falling one circulatory delay after event
onset, reaches its nadir one delay after event end (so the fall lasts about as long as
the event) and recovers in 8-14 s. Overlapping desaturations combine by their maximum
drop, so back-to-back events make the familiar saw-tooth without running away. The
oximeter then averages over its window (AASM: averaging <= 3 s at 80 bpm is desirable,
standards.md section 1.2; the kits use 2-4 s) and reports whole or tenth percent.

Pulse rate rises 6-14 bpm a few seconds after each event ends and relaxes with a 10 s
time constant (event-related heart-rate response, common practice).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hsat.synth._events import Plan, PlannedEvent
from hsat.synth._schedule import Schedule
from hsat.synth._spans import mask

MODEL_FS = 4.0  # internal rate of the oximetry model, Hz


@dataclass(frozen=True)
class Oximetry:
    t: np.ndarray            # model times at MODEL_FS
    spo2_true: np.ndarray    # physiological SpO2 before the oximeter, %
    spo2_pct: np.ndarray     # what the oximeter reports, %, before probe-off coding
    pulse_bpm: np.ndarray
    probe_off: np.ndarray    # bool
    baseline_pct: float
    quantum: float           # reporting step of SpO2 (1 or 0.1 %)
    event_recovery_s: np.ndarray  # per planned event: its resaturation time


def _smoothstep(x: np.ndarray) -> np.ndarray:
    x = np.clip(x, 0.0, 1.0)
    return x * x * (3 - 2 * x)


def _drop_curve(t: np.ndarray, start: float, nadir: float, depth: float,
                recovery: float) -> np.ndarray:
    fall = _smoothstep((t - start) / max(nadir - start, 1.0))
    rise = _smoothstep((t - nadir) / recovery)
    return depth * np.where(t <= nadir, fall, 1.0 - rise)


def _moving_average(x: np.ndarray, n: int) -> np.ndarray:
    if n <= 1:
        return x
    kernel = np.ones(n) / n
    padded = np.concatenate([np.full(n - 1, x[0]), x])
    return np.convolve(padded, kernel, mode="valid")


def build_oximetry(rng: np.random.Generator, sched: Schedule, plan: Plan, *,
                   baseline_range: tuple[float, float], integer: bool,
                   averaging_s: float, pulse_range: tuple[float, float]) -> Oximetry:
    """SpO2 and pulse rate on the model grid, with desaturations and probe-off."""
    n = int(round(sched.duration_s * MODEL_FS))
    t = np.arange(n) / MODEL_FS
    base = float(rng.uniform(*baseline_range))
    knots_t = np.arange(0, sched.duration_s + 600, 300.0)
    if integer:
        base = float(np.round(base))
        # stays within +-0.15 of a whole percent so rounding never flips the baseline
        drift = np.interp(t, knots_t, rng.uniform(-0.12, 0.12, len(knots_t)))
    else:
        drift = np.interp(t, knots_t, rng.uniform(-0.25, 0.25, len(knots_t)))
        drift -= 0.3 * mask(t, [(r.start_s, r.end_s) for r in sched.rem])
    drop = np.zeros(n)
    hr_bump = np.zeros(n)
    recoveries = np.zeros(len(plan.events))
    for k, ev in enumerate(plan.events):
        start, nadir = ev.onset_s + ev.delay_s, ev.end_s + ev.delay_s
        rec = recoveries[k] = float(rng.uniform(8.0, 14.0))
        i0, i1 = int(start * MODEL_FS), min(int((nadir + rec + 2) * MODEL_FS), n)
        if i1 > i0:
            seg = slice(i0, i1)
            np.maximum(drop[seg], _drop_curve(t[seg], start, nadir, ev.desat_designed, rec),
                       out=drop[seg])
        # pulse: slight slowing during the event, a rise after it
        j0, j1 = int(ev.onset_s * MODEL_FS), min(int((ev.end_s + 60) * MODEL_FS), n)
        seg = slice(j0, j1)
        tt = t[seg]
        rise = 2.0 if ev.context == "post_sigh" else float(rng.uniform(6.0, 14.0))
        after = np.clip(tt - ev.end_s, 0, None)
        response = rise * (after / 4.0).clip(0, 1) * np.exp(-np.clip(after - 4, 0, None) / 10)
        hr_bump[seg] += np.where(tt < ev.end_s, -2.0, response)
    for d in plan.desats:
        i0, i1 = int(d.onset_s * MODEL_FS), min(int((d.nadir_s + d.recovery_s + 2) * MODEL_FS), n)
        seg = slice(i0, i1)
        np.maximum(drop[seg], _drop_curve(t[seg], d.onset_s, d.nadir_s, d.depth, d.recovery_s),
                   out=drop[seg])
    spo2_true = np.minimum(base + drift - drop, 100.0)
    measured = _moving_average(spo2_true + rng.normal(0, 0.08, n),
                               int(round(averaging_s * MODEL_FS)))
    quantum = 1.0 if integer else 0.1
    measured = np.clip(np.round(measured / quantum) * quantum, 50.0, 100.0)

    # Movement artefacts: implausibly fast dips that recover (not real desaturations).
    for mv in sched.movements:
        if mv.kind == "position change" and rng.random() < 0.5:
            i0, i1 = int(mv.start_s * MODEL_FS), int(mv.end_s * MODEL_FS)
            measured[i0:i1] = np.round(measured[i0:i1] - rng.uniform(6, 15))

    wake = mask(t, [(w.start_s, w.end_s) for w in sched.wake])
    rem = mask(t, [(r.start_s, r.end_s) for r in sched.rem])
    hr0 = float(rng.uniform(*pulse_range))
    hr = (hr0 + 8.0 * wake + 3.0 * rem
          + np.interp(t, knots_t, rng.normal(0, 1.5, len(knots_t))) + hr_bump)
    for mv in sched.movements:
        if mv.kind != "belt artefact":
            i0, i1 = int(mv.start_s * MODEL_FS), int((mv.end_s + 8) * MODEL_FS)
            hr[i0:i1] += 10.0
    hr = np.round(_moving_average(hr + rng.normal(0, 0.6, n), 8))
    probe_off = mask(t, sched.invalid_pairs(("spo2",)))
    return Oximetry(t, spo2_true, measured, hr, probe_off, base, quantum, recoveries)


def event_drop(ev: PlannedEvent, recovery_s: float, t: np.ndarray) -> np.ndarray:
    """The designed desaturation of one event at times ``t`` (SpO2 points)."""
    return _drop_curve(t, ev.onset_s + ev.delay_s, ev.end_s + ev.delay_s,
                       ev.desat_designed, recovery_s)


def pleth_at(rng: np.random.Generator, ox: Oximetry, plan: Plan, fs: float,
             n: int) -> np.ndarray:
    """A photoplethysmogram following the pulse rate; amplitude dips after events."""
    t = np.arange(n) / fs
    hr = np.interp(t, ox.t, ox.pulse_bpm)
    phase = 2 * np.pi * np.cumsum(hr / 60.0) / fs
    wave = np.sin(phase) + 0.35 * np.sin(2 * phase - 0.9) + 0.12 * np.sin(3 * phase - 1.8)
    amp = np.ones(n)
    for ev in plan.events:  # vasoconstriction after the event
        i0, i1 = int((ev.end_s + 2) * fs), min(int((ev.end_s + 25) * fs), n)
        if i1 > i0:
            x = (t[i0:i1] - ev.end_s - 2) / 23.0
            amp[i0:i1] *= 1 - 0.4 * np.sin(np.pi * x)
    wander = np.interp(t, ox.t[::40], rng.normal(0, 60, len(ox.t[::40])))
    out = 700 * amp * wave + wander + rng.normal(0, 6, n)
    off = np.interp(t, ox.t, ox.probe_off.astype(float)) > 0.5
    out[off] = rng.normal(0, 3, int(off.sum()))
    return out
