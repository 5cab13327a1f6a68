"""The breath timeline: one row per breath, and its flow and effort waveforms.

Each breath has an onset, a period, inspiratory and expiratory fractions of the period
(the rest is the end-expiratory pause), a peak inspiratory flow, an effort (belt) volume,
a flattening of the inspiratory flow (flow limitation), a phase shift of the thoracic
belt (thoraco-abdominal paradox) and a snore intensity. Waveforms are evaluated
analytically at any sample times, so every channel is built at its native rate.

Breath shape (common practice, not from a source): inspiration is a half-sine raised to
``p = 1 - 0.75 * flattening`` (a flatter top when flow-limited); expiration is the
skewed pulse ``27/4 x (1-x)^2`` (peaks early, decays slowly); its amplitude is set so
that expired volume equals inspired volume. The effort volume rises as ``(1-cos)/2``
in inspiration and falls as the integral of the expiratory pulse.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.signal import lfilter
from scipy.special import gamma

from hsat.synth._events import Plan, PlannedEvent
from hsat.synth._schedule import Schedule
from hsat.synth._spans import Pair, mask
from hsat.synth._spec import NightSpec

_EXP_AREA = 27.0 / 48.0  # integral of 27/4 x (1-x)^2 over [0, 1]


@dataclass(frozen=True)
class BreathTable:
    onset: np.ndarray
    period: np.ndarray
    ti: np.ndarray
    te: np.ndarray
    flow_amp: np.ndarray    # peak inspiratory flow, L/s
    effort_vol: np.ndarray  # belt volume excursion, L
    flatten: np.ndarray
    thorax_shift: np.ndarray
    snore: np.ndarray
    mean_period_s: float
    base_flow_l_s: float

    def __len__(self) -> int:
        return len(self.onset)


def _ar1(rng: np.random.Generator, n: int, phi: float = 0.5) -> np.ndarray:
    white = rng.standard_normal(n)
    return lfilter([np.sqrt(1 - phi * phi)], [1.0, -phi], white)


class _Builder:
    """Collects breaths piece by piece (a loop over pieces and events, not samples)."""

    def __init__(self, spec: NightSpec, rng: np.random.Generator, sched: Schedule) -> None:
        self.spec, self.rng, self.sched = spec, rng, sched
        self.period0 = 60.0 / float(rng.uniform(*spec.breaths_per_min))
        self.flow0 = float(rng.uniform(*spec.tidal_flow_l_s))
        self.rows: list[np.ndarray] = []
        # Slow drift of tidal amplitude over the night (log-normal, ~10 min scale).
        n_knots = int(sched.duration_s // 600) + 3
        self.knot_t = np.arange(n_knots) * 600.0
        self.knot_v = np.exp(0.10 * _ar1(rng, n_knots, 0.6))
        self.snore_knots = rng.uniform(0, 1, n_knots * 10)
        self.wake = [(w.start_s, w.end_s) for w in sched.wake]
        self.rem = [(r.start_s, r.end_s) for r in sched.rem]

    def level(self, t: np.ndarray | float) -> np.ndarray:
        return np.interp(t, self.knot_t, self.knot_v) * self.flow0

    def _add(self, onset: np.ndarray, period: np.ndarray, ti: np.ndarray, te: np.ndarray,
             flow: np.ndarray, effort: np.ndarray, flatten: np.ndarray, shift: np.ndarray,
             snore: np.ndarray) -> None:
        self.rows.append(np.vstack([onset, period, ti, te, flow, effort, flatten, shift,
                                    snore]))

    def effort_for(self, flow: np.ndarray, period: np.ndarray, ti: np.ndarray) -> np.ndarray:
        """Belt volume matching a normal breath of this flow (half-sine volume)."""
        return flow * period * ti * (2.0 / np.pi)

    def _periods(self, length: float, mean: float, cv: float) -> np.ndarray:
        if length < 0.6 * mean:
            return np.array([length])
        n = int(length / mean * 1.6) + 4
        z = _ar1(self.rng, n)
        per = np.clip(mean * np.exp(cv * z - cv * cv / 2), 0.45 * mean, 2.5 * mean)
        cs = np.cumsum(per)
        k = int(np.searchsorted(cs, length))
        per = per[: k + 1]
        return per * (length / per.sum())

    def normal(self, a: float, b: float, state: str, recovery: int = 0,
               recovery_snore: bool = False, envelope: bool = False) -> None:
        """Fill [a, b) with spontaneous breaths of one state (wake, rem, nrem)."""
        spec, rng = self.spec, self.rng
        if b - a <= 0.05:
            return
        # (mean period, period CV, amplitude CV, amplitude gain) by state
        if state == "wake":
            mean, pcv, acv, gain = self.period0 * 0.8, 0.25, 0.30, 1.15
        elif state == "rem":
            mean, pcv, acv, gain = (self.period0 * 0.95, spec.rem_period_cv,
                                    spec.rem_amplitude_cv, 0.9)
        else:
            mean, pcv, acv, gain = (self.period0, spec.breath_period_cv,
                                    spec.breath_amplitude_cv, 1.0)
        per = self._periods(b - a, mean, pcv)
        n = len(per)
        onset = a + np.concatenate([[0.0], np.cumsum(per)[:-1]])
        if n == 1 and per[0] < 1.2:  # too short for a breath: a pause
            z = np.zeros(1)
            self._add(onset, per, z + 0.4, z + 0.45, z, z, z, z, z)
            return
        amp = self.level(onset) * gain * np.exp(acv * _ar1(rng, n, 0.3) - acv * acv / 2)
        ti = rng.uniform(0.36, 0.44, n) if state != "wake" else rng.uniform(0.38, 0.46, n)
        te = rng.uniform(0.40, 0.48, n) if state != "wake" else rng.uniform(0.45, 0.50, n)
        if envelope:  # Cheyne-Stokes crescendo-decrescendo between central events
            x = (onset + per / 2 - a) / (b - a)
            amp = amp * (0.35 + 1.5 * np.sin(np.pi * x))
        if recovery:
            k = min(recovery, n)
            amp[:k] *= rng.uniform(1.6, 2.4, k)
        flatten = np.zeros(n)
        effort = self.effort_for(amp, per, ti)
        snore = np.zeros(n)
        if state != "wake" and not envelope:
            idx = np.clip((onset / 60).astype(int), 0, len(self.snore_knots) - 1)
            snore = np.where(self.snore_knots[idx] > 1 - self.spec.snore_level,
                             rng.uniform(0.3, 1.0, n), 0.0)
        if recovery and recovery_snore:
            snore[: min(recovery, n)] = rng.uniform(0.6, 1.0, min(recovery, n))
        self._add(onset, per, ti, te, amp, effort, flatten, np.zeros(n), snore)

    def silent(self, a: float, b: float) -> None:
        z = np.zeros(1)
        self._add(np.array([a]), np.array([b - a]), z + 0.4, z + 0.45, z, z, z, z, z)

    def event(self, ev: PlannedEvent) -> None:
        rng = self.rng
        a, b = ev.onset_s, ev.end_s
        state = "rem" if mask(np.array([a]), self.rem)[0] else "nrem"
        base = float(self.level(a)) * (0.9 if state == "rem" else 1.0)
        if ev.event == "central_apnea":
            self.silent(a, b)
            return
        if ev.event == "mixed_apnea":
            self.silent(a, a + ev.central_part_s)
            a = a + ev.central_part_s
        per = self._periods(b - a, self.period0 * 0.95, 0.05)
        n = len(per)
        onset = a + np.concatenate([[0.0], np.cumsum(per)[:-1]])
        ti = rng.uniform(0.38, 0.46, n)
        te = rng.uniform(0.40, 0.46, n)
        normal_effort = self.effort_for(np.full(n, base), per, ti)
        if ev.event in ("obstructive_apnea", "mixed_apnea"):
            flow = base * rng.uniform(0.0, 1.0 - ev.flow_reduction + 1e-9, n)
            effort = normal_effort * np.linspace(0.8, 1.4, n)
            shift = rng.uniform(0.35, 0.5, n)
            flatten = np.ones(n)
            snore = np.zeros(n)
        elif ev.subtype == "central":
            keep = (1 - ev.flow_reduction) * rng.uniform(0.94, 1.06, n)
            flow = base * keep
            effort = normal_effort * keep
            shift, flatten, snore = np.zeros(n), np.zeros(n), np.zeros(n)
        else:  # obstructive hypopnea: flow-limited, often snoring, sometimes paradox
            flow = base * (1 - ev.flow_reduction) * rng.uniform(0.94, 1.06, n)
            effort = normal_effort * rng.uniform(0.9, 1.15, n)
            shift = np.full(n, rng.uniform(0.12, 0.3) if rng.random() < 0.5 else 0.02)
            flatten = rng.uniform(0.6, 1.0, n)
            snore = rng.uniform(0.5, 1.0, n) if ev.snoring else np.zeros(n)
        self._add(onset, per, ti, te, flow, effort, flatten, shift, snore)

    def sigh(self, a: float, b: float) -> None:
        rng = self.rng
        ti = np.array([0.45])
        per = np.array([b - a])
        flow = np.array([float(self.level(a)) * rng.uniform(1.5, 1.9)])
        self._add(np.array([a]), per, ti, np.array([0.45]), flow,
                  self.effort_for(flow, per, ti), np.zeros(1), np.zeros(1), np.zeros(1))

    def state_cuts(self, a: float, b: float) -> list[tuple[float, float, str]]:
        """[a, b) split where wake/REM/NREM changes."""
        cuts = sorted({a, b, *[x for p in self.wake + self.rem for x in p if a < x < b]})
        out = []
        for lo, hi in zip(cuts[:-1], cuts[1:], strict=True):
            mid = np.array([(lo + hi) / 2])
            state = ("wake" if mask(mid, self.wake)[0]
                     else "rem" if mask(mid, self.rem)[0] else "nrem")
            out.append((lo, hi, state))
        return out


def build_breaths(spec: NightSpec, rng: np.random.Generator, sched: Schedule,
                  plan: Plan) -> BreathTable:
    """Every breath of the night, events and sighs included, in time order."""
    bld = _Builder(spec, rng, sched)
    pieces: list[tuple[float, float, str, PlannedEvent | None]] = []
    pieces += [(e.onset_s, e.end_s, "event", e) for e in plan.events]
    pieces += [(a, b, "sigh", None) for a, b in plan.sighs]
    pieces.sort(key=lambda p: p[0])
    t = 0.0
    prev: PlannedEvent | None = None
    for a, b, kind, ev in pieces:
        _fill(bld, t, a, prev, ev)
        if kind == "event" and ev is not None:
            bld.event(ev)
            prev = ev
        else:
            bld.sigh(a, b)
            prev = None
        t = b
    _fill(bld, t, sched.duration_s, prev, None)
    rows = np.hstack(bld.rows)
    order = np.argsort(rows[0], kind="stable")
    rows = rows[:, order]
    return BreathTable(*rows, mean_period_s=bld.period0, base_flow_l_s=bld.flow0)


def _fill(bld: _Builder, a: float, b: float, prev: PlannedEvent | None,
          nxt: PlannedEvent | None) -> None:
    """Spontaneous breathing between two pieces, with recovery breaths after an event."""
    csb = (prev is not None and nxt is not None and prev.context == "csb"
           and nxt.context == "csb")
    recovery = prev.recovery_breaths if prev is not None and not csb else 0
    rec_snore = (prev is not None and prev.subtype != "central"
                 and prev.event in ("obstructive_apnea", "mixed_apnea", "hypopnea"))
    first = True
    for lo, hi, state in bld.state_cuts(a, b):
        bld.normal(lo, hi, state, recovery if first else 0, rec_snore, envelope=csb)
        first = False


def _volume_shape(u: np.ndarray, ti: np.ndarray, te: np.ndarray) -> np.ndarray:
    """Normalised breath volume (0 at end-expiration, 1 at end-inspiration)."""
    xi = np.clip(u / ti, 0.0, 1.0)
    xe = np.clip((u - ti) / te, 0.0, 1.0)
    rising = 0.5 * (1.0 - np.cos(np.pi * xi))
    fexp = (xe**2 / 2 - 2 * xe**3 / 3 + xe**4 / 4) * 12.0
    return np.where(u < ti, rising, np.where(u < ti + te, 1.0 - fexp, 0.0))


def _locate(table: BreathTable, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    k = np.clip(np.searchsorted(table.onset, t, side="right") - 1, 0, len(table) - 1)
    u = np.clip((t - table.onset[k]) / table.period[k], 0.0, 1.0 - 1e-12)
    return k, u


def flow_at(table: BreathTable, t: np.ndarray) -> np.ndarray:
    """Oronasal airflow (L/s, inspiration positive) at times ``t``."""
    k, u = _locate(table, t)
    ti, te = table.ti[k], table.te[k]
    p_breath = 1.0 - 0.75 * table.flatten
    area_insp = gamma((p_breath + 1) / 2) / (np.sqrt(np.pi) * gamma(p_breath / 2 + 1))
    exp_amp = table.flow_amp * table.ti * area_insp / (table.te * _EXP_AREA)
    out = np.zeros(len(t))
    ii = np.flatnonzero(u < ti)
    shape = np.sin(np.pi * (u[ii] / ti[ii]))
    flat = np.flatnonzero(p_breath[k[ii]] < 1.0)  # only flow-limited breaths need the power
    shape[flat] = shape[flat] ** p_breath[k[ii[flat]]]
    out[ii] = table.flow_amp[k[ii]] * shape
    ie = np.flatnonzero((u >= ti) & (u < ti + te))
    xe = (u[ie] - ti[ie]) / te[ie]
    out[ie] = -exp_amp[k[ie]] * (27.0 / 4.0) * xe * (1 - xe) ** 2
    return out


def effort_at(table: BreathTable, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(thoracic, abdominal) effort volumes (L) at times ``t``; thorax phase-shifted."""
    k, u = _locate(table, t)
    ti, te, vol = table.ti[k], table.te[k], table.effort_vol[k]
    abdomen = vol * _volume_shape(u, ti, te)
    thorax = vol * _volume_shape((u + table.thorax_shift[k]) % 1.0, ti, te)
    return thorax, abdomen


def snore_at(table: BreathTable, t: np.ndarray) -> np.ndarray:
    """Snore intensity envelope (0-1): on during the inspiration of snoring breaths."""
    k, u = _locate(table, t)
    on = np.flatnonzero((table.snore[k] > 0) & (u < table.ti[k]))
    out = np.zeros(len(t))
    kk = k[on]
    out[on] = table.snore[kk] * np.sqrt(np.sin(np.pi * (u[on] / table.ti[kk])))
    return out


def breaths_in(table: BreathTable, pairs: list[Pair]) -> np.ndarray:
    """Indices of breaths whose onset lies in any of the spans."""
    return np.flatnonzero(mask(table.onset, pairs))
