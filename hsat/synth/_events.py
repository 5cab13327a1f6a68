"""Respiratory events, sighs and spontaneous desaturations: drawn and placed in time.

Event counts are fixed by the spec's rates times the night's true monitoring time.
Events go into windows of valid sleep, each window weighted by its body position
(``supine_factor``) and REM-like state (``rem_factor``); inside a window the free time is
split among the gaps by a Dirichlet draw, so a crowded window (a severe night) packs
events back to back and a low ``clustering`` makes runs of them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hsat.synth._schedule import Schedule
from hsat.synth._spans import Pair, Span, lookup, mask, merge, subtract, total
from hsat.synth._spec import NightSpec

APNEAS = ("obstructive_apnea", "central_apnea", "mixed_apnea")


@dataclass(frozen=True)
class PlannedEvent:
    """One designed respiratory event (the truth the scorer should find)."""

    onset_s: float
    duration_s: float
    event: str            # obstructive_apnea | central_apnea | mixed_apnea | hypopnea
    subtype: str          # hypopneas: obstructive | central; apneas: ""
    flow_reduction: float  # fraction of baseline flow amplitude removed
    desat_designed: float  # designed SpO2 drop, percentage points
    desat_band: str       # apnea | low | three | high | csb | post_sigh
    context: str          # "" (spec rates), post_sigh, csb
    central_part_s: float  # mixed apnea: effort-free first part
    recovery_breaths: int
    snoring: bool
    delay_s: float        # circulatory delay: event end -> SpO2 nadir

    @property
    def end_s(self) -> float:
        return self.onset_s + self.duration_s


@dataclass(frozen=True)
class PlannedDesat:
    """A spontaneous desaturation with no respiratory event."""

    onset_s: float
    fall_s: float
    depth: float
    recovery_s: float

    @property
    def nadir_s(self) -> float:
        return self.onset_s + self.fall_s


@dataclass(frozen=True)
class Plan:
    events: tuple[PlannedEvent, ...]
    sighs: tuple[Pair, ...]            # (start_s, end_s) of each sigh breath
    desats: tuple[PlannedDesat, ...]
    windows_s: float                   # total time available to events
    shortfall: dict[str, int]          # events that found no room, by type
    night_delay_s: float


def _u(rng: np.random.Generator, r: tuple[float, float]) -> float:
    return float(rng.uniform(r[0], r[1]))


def event_windows(s: Schedule) -> list[Pair]:
    """Valid sleep where an event (with its 2-min baseline and nadir) fits cleanly."""
    holes: list[Pair] = []
    for sp in s.invalid:
        if sp.role in ("flow", ""):
            holes.append((sp.start_s - 60, sp.end_s + 120))
        elif sp.role == "spo2":
            holes.append((sp.start_s - 75, sp.end_s + 130))
        elif sp.role in ("thorax", "abdomen"):
            holes.append((sp.start_s - 15, sp.end_s + 15))
    # a movement also upsets the oximeter: keep it out of the event's nadir window
    holes += [(m.start_s - (60 if m.kind == "position change" else 15), m.end_s + 20)
              for m in s.movements]
    holes += [(c.start_s - 60, c.end_s + 60) for c in s.csb]
    holes += [(w.start_s - 75, w.end_s + 60) for w in s.wake]
    # Split at REM boundaries so each window has one state.
    holes += [(r.start_s - 1, r.start_s + 1) for r in s.rem]
    holes += [(r.end_s - 1, r.end_s + 1) for r in s.rem]
    return [p for p in subtract(s.sleep_pairs(), holes) if p[1] - p[0] >= 40]


def _desat_for_band(rng: np.random.Generator, band: str, integer: bool) -> float:
    if band == "low":
        return float(rng.choice([1.0, 2.0])) if integer else _u(rng, (0.7, 1.8))
    if band == "three":
        # Integer kits: exactly 3 points. Others: 3.4-3.6, clear of 3 and 4 after the
        # oximeter's averaging and the baseline's small upward bias (max of 2 min).
        return 3.0 if integer else _u(rng, (3.4, 3.6))
    value = _u(rng, (5.0, 9.0))
    return float(np.round(value)) if integer else value


def _draw_events(spec: NightSpec, rng: np.random.Generator, mt_h: float, integer: bool,
                 delay: float) -> list[tuple[PlannedEvent, float]]:
    """The events of the spec rates, each with its recovery gap, not yet placed."""
    items: list[tuple[PlannedEvent, float]] = []
    rates = {"obstructive_apnea": spec.obstructive_apnea_rate,
             "central_apnea": spec.central_apnea_rate,
             "mixed_apnea": spec.mixed_apnea_rate, "hypopnea": spec.hypopnea_rate}
    bands = ("low", "three", "high")
    for kind, rate in rates.items():
        for _ in range(int(round(rate * mt_h))):
            ev_delay = float(np.clip(delay + rng.normal(0, 1.5), spec.circulatory_delay_s[0],
                                     spec.circulatory_delay_s[1]))
            if kind == "hypopnea":
                dur = _u(rng, spec.hypopnea_duration_s)
                central = bool(rng.random() < spec.central_hypopnea_fraction)
                band = str(rng.choice(bands, p=np.asarray(spec.hypopnea_desat_weights)))
                ev = PlannedEvent(0.0, dur, kind, "central" if central else "obstructive",
                                  _u(rng, spec.hypopnea_flow_reduction),
                                  _desat_for_band(rng, band, integer), band, "", 0.0,
                                  int(rng.integers(1, 3)), (not central) and rng.random() < 0.7,
                                  ev_delay)
            else:
                dur = _u(rng, spec.apnea_duration_s)
                per_s = _u(rng, spec.apnea_desat_per_s) * (0.8 if kind == "central_apnea" else 1.0)
                depth = float(np.clip(per_s * dur * spec.desat_scale, 1.5, 25.0))
                if integer:
                    depth = float(np.round(depth))
                central_part = _u(rng, (0.3, 0.6)) * dur if kind == "mixed_apnea" else 0.0
                ev = PlannedEvent(0.0, dur, kind, "", _u(rng, (0.95, 1.0)), depth, "apnea", "",
                                  central_part, int(rng.integers(2, 5)),
                                  kind != "central_apnea", ev_delay)
            items.append((ev, _u(rng, spec.min_recovery_s)))
    return items


def _allocate(rng: np.random.Generator, spec: NightSpec, s: Schedule, windows: list[Pair],
              items: list[tuple[PlannedEvent, float, float]]) -> tuple[
        list[tuple[PlannedEvent, float, float]], dict[str, int]]:
    """Put each item (event, lead-in, tail) in a window; space the items in each window.

    Returns (event, onset, lead-in) triples and the count of items that found no room,
    by event type (``type/context`` for events outside the spec rates).
    """
    def key(ev: PlannedEvent) -> str:
        return ev.event + (f"/{ev.context}" if ev.context else "")

    if not windows:
        short: dict[str, int] = {}
        for ev, _, _ in items:
            short[key(ev)] = short.get(key(ev), 0) + 1
        return [], short
    mids = np.array([(a + b) / 2 for a, b in windows])
    pos = lookup(mids, list(s.positions), "upright")
    rem = mask(mids, [(r.start_s, r.end_s) for r in s.rem])
    lengths = np.array([b - a for a, b in windows])
    weight = lengths * np.where(pos == "supine", spec.supine_factor, 1.0)
    weight *= np.where(rem, spec.rem_factor, 1.0)
    capacity = lengths * 0.97 - 6.0
    used = np.zeros(len(windows))
    members: list[list[tuple[PlannedEvent, float, float]]] = [[] for _ in windows]
    shortfall: dict[str, int] = {}
    order = sorted(range(len(items)), key=lambda i: -(items[i][0].duration_s + items[i][2]))
    for i in order:
        ev, lead, tail = items[i]
        need = lead + ev.duration_s + tail
        fits = (capacity - used) >= need
        if not fits.any():
            shortfall[key(ev)] = shortfall.get(key(ev), 0) + 1
            continue
        p = np.where(fits, weight, 0.0)
        k = int(rng.choice(len(windows), p=p / p.sum()))
        used[k] += need
        members[k].append(items[i])
    placed: list[tuple[PlannedEvent, float, float]] = []
    for k, group in enumerate(members):
        if not group:
            continue
        a, b = windows[k]
        rng.shuffle(group)
        free = max((b - a) - 6.0 - used[k], 0.0)
        gaps = rng.dirichlet(np.full(len(group) + 1, spec.clustering)) * free
        t = a + 3.0
        for (ev, lead, tail), gap in zip(group, gaps[:-1], strict=True):
            t += gap
            placed.append((ev, t + lead, lead))
            t += lead + ev.duration_s + tail
    return placed, shortfall


def _csb_events(spec: NightSpec, rng: np.random.Generator, s: Schedule, integer: bool,
                delay: float) -> list[PlannedEvent]:
    out: list[PlannedEvent] = []
    for span in s.csb:
        t = span.start_s
        while True:
            cycle = _u(rng, spec.csb_cycle_s)
            if t + cycle > span.end_s:
                break
            apnea = bool(rng.random() < 0.6)
            dur = _u(rng, (11.0, min(26.0, cycle * 0.42)))
            depth = _u(rng, (3.5, 6.0)) if apnea else _u(rng, (4.6, 7.0))
            if integer:
                depth = float(np.round(depth))
            out.append(PlannedEvent(
                t + cycle - dur, dur, "central_apnea" if apnea else "hypopnea",
                "" if apnea else "central", 1.0 if apnea else _u(rng, (0.55, 0.75)), depth,
                "csb", "csb", 0.0, 0, False, float(np.clip(delay + rng.normal(0, 1.0),
                                                            *spec.circulatory_delay_s))))
            t += cycle
    return out


def _spontaneous(spec: NightSpec, rng: np.random.Generator, windows: list[Pair],
                 events: list[PlannedEvent], sighs: list[Pair], integer: bool,
                 sleep_h: float) -> list[PlannedDesat]:
    busy = [(e.onset_s - 150, e.end_s + e.delay_s + 60) for e in events]
    busy += [(a - 60, b + 60) for a, b in sighs]
    free = [p for p in subtract(windows, busy) if p[1] - p[0] > 100]
    out: list[PlannedDesat] = []
    n = int(round(spec.spontaneous_desat_rate * sleep_h))
    if not free:
        return out
    lengths = np.array([b - a for a, b in free])
    taken: list[Pair] = []
    for _ in range(n):
        for _try in range(50):
            k = int(rng.choice(len(free), p=lengths / lengths.sum()))
            a, b = free[k]
            fall, rec = _u(rng, (18.0, 35.0)), _u(rng, (10.0, 18.0))
            if b - a < fall + rec + 20:
                continue
            onset = _u(rng, (a + 5, b - fall - rec - 10))
            if all(onset + fall + rec + 120 <= x or onset - 120 >= y for x, y in taken):
                depth = _u(rng, (3.6, 6.0))
                out.append(PlannedDesat(onset, fall, float(np.round(depth)) if integer
                                        else depth, rec))
                taken.append((onset, onset + fall + rec))
                break
    return sorted(out, key=lambda d: d.onset_s)


def plan_events(spec: NightSpec, rng: np.random.Generator, s: Schedule,
                integer_spo2: bool) -> Plan:
    """Draw and place every event, sigh and spontaneous desaturation of the night."""
    mt_h = s.monitoring_time_s() / 3600
    delay = _u(rng, spec.circulatory_delay_s)
    windows = event_windows(s)
    drawn = _draw_events(spec, rng, mt_h, integer_spo2, delay)
    # Hypopneas get 15-28 s of ordinary breathing before them, so the previous event's
    # desaturation has mostly recovered by their onset.
    items: list[tuple[PlannedEvent, float, float]] = [
        (ev, _u(rng, (15.0, 28.0)) if ev.event == "hypopnea" else 0.0, gap)
        for ev, gap in drawn]
    sleep_h = total(s.sleep_pairs()) / 3600
    n_sighs = int(round(spec.sigh_rate_per_h * sleep_h))
    for _ in range(n_sighs):
        sigh_len = _u(rng, (5.5, 7.5))
        pause = (_u(rng, spec.post_sigh_apnea_s)
                 if rng.random() < spec.post_sigh_apnea_probability else 0.0)
        ev = PlannedEvent(0.0, pause, "central_apnea", "", 1.0,
                          _u(rng, (0.3, 1.5)) if not integer_spo2 else 1.0, "post_sigh",
                          "post_sigh", 0.0, 0, False, delay)
        items.append((ev, sigh_len, _u(rng, spec.min_recovery_s)))
    placed, shortfall = _allocate(rng, spec, s, windows, items)
    events: list[PlannedEvent] = []
    sighs: list[Pair] = []
    for ev, onset, lead in placed:
        if ev.context == "post_sigh":
            sighs.append((onset - lead, onset))  # the pause starts as the sigh ends
            if ev.duration_s <= 0:
                continue
        events.append(PlannedEvent(onset, *[getattr(ev, f) for f in (
            "duration_s", "event", "subtype", "flow_reduction", "desat_designed",
            "desat_band", "context", "central_part_s", "recovery_breaths", "snoring",
            "delay_s")]))
    events += _csb_events(spec, rng, s, integer_spo2, delay)
    events.sort(key=lambda e: e.onset_s)
    desats = _spontaneous(spec, rng, windows, events, sighs, integer_spo2, sleep_h)
    return Plan(tuple(events), tuple(sorted(sighs)), tuple(desats), total(windows),
                shortfall, delay)


__all__ = ["APNEAS", "Plan", "PlannedDesat", "PlannedEvent", "Span", "merge", "plan_events"]
