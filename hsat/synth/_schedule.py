"""The layout of a night: lights, wake and sleep, REM-like periods, body positions,
movements, and the episodes where a sensor's data is made invalid or hard to read.

Everything here is a list of spans; the breath, oximetry and sensor stages read it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hsat.synth._spans import Pair, Span, merge, place_disjoint, subtract, total
from hsat.synth._spec import NightSpec

LYING = ("supine", "left", "right", "prone")
#: roles whose invalid time is taken out of the monitoring time (flow and oximetry;
#: "" means the whole recording, e.g. an EDF+D gap)
MONITORING_ROLES = ("flow", "spo2", "")


@dataclass(frozen=True)
class Schedule:
    """The night's layout (all spans sorted by start)."""

    duration_s: float
    lights_off_s: float
    lights_on_s: float
    sleep_onset_s: float
    final_wake_s: float
    wake: tuple[Span, ...]
    rem: tuple[Span, ...]
    positions: tuple[Span, ...]     # detail = position name; covers the whole night
    movements: tuple[Span, ...]     # kind: position change / wake movement / belt artefact
    invalid: tuple[Span, ...]       # role + detail (= reason)
    belt_periods: tuple[Span, ...]  # kind weak belt / clipping belt, role thorax|abdomen
    csb: tuple[Span, ...]
    lights_annotated: bool

    def invalid_pairs(self, roles: tuple[str, ...]) -> list[Pair]:
        return [(s.start_s, s.end_s) for s in self.invalid if s.role in roles]

    def sleep_pairs(self) -> list[Pair]:
        return subtract([(self.sleep_onset_s, self.final_wake_s)],
                        [(w.start_s, w.end_s) for w in self.wake])

    def monitoring_pairs(self) -> list[Pair]:
        """Lights-off..lights-on minus wake minus invalid flow/oximetry (the REI's time)."""
        holes = [(w.start_s, w.end_s) for w in self.wake] + self.invalid_pairs(MONITORING_ROLES)
        return subtract([(self.lights_off_s, self.lights_on_s)], holes)

    def monitoring_time_s(self) -> float:
        return total(self.monitoring_pairs())


def _u(rng: np.random.Generator, r: tuple[float, float]) -> float:
    return float(rng.uniform(r[0], r[1]))


def _wake_spans(spec: NightSpec, rng: np.random.Generator, d: float) -> tuple[
        float, float, float, float, list[Pair]]:
    # Short nights (a nap-length test recording) get proportionally shorter wake.
    f = 60.0 * min(1.0, spec.duration_h / 5.0)
    lights_off = _u(rng, spec.lights_off_after_min) * f
    sleep_onset = lights_off + _u(rng, spec.sleep_latency_min) * f
    lights_on = d - _u(rng, spec.lights_on_before_end_min) * f
    final_wake = lights_on - _u(rng, spec.final_wake_min) * f
    if final_wake - sleep_onset < 600:
        raise ValueError("night too short for its wake periods: lengthen duration_h")
    waso: list[Pair] = []
    window = (sleep_onset + 1800, final_wake - 1200)
    if window[1] - window[0] > 1200:
        durs = [_u(rng, spec.waso_min) * 60 for _ in range(spec.waso_count)]
        waso = place_disjoint(rng, window, durs, [], margin_s=1800)
    wake = merge([(0.0, sleep_onset), (final_wake, d), *waso])
    return lights_off, lights_on, sleep_onset, final_wake, wake


def _rem_spans(spec: NightSpec, rng: np.random.Generator, sleep: list[Pair],
               sleep_onset: float, final_wake: float) -> list[Pair]:
    rem: list[Pair] = []
    t = sleep_onset + _u(rng, spec.rem_cycle_min) * 60
    lo, hi = spec.rem_duration_min
    while t < final_wake:
        frac = (t - sleep_onset) / max(final_wake - sleep_onset, 1.0)
        dur = (lo + (hi - lo) * min(frac * 1.3, 1.0)) * 60 * float(rng.uniform(0.8, 1.1))
        rem.append((t, min(t + dur, final_wake)))
        t += _u(rng, spec.rem_cycle_min) * 60
    return [p for p in _clip_to(rem, sleep) if p[1] - p[0] > 60]


def _clip_to(pairs: list[Pair], allowed: list[Pair]) -> list[Pair]:
    out: list[Pair] = []
    for a, b in pairs:
        for c, e in allowed:
            lo, hi = max(a, c), min(b, e)
            if hi > lo:
                out.append((lo, hi))
    return merge(out)


def _position_spans(spec: NightSpec, rng: np.random.Generator, d: float, lights_off: float,
                    lights_on: float, waso: list[Pair]) -> list[Span]:
    weights = np.asarray(spec.position_weights, dtype=float)
    weights = weights / weights.sum()
    spans: list[Span] = [Span(0.0, lights_off, "position", detail="upright")]
    t = lights_off
    current = str(rng.choice(LYING, p=weights))
    while t < lights_on:
        dur = _u(rng, spec.position_segment_min) * 60
        end = min(t + dur, lights_on)
        spans.append(Span(t, end, "position", detail=current))
        t = end
        others = [p for p in LYING if p != current]
        w = np.array([weights[LYING.index(p)] for p in others])
        current = str(rng.choice(others, p=w / w.sum()))
    spans.append(Span(lights_on, d, "position", detail="upright"))
    # A long night-time awakening: up and about (upright) for its middle part.
    for a, b in waso:
        if b - a >= 300:
            spans = _overlay(spans, Span(a + 60, b - 60, "position", detail="upright"))
    return spans


def _overlay(spans: list[Span], top: Span) -> list[Span]:
    out: list[Span] = []
    for s in spans:
        for a, b in subtract([(s.start_s, s.end_s)], [(top.start_s, top.end_s)]):
            out.append(Span(a, b, s.kind, s.role, s.detail))
    out.append(top)
    return sorted(out, key=lambda s: s.start_s)


def _movements(spec: NightSpec, rng: np.random.Generator, positions: list[Span],
               wake: list[Pair], d: float) -> list[Span]:
    moves: list[Span] = []
    for prev, nxt in zip(positions[:-1], positions[1:], strict=True):
        if prev.detail != nxt.detail:
            half = _u(rng, (1.5, 5.0))
            moves.append(Span(max(nxt.start_s - half, 0.0), min(nxt.start_s + half, d),
                              "position change"))
    for a, b in wake:  # restless wake: a movement every 1-4 min
        t = a + _u(rng, (20, 120))
        while t < b - 10:
            dur = _u(rng, (2.0, 6.0))
            moves.append(Span(t, min(t + dur, b), "wake movement"))
            t += _u(rng, (60, 240))
    n_belt = rng.poisson(spec.belt_artefact_rate_per_h * d / 3600)
    for t in rng.uniform(0, d - 5, size=n_belt):
        moves.append(Span(float(t), float(t) + _u(rng, (1.0, 3.5)), "belt artefact",
                          role=str(rng.choice(["thorax", "abdomen"]))))
    return sorted(moves, key=lambda s: s.start_s)


def _episodes(spec: NightSpec, rng: np.random.Generator, sleep_onset: float,
              final_wake: float, lights_off: float, d: float, waso: list[Pair]) -> tuple[
        list[Span], list[Span]]:
    window = (sleep_onset + 600, final_wake - 600)
    taken: list[Pair] = list(waso)  # problem episodes happen in sleep, not awakenings
    invalid: list[Span] = []

    def place(count: int, rng_min: tuple[float, float]) -> list[Pair]:
        durs = [_u(rng, rng_min) * 60 for _ in range(count)]
        return place_disjoint(rng, window, durs, taken, margin_s=240)

    for a, b in place(spec.probe_off_count, spec.probe_off_min):
        invalid += [Span(a, b, "invalid", "spo2", "probe off"),
                    Span(a, b, "invalid", "pulse", "probe off")]
    if spec.probe_off_after_h is not None:
        a = lights_off + spec.probe_off_after_h * 3600
        if a < d:
            invalid += [Span(a, d, "invalid", "spo2", "probe off"),
                        Span(a, d, "invalid", "pulse", "probe off")]
            taken.append((a, d))
    for a, b in place(spec.cannula_off_count, spec.cannula_off_min):
        invalid.append(Span(a, b, "invalid", "flow", "cannula off"))
    for a, b in place(spec.mouth_breathing_count, spec.mouth_breathing_min):
        invalid.append(Span(a, b, "invalid", "flow", "mouth breathing"))
    for a, b in place(spec.flat_belt_count, spec.flat_belt_min):
        invalid.append(Span(a, b, "invalid", str(rng.choice(["thorax", "abdomen"])),
                            "flat belt"))
    for start, dur in spec.gaps:
        a = float(np.floor(start))
        invalid.append(Span(a, a + float(np.ceil(dur)), "invalid", "", "recording gap"))
    belts: list[Span] = []
    for kind, count in (("weak belt", spec.weak_belt_count),
                        ("clipping belt", spec.clipping_belt_count)):
        for a, b in place(count, spec.belt_episode_min):
            belts.append(Span(a, b, kind, str(rng.choice(["thorax", "abdomen"]))))
    return (sorted(invalid, key=lambda s: (s.start_s, s.role)),
            sorted(belts, key=lambda s: s.start_s))


def _csb_spans(spec: NightSpec, rng: np.random.Generator, sleep: list[Pair],
               rem: list[Pair], invalid: list[Pair]) -> list[Pair]:
    if spec.csb_hours <= 0:
        return []
    nrem = subtract(sleep, [(a - 300, b + 300) for a, b in rem + invalid])
    want = spec.csb_hours * 3600
    out: list[Pair] = []
    for a, b in sorted(nrem, key=lambda p: p[0] - p[1]):  # longest first
        if want <= 0:
            break
        if b - a < 900:
            continue
        take = min(want, b - a - 240)
        start = a + 120
        out.append((start, start + take))
        want -= take
    return sorted(out)


def build_schedule(spec: NightSpec, rng: np.random.Generator, lights_policy: str) -> Schedule:
    """Lay out the night: wake, REM, positions, movements and problem episodes."""
    d = spec.duration_s
    lights_off, lights_on, sleep_onset, final_wake, wake = _wake_spans(spec, rng, d)
    waso = [p for p in wake if p[0] > 0 and p[1] < d]
    sleep = subtract([(sleep_onset, final_wake)], wake)
    rem = _rem_spans(spec, rng, sleep, sleep_onset, final_wake)
    positions = _position_spans(spec, rng, d, lights_off, lights_on, waso)
    movements = _movements(spec, rng, positions, wake, d)
    invalid, belts = _episodes(spec, rng, sleep_onset, final_wake, lights_off, d, waso)
    csb = _csb_spans(spec, rng, sleep, rem, [(s.start_s, s.end_s) for s in invalid])
    if spec.lights_annotated is not None:
        annotated = spec.lights_annotated
    else:
        annotated = {"always": True, "never": False}.get(lights_policy, bool(rng.random() < 0.5))
    return Schedule(
        duration_s=d, lights_off_s=lights_off, lights_on_s=lights_on,
        sleep_onset_s=sleep_onset, final_wake_s=final_wake,
        wake=tuple(Span(a, b, "wake") for a, b in wake),
        rem=tuple(Span(a, b, "rem") for a, b in rem),
        positions=tuple(positions), movements=tuple(movements),
        invalid=tuple(invalid), belt_periods=tuple(belts),
        csb=tuple(Span(a, b, "csb") for a, b in csb), lights_annotated=annotated,
    )
