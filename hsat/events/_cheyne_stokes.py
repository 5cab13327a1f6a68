"""Cheyne-Stokes breathing from scored central events and the breathing between them.

AASM Scoring Manual 2012 revision, adult rule (standards.md §1.4 and §9 row 9, from
memory there): score Cheyne-Stokes breathing when (a) there are >= 3 consecutive central
apneas and/or central hypopneas separated by a crescendo-decrescendo change in breathing
amplitude with a cycle length >= 40 s, and (b) there are >= 5 such central events per
hour of sleep, recorded over >= 2 h of monitoring. For an HSAT the per-hour rate uses
monitoring time (standards.md §1.4).

Here the cycle length is the onset-to-onset interval of consecutive events (it must lie
in ``[min_cycle_s, max_cycle_s]``), and the breathing between two events is
crescendo-decrescendo when its largest breath lies in the middle part of the interval
and breaths at both ends are clearly smaller (``SWELL_RATIO``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hsat.breaths import BreathSeries, amplitude_at
from hsat.rulesets import CheyneStokesRule

#: The largest breath between two events must lie within this middle fraction of the gap.
MIDDLE_FRACTION = (0.1, 0.9)
#: Breaths in the first and last fifth of the gap stay at or below this fraction of the
#: largest one (waxing then waning).
SWELL_RATIO = 0.85
_STEP_S = 0.5


@dataclass(frozen=True)
class CheyneStokes:
    """The Cheyne-Stokes finding of one rule set."""

    present: bool
    periods: tuple[tuple[float, float, int], ...]  # (start_s, end_s, central events)
    central_events: int
    central_index: float
    duration_min: float
    criteria: str


def _waxes_and_wanes(series: BreathSeries | None, start_s: float, end_s: float) -> bool:
    if series is None or end_s - start_s < 4 * _STEP_S:
        return series is None  # without an airflow trace, the cycle timing alone decides
    t = np.arange(start_s, end_s, _STEP_S)
    amp = amplitude_at(series, t)
    if not np.any(amp > 0):
        return False
    peak = int(np.argmax(amp))
    lo, hi = MIDDLE_FRACTION
    if not lo * len(t) <= peak <= hi * len(t):
        return False
    fifth = max(1, len(t) // 5)
    edge = max(float(np.mean(amp[:fifth])), float(np.mean(amp[-fifth:])))
    return edge <= SWELL_RATIO * float(amp[peak])


def find_cheyne_stokes(
    onsets_s: np.ndarray,
    ends_s: np.ndarray,
    central: np.ndarray,
    airflow: BreathSeries | None,
    monitoring_h: float,
    rule: CheyneStokesRule,
) -> CheyneStokes:
    """Cheyne-Stokes periods among one rule set's respiratory events.

    Parameters
    ----------
    onsets_s, ends_s : every scored apnea and hypopnea of the rule set.
    central : True for central apneas and central hypopneas.
    airflow : breaths of the airflow channel, for the crescendo-decrescendo check.
    monitoring_h : monitoring time (h).
    rule : the rule set's Cheyne-Stokes parameters.
    """
    criteria = (
        f">= {rule.min_consecutive} consecutive central apneas/hypopneas with "
        f"crescendo-decrescendo breathing between them, cycle {rule.min_cycle_s:g}-"
        f"{rule.max_cycle_s:g} s; >= {rule.min_central_index:g} such events per hour of "
        f"monitoring over >= {rule.min_monitoring_h:g} h (AASM 2012)"
    )
    order = np.argsort(onsets_s, kind="stable")
    on, off, cen = (np.asarray(onsets_s, float)[order], np.asarray(ends_s, float)[order],
                    np.asarray(central, bool)[order])
    periods: list[tuple[float, float, int]] = []
    run: list[int] = []

    def close() -> None:
        if len(run) >= rule.min_consecutive:
            periods.append((float(on[run[0]]), float(off[run[-1]]), len(run)))

    for i in range(len(on)):  # loop over events
        if not cen[i]:
            close()
            run = []
            continue
        if run:
            j = run[-1]
            cycle = on[i] - on[j]
            linked = (rule.min_cycle_s <= cycle <= rule.max_cycle_s
                      and _waxes_and_wanes(airflow, off[j], on[i]))
            if not linked:
                close()
                run = []
        run.append(i)
    close()
    count = sum(p[2] for p in periods)
    index = count / monitoring_h if monitoring_h > 0 else 0.0
    present = bool(periods) and index >= rule.min_central_index and (
        monitoring_h >= rule.min_monitoring_h)
    duration = sum(p[1] - p[0] for p in periods) / 60.0
    return CheyneStokes(present, tuple(periods), count, float(index), float(duration), criteria)
