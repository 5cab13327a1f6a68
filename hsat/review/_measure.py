"""What the page shows beside a selected event: its pre-event baseline and measured drop.

These numbers help the reviewer judge an event against the rule; they do not score
anything. For an automatic event the page shows the scoring stage's own figures (its
events.csv columns); the estimate here is for an event the reviewer moved or added, whose
span the scoring stage never measured.

Airflow: the pre-event baseline is ``hsat.breaths.pre_event_baseline`` with the study's
rule-set parameters (AASM 2007 wording, standards.md §1.3); the channel is the oronasal
thermal sensor for apneas when the kit has one, else nasal pressure (AASM sensor rules,
standards.md §1.2). The event's excursion is the median over the event's time of
the breath amplitude in force (``hsat.breaths.amplitude_at``, 0 during a pause): the
level held for at least half the event, so an edge breath or one recovery breath does not
hide the reduction. The drop is ``100 * (1 - excursion / baseline)``. The scoring stage's
own figure for automatic events (``min_amplitude_ratio`` in events.csv) is shown beside
it.

SpO2: the baseline is the highest valid SpO2 in the ``baseline_window_s`` before onset
and the nadir the lowest valid SpO2 from onset to ``link_window_s`` after the end (common
practice, standards.md §1.3; the desaturation lags the event). The drop is in SpO2 points
(standards.md §1.2: "percent means percentage points").
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from hsat.breaths import Breaths, amplitude_at, pre_event_baseline
from hsat.review._signals import Lane
from hsat.rulesets import RuleSet

#: Time step at which the amplitude in force is read across the event.
_STEP_S = 0.1
APNEA_TYPES = frozenset({"obstructive_apnea", "central_apnea", "mixed_apnea",
                         "unclassified_apnea"})


def _airflow_role(breaths: Breaths, event_type: str) -> str | None:
    if event_type in APNEA_TYPES and breaths.get("thermal") is not None \
            and len(breaths.series["thermal"]):
        return "thermal"
    return "flow" if breaths.get("flow") is not None else None


def _round(x: float, digits: int = 3) -> float | None:
    return round(float(x), digits) if np.isfinite(x) else None


def airflow_drop(breaths: Breaths, onset_s: float, duration_s: float, event_type: str,
                 rule_set: RuleSet) -> dict[str, Any]:
    """Pre-event baseline, excursion during the event and the drop (see module notes)."""
    role = _airflow_role(breaths, event_type)
    if role is None:
        return {}
    series = breaths.series[role]
    b = rule_set.baseline
    baseline = float(pre_event_baseline(
        series, np.array([onset_s]), window_s=b.window_s, statistic=b.statistic,
        largest_n=b.largest_n, stable_cv=b.stable_cv, min_breaths=b.min_breaths,
    )[0])
    times = np.arange(onset_s, onset_s + duration_s, _STEP_S)
    excursion = float(np.median(amplitude_at(series, times))) if times.size else 0.0
    drop = 100.0 * (1.0 - excursion / baseline) if np.isfinite(baseline) and baseline > 0 \
        else float("nan")
    return {
        "channel": role, "baseline": _round(baseline, 4), "excursion": _round(excursion, 4),
        "drop_pct": _round(drop, 1), "baseline_from_s": _round(onset_s - b.window_s, 2),
        "baseline_statistic": b.statistic,
    }


def _valid_values(lane: Lane, t0_s: float, t1_s: float) -> np.ndarray:
    i0 = int(np.clip(np.floor((t0_s - lane.t0_s) * lane.fs), 0, len(lane.data)))
    i1 = int(np.clip(np.ceil((t1_s - lane.t0_s) * lane.fs), i0, len(lane.data)))
    values = lane.data[i0:i1][lane.valid[i0:i1]]
    return values[np.isfinite(values)]


def spo2_drop(spo2: Lane, onset_s: float, duration_s: float, rule_set: RuleSet
              ) -> dict[str, Any]:
    """SpO2 baseline before the event, nadir during/after it, and the drop in points."""
    d = rule_set.desaturation
    before = _valid_values(spo2, onset_s - d.baseline_window_s, onset_s)
    after = _valid_values(spo2, onset_s, onset_s + duration_s + d.link_window_s)
    baseline = float(before.max()) if before.size else float("nan")
    nadir = float(after.min()) if after.size else float("nan")
    return {
        "spo2_baseline": _round(baseline, 1), "spo2_nadir": _round(nadir, 1),
        "spo2_drop": _round(baseline - nadir, 1),
        "spo2_from_s": _round(onset_s - d.baseline_window_s, 2),
        "spo2_to_s": _round(onset_s + duration_s + d.link_window_s, 2),
    }


def measure_event(breaths: Breaths, lanes: Mapping[str, Lane], onset_s: float,
                  duration_s: float, event_type: str, rule_set: RuleSet) -> dict[str, Any]:
    """Everything the page prints for a selected event, under one rule set."""
    out: dict[str, Any] = {"rule_set": rule_set.name}
    if event_type != "desaturation":
        out.update(airflow_drop(breaths, onset_s, duration_s, event_type, rule_set))
    if "spo2" in lanes:
        out.update(spo2_drop(lanes["spo2"], onset_s, duration_s, rule_set))
    return out
