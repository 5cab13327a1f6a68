"""Turn the physiology (breaths, effort, oximetry) into each kit's channels.

Sensor models (common practice, not from a single source):

* nasal pressure ~ gain * Q * |Q| of the nasal part of the flow (a cannula behaves
  roughly like a flow-squared transducer), with slow drift, noise, cardiogenic
  oscillation and snore vibration; flat near zero when the cannula is off, and nearly
  flat during mouth breathing (most of the flow goes through the mouth);
* thermal sensor: the oronasal flow through a first-order low-pass (0.35 s) with a
  0.15 s lag, then AC-coupled; it keeps breathing during mouth breathing;
* RIP belts: effort volume (thorax 40 %, abdomen 60 %) plus cardiogenic oscillation,
  AC-coupled at 0.05 Hz, then clipped to the channel's physical range.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import butter, lfilter, sosfilt

from hsat.recording import Signal
from hsat.synth._breaths import BreathTable, effort_at, flow_at, snore_at
from hsat.synth._events import Plan
from hsat.synth._kits import ChannelDef, KitDef
from hsat.synth._oximetry import MODEL_FS, Oximetry, pleth_at
from hsat.synth._schedule import Schedule
from hsat.synth._spans import Span, lookup, mask


def _times(ch: ChannelDef, duration_s: float) -> np.ndarray:
    return np.arange(int(round(duration_s * ch.fs))) / ch.fs


def _slow(rng: np.random.Generator, t: np.ndarray, step_s: float, sd: float) -> np.ndarray:
    """Slow, mean-reverting baseline drift (AR(1) knots every ``step_s``, interpolated)."""
    knots = np.arange(0, t[-1] + 2 * step_s, step_s)
    phi = 0.9
    walk = lfilter([np.sqrt(1 - phi * phi)], [1.0, -phi], rng.normal(0, sd, len(knots)))
    return np.interp(t, knots, walk)


def _cardiac_phase(ox: Oximetry, t: np.ndarray, fs: float) -> np.ndarray:
    hr = np.interp(t, ox.t, ox.pulse_bpm)
    return 2 * np.pi * np.cumsum(hr / 60.0) / fs


def _span_slices(spans: list[Span] | tuple[Span, ...], fs: float, n: int):
    for sp in spans:
        i0, i1 = max(int(sp.start_s * fs), 0), min(int(np.ceil(sp.end_s * fs)), n)
        if i1 > i0:
            yield sp, slice(i0, i1)


def _add_movement(rng: np.random.Generator, x: np.ndarray, fs: float,
                  moves: list[Span], scale: float) -> None:
    """Large irregular swings where the body moves (in place)."""
    for _, sl in _span_slices(moves, fs, len(x)):
        m = sl.stop - sl.start
        walk = np.cumsum(rng.normal(0, 1, m))
        walk = (walk - walk.mean()) / (np.abs(walk).max() + 1e-9)
        x[sl] += scale * (1.5 * walk + 0.3 * rng.normal(0, 1, m))


def _ac_couple(x: np.ndarray, fs: float, cutoff_hz: float) -> np.ndarray:
    b, a = butter(1, cutoff_hz / (fs / 2), btype="high")
    return lfilter(b, a, x - x[: int(fs * 30)].mean())


def _body_moves(sched: Schedule) -> list[Span]:
    return [m for m in sched.movements if m.kind != "belt artefact"]


def _nasal_pressure(rng, kit: KitDef, ch: ChannelDef, sched: Schedule, table: BreathTable,
                    ox: Oximetry) -> np.ndarray:
    t = _times(ch, sched.duration_s)
    q = flow_at(table, t) + 0.012 * np.sin(_cardiac_phase(ox, t, ch.fs))
    frac = np.ones_like(t)
    for _, sl in _span_slices([s for s in sched.invalid if s.detail == "mouth breathing"],
                               ch.fs, len(t)):
        frac[sl] = rng.uniform(0.15, 0.28)  # most of the flow goes through the mouth
    q_nasal = q * frac
    peak = kit.pressure_gain * table.base_flow_l_s ** 2
    p = kit.pressure_gain * q_nasal * np.abs(q_nasal)
    buzz_hz = min(0.4 * ch.fs, 42.0)
    vib = snore_at(table, t) * np.sin(2 * np.pi * buzz_hz * t + rng.uniform(0, 6))
    p += 0.25 * peak * vib * frac * rng.uniform(0.7, 1.3, len(t))
    p += _slow(rng, t, 20.0, 0.03 * peak) + rng.normal(0, 0.012 * peak, len(t))
    for _, sl in _span_slices([s for s in sched.invalid if s.detail == "cannula off"],
                               ch.fs, len(t)):
        p[sl] = rng.uniform(-0.03, 0.03) * peak + rng.normal(0, 0.008 * peak, sl.stop - sl.start)
    _add_movement(rng, p, ch.fs, _body_moves(sched), 1.5 * peak)
    return kit.inspiration_sign * p


def _thermal(rng, kit: KitDef, ch: ChannelDef, sched: Schedule, table: BreathTable,
             ox: Oximetry) -> np.ndarray:
    t = _times(ch, sched.duration_s)
    q = flow_at(table, np.clip(t - 0.15, 0, None))
    q += 0.006 * np.sin(_cardiac_phase(ox, t, ch.fs))
    alpha = 1.0 / (1.0 + 0.35 * ch.fs)
    lp = lfilter([alpha], [1.0, alpha - 1.0], q)
    x = kit.thermal_gain * lp + _slow(rng, t, 30.0, 0.03 * kit.thermal_gain * table.base_flow_l_s)
    x = _ac_couple(x, ch.fs, 0.05)
    x += rng.normal(0, 0.01 * kit.thermal_gain * table.base_flow_l_s, len(t))
    _add_movement(rng, x, ch.fs, _body_moves(sched), 1.2 * kit.thermal_gain * table.base_flow_l_s)
    return x


def _belts(rng, kit: KitDef, thorax_ch: ChannelDef, abdomen_ch: ChannelDef, sched: Schedule,
           table: BreathTable, ox: Oximetry) -> tuple[np.ndarray, np.ndarray]:
    t = _times(thorax_ch, sched.duration_s)
    vol_th, vol_ab = effort_at(table, t)
    # RIP belts are smooth: a 1.5 Hz low-pass removes the steps where the thoracic
    # phase shift changes from one breath to the next.
    smooth = butter(2, 1.5 / (thorax_ch.fs / 2), output="sos")
    vol_th, vol_ab = sosfilt(smooth, vol_th), sosfilt(smooth, vol_ab)
    cardiac = 0.005 * np.sin(_cardiac_phase(ox, t, thorax_ch.fs) + 0.6)
    tidal = table.base_flow_l_s * table.mean_period_s * 0.4 * 2 / np.pi
    out = []
    for role, vol, share, ch in (("thorax", vol_th, 0.4, thorax_ch),
                                 ("abdomen", vol_ab, 0.6, abdomen_ch)):
        x = share * vol + cardiac * share + _slow(rng, t, 40.0, 0.05 * tidal)
        gain = np.full(len(t), kit.belt_gain * float(rng.uniform(0.85, 1.15)))
        for sp, sl in _span_slices([p for p in sched.belt_periods if p.role == role],
                                   ch.fs, len(t)):
            gain[sl] *= rng.uniform(0.12, 0.2) if sp.kind == "weak belt" else rng.uniform(2.8, 3.6)
        x = _ac_couple(gain * x, ch.fs, 0.05)
        x += rng.normal(0, 0.01 * kit.belt_gain * tidal * share, len(t))
        amp = kit.belt_gain * tidal * share
        for _, sl in _span_slices([m for m in sched.movements if m.kind == "belt artefact"
                                   and m.role == role], ch.fs, len(t)):
            x[sl] += rng.choice([-1, 1]) * rng.uniform(1.5, 3.0) * amp
        _add_movement(rng, x, ch.fs, _body_moves(sched), 2.5 * amp)
        for _, sl in _span_slices([s for s in sched.invalid if s.role == role], ch.fs, len(t)):
            x[sl] = rng.uniform(-0.05, 0.05) * amp + rng.normal(0, 0.004 * amp, sl.stop - sl.start)
        out.append(x)
    return out[0], out[1]


def _from_model(values: np.ndarray, ch: ChannelDef, duration_s: float) -> np.ndarray:
    n = int(round(duration_s * ch.fs))
    idx = np.minimum((np.arange(n) * (MODEL_FS / ch.fs)).astype(np.int64), len(values) - 1)
    return values[idx]


def _snore(rng, kit: KitDef, ch: ChannelDef, sched: Schedule, table: BreathTable) -> np.ndarray:
    t = _times(ch, sched.duration_s)
    env = snore_at(table, t)
    f0 = float(rng.uniform(0.18, 0.24)) * ch.fs
    buzz = (np.sin(2 * np.pi * f0 * t) + 0.5 * np.sin(4 * np.pi * f0 * t + 0.7)
            + 0.6 * rng.normal(0, 1, len(t)))
    x = kit.snore_gain * env * buzz + rng.normal(0, 0.03 * kit.snore_gain, len(t))
    _add_movement(rng, x, ch.fs, _body_moves(sched), 0.8 * kit.snore_gain)
    return x


def _activity(rng, ch: ChannelDef, sched: Schedule) -> np.ndarray:
    t = _times(ch, sched.duration_s)
    x = 1000.0 + rng.normal(0, 4.0, len(t))
    x += 6.0 * mask(t, [(w.start_s, w.end_s) for w in sched.wake]) * rng.normal(0, 1, len(t))
    for _, sl in _span_slices(_body_moves(sched), ch.fs, len(t)):
        x[sl] += np.abs(rng.normal(0, 350, sl.stop - sl.start))
    return x


def render_channels(rng: np.random.Generator, kit: KitDef, sched: Schedule,
                    table: BreathTable, ox: Oximetry, plan: Plan) -> dict[str, Signal]:
    """Every channel of the kit as a ``Signal`` in the kit's written units, by label."""
    d = sched.duration_s
    data: dict[str, np.ndarray] = {}
    for ch in kit.channels:
        if ch.role == "flow":
            data[ch.role] = _nasal_pressure(rng, kit, ch, sched, table, ox)
        elif ch.role == "thermal":
            data[ch.role] = _thermal(rng, kit, ch, sched, table, ox)
        elif ch.role == "thorax":
            abd = kit.channel("abdomen")
            assert abd is not None and abd.fs == ch.fs
            data["thorax"], data["abdomen"] = _belts(rng, kit, ch, abd, sched, table, ox)
        elif ch.role == "spo2":
            x = _from_model(ox.spo2_pct, ch, d) * kit.spo2_scale
            x[_from_model(ox.probe_off, ch, d)] = kit.spo2_probe_off
            data[ch.role] = x
        elif ch.role == "pulse":
            x = _from_model(ox.pulse_bpm, ch, d)
            x[_from_model(ox.probe_off, ch, d)] = kit.pulse_probe_off
            data[ch.role] = x
        elif ch.role == "position":
            names = lookup(_times(ch, d), list(sched.positions), "upright")
            codes = np.array([kit.position_codes[str(p)] for p in names], dtype=float)
            data[ch.role] = codes
        elif ch.role == "snore":
            data[ch.role] = _snore(rng, kit, ch, sched, table)
        elif ch.role == "pleth":
            pleth = pleth_at(rng, ox, plan, ch.fs, int(round(d * ch.fs)))
            _add_movement(rng, pleth, ch.fs, _body_moves(sched), 700.0)
            data[ch.role] = pleth
        elif ch.role == "activity":
            data[ch.role] = _activity(rng, ch, sched)
    signals: dict[str, Signal] = {}
    for ch in kit.channels:
        lo, hi = ch.physical_range
        x = np.clip(data[ch.role], lo, hi)
        for gap in (s for s in sched.invalid if s.role == ""):
            i0, i1 = int(gap.start_s * ch.fs), int(gap.end_s * ch.fs)
            x[i0:i1] = np.nan
        signals[ch.label] = Signal(role=ch.role, label=ch.label, fs=float(ch.fs), data=x,
                                   unit=ch.unit, transducer=ch.transducer,
                                   prefilter=ch.prefilter)
    return signals

