"""Stage 2, condition: one pass from a ``Recording`` to a ``Conditioned`` recording.

Order: effort belts and oximetry first (the flat-flow rule asks whether the belts still
breathe and SpO2 holds), then airflow, position, wake, and the monitoring time.
"""

from __future__ import annotations

from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from hsat.condition._common import finite_and, seconds_grid
from hsat.condition._effort import belts_breathing, condition_belt, movement_seconds
from hsat.condition._flow import ChannelResult, condition_airflow
from hsat.condition._monitoring import MASK_FS, monitoring
from hsat.condition._position import condition_position
from hsat.condition._spo2 import condition_pulse, condition_spo2
from hsat.condition._wake import (
    HOW_WAKE_IS_JUDGED,
    activity_movement,
    breath_epochs,
    judge_wake,
)
from hsat.recording import Conditioned, Interval, Recording, Signal

USER_EXCLUDED = "excluded by user"
#: Threads the channels are shared out to (the machine this runs on has two cores).
CONDITION_WORKERS = 2
GAP = "EDF+D gap"


def _passthrough(sig: Signal) -> Signal:
    """A channel hsat does not clean (snore, pleth, activity): invalid samples -> NaN."""
    valid = finite_and(sig.mask, sig.data)
    if valid.all():  # nothing to blank: share the (never modified) samples
        return sig.replace(valid=valid)
    return sig.replace(data=np.where(valid, sig.data, np.nan), valid=valid)


def _user_intervals(
    excluded: Sequence[tuple[float, float] | Interval], duration_s: float
) -> list[Interval]:
    out = []
    for item in excluded:
        a, b = (item.start_s, item.end_s) if isinstance(item, Interval) else item
        a, b = max(float(a), 0.0), min(float(b), duration_s)
        if b > a:
            out.append(Interval(a, b, USER_EXCLUDED))
    return out


def condition_recording(
    rec: Recording, excluded: Sequence[tuple[float, float] | Interval] = ()
) -> Conditioned:
    """Clean every channel, mark invalid data, judge wake, compute monitoring time.

    Parameters
    ----------
    rec : the read recording (``hsat.io.read_recording``).
    excluded : extra (start_s, end_s) periods to leave out of the monitoring time, e.g.
        from the patient's diary.

    Raises
    ------
    ChannelError
        Airflow with no valid data or no breathing at all; SpO2 with no reading or no
        value within 50-100 %.
    """
    n_sec = max(seconds_grid(rec.duration_s, MASK_FS), 1)
    gaps = [Interval(g.start_s, g.end_s, GAP) for g in rec.gaps]
    results: dict[str, ChannelResult] = {}
    notes: list[str] = []

    # Channels of one step are independent and numpy/scipy release the GIL in their
    # loops: two threads share them out (same results, less wall time).
    with ThreadPoolExecutor(max_workers=CONDITION_WORKERS) as pool:
        belt_jobs = [
            pool.submit(condition_belt, rec.signals[r], gaps=gaps, n_sec=n_sec)
            for r in ("thorax", "abdomen")
            if rec.has(r)
        ]
        pulse_job = (pool.submit(condition_pulse, rec.signals["pulse"], gaps=gaps, n_sec=n_sec)
                     if rec.has("pulse") else None)
        spo2_res, spo2_grid = condition_spo2(rec.signals["spo2"], gaps=gaps, n_sec=n_sec,
                                             path=rec.path)
        belts = [job.result() for job in belt_jobs]
        for res in belts:
            results[res.signal.role] = res
        results["spo2"] = spo2_res
        if pulse_job is not None:
            results["pulse"] = pulse_job.result()

        flow = rec.signals["flow"]
        thermal_is_flow = rec.has("thermal") and rec.signals["thermal"].label == flow.label
        moving = movement_seconds(belts, n_sec)
        if rec.has("activity"):
            moving = moving | activity_movement(rec.signals["activity"], n_sec)
        common = dict(
            gaps=gaps,
            n_sec=n_sec,
            belts_breathing=belts_breathing(belts, n_sec),
            spo2_grid=spo2_grid,
            path=rec.path,
            moving=moving,
        )
        thermal_job = (
            pool.submit(condition_airflow, rec.signals["thermal"], is_pressure=False, **common)
            if rec.has("thermal") and not thermal_is_flow else None
        )
        results["flow"] = condition_airflow(flow, is_pressure=not thermal_is_flow, **common)
        if thermal_job is not None:
            results["thermal"] = thermal_job.result()

    signals: dict[str, Signal] = {role: r.signal for role, r in results.items()}
    if thermal_is_flow:
        signals["thermal"] = signals["flow"].replace(role="thermal")
    for r in results.values():
        notes.extend(r.notes)

    upright = None
    if rec.has("position"):
        signals["position"], upright = condition_position(rec.signals["position"], n_sec)
    for role in ("snore", "pleth", "activity"):
        if rec.has(role):
            signals[role] = _passthrough(rec.signals[role])

    rhythm = belts[0] if belts else results["flow"]
    n_epochs = int(np.ceil(n_sec / 30))
    rate, cv = breath_epochs(rhythm.signal, rhythm.typical, n_epochs)
    wake = judge_wake(
        duration_s=rec.duration_s,
        lights_off_s=rec.lights_off_s,
        lights_on_s=rec.lights_on_s,
        n_sec=n_sec,
        upright=upright,
        moving=moving,
        breath_rate=rate,
        breath_cv=cv,
        pulse=signals.get("pulse"),
    )
    notes.extend(wake.notes)
    user = _user_intervals(excluded, rec.duration_s)
    mon = monitoring(
        signals["flow"],
        signals["spo2"],
        n_sec=n_sec,
        lights_off_s=wake.lights_off_s,
        lights_on_s=wake.lights_on_s,
        wake=wake.wake,
        excluded=user,
    )
    exclusions = list(gaps) + wake.lights_exclusions + user
    for r in results.values():
        exclusions.extend(r.exclusions)
    notes.append("wake judged from: " + HOW_WAKE_IS_JUDGED)
    return Conditioned(
        recording=rec,
        signals=signals,
        exclusions=tuple(sorted(exclusions, key=lambda i: (i.start_s, i.role))),
        wake=tuple(wake.wake),
        lights_off_s=wake.lights_off_s,
        lights_on_s=wake.lights_on_s,
        mask_fs=MASK_FS,
        analysis_mask=mon.analysis_mask,
        monitoring_time_s=mon.monitoring_time_s,
        adequacy=mon.adequacy,
        notes=tuple(notes),
    )
