"""Analysis mask, monitoring time and technical adequacy.

Monitoring time (AASM HSAT rules, standards.md §1.6 and §9 row 5, from memory): the
recording time (lights-off to lights-on) minus time with invalid flow or oximetry, minus
periods judged awake, minus periods the user excluded. It is the REI's denominator.

Technical adequacy (Kapur et al., JCSM 2017, standards.md §3.3, from memory): at least
4 h of technically adequate oximetry and flow data. hsat counts the time between
lights-off and lights-on where both are valid together; wake does not make data
inadequate, so it is not subtracted here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hsat.condition._common import mask_of, to_grid
from hsat.recording import Adequacy, Interval, Signal

MASK_FS = 1.0
MINIMUM_ADEQUATE_H = 4.0


@dataclass(frozen=True)
class Monitoring:
    analysis_mask: np.ndarray
    monitoring_time_s: float
    adequacy: Adequacy


def valid_grid(sig: Signal, n_sec: int) -> np.ndarray:
    """Per second: at least half of the channel's samples in that second are valid."""
    return to_grid(sig.mask, sig.fs, n_sec, MASK_FS) >= 0.5


def _hours(seconds: float) -> str:
    return f"{seconds / 3600:.1f} h"


def monitoring(
    flow: Signal,
    spo2: Signal,
    *,
    n_sec: int,
    lights_off_s: float,
    lights_on_s: float,
    wake: list[Interval],
    excluded: list[Interval],
) -> Monitoring:
    """The analysis mask at 1 Hz, the monitoring time and the adequacy verdict."""
    t = np.arange(n_sec) / MASK_FS
    window = (t >= lights_off_s) & (t < lights_on_s)
    flow_ok = valid_grid(flow, n_sec)
    spo2_ok = valid_grid(spo2, n_sec)
    awake = mask_of(wake, n_sec, MASK_FS)
    dropped = mask_of(excluded, n_sec, MASK_FS)
    analysis = window & flow_ok & spo2_ok & ~awake & ~dropped
    flow_s = float(np.count_nonzero(window & flow_ok)) / MASK_FS
    spo2_s = float(np.count_nonzero(window & spo2_ok)) / MASK_FS
    both_s = float(np.count_nonzero(window & flow_ok & spo2_ok)) / MASK_FS
    need_s = MINIMUM_ADEQUATE_H * 3600
    need = f"at least {MINIMUM_ADEQUATE_H:g} h needed (Kapur 2017)"
    reasons: list[str] = []
    if spo2_s < need_s:
        reasons.append(f"oximetry valid for {_hours(spo2_s)}; {need}")
    if flow_s < need_s:
        reasons.append(f"airflow valid for {_hours(flow_s)}; {need}")
    if not reasons and both_s < need_s:
        reasons.append(f"airflow and oximetry valid together for {_hours(both_s)}; {need}")
    adequate = not reasons
    if adequate:
        reasons.append(
            f"airflow and oximetry valid together for {_hours(both_s)} between lights-off "
            f"and lights-on; {need}"
        )
    adequacy = Adequacy(
        adequate=adequate,
        reasons=tuple(reasons),
        valid_flow_h=flow_s / 3600,
        valid_spo2_h=spo2_s / 3600,
        valid_flow_and_spo2_h=both_s / 3600,
        minimum_h=MINIMUM_ADEQUATE_H,
    )
    return Monitoring(analysis, float(np.count_nonzero(analysis)) / MASK_FS, adequacy)
