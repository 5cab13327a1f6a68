"""Positional and hourly tables.

Positional OSA (standards.md §4): the Cartwright definition (Cartwright 1984, Sleep
7:110-114), supine REI >= 2 x non-supine REI, here on REI per hour of monitoring time in
each position, given only when the REI is >= 5 (OSA present) and both the supine and the
non-supine time reach ``MIN_POSITION_MIN`` (Bignold's >= 20 min in both, standards.md §4).
Each event is assigned the position at its onset (standards.md §4, from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from hsat.events import position_at
from hsat.metrics._indices import per_hour
from hsat.recording import POSITIONS, Conditioned

#: Minimum time (min) in a position for its REI to be given (Bignold, standards.md §4).
MIN_POSITION_MIN = 20.0
POSITIONAL_DEFINITION = (
    "Cartwright 1984: supine REI >= 2 x non-supine REI, with REI >= 5/h and >= 20 min "
    "(Bignold) of monitoring time both supine and non-supine"
)


def monitoring_times(cond: Conditioned) -> np.ndarray:
    """Times (s) of the monitoring-time mask samples that count (``analysis_mask``)."""
    idx = np.flatnonzero(cond.analysis_mask)
    return idx / cond.mask_fs


def position_minutes(cond: Conditioned) -> dict[str, float]:
    """Monitoring time (min) in each decoded position."""
    pos = position_at(cond, monitoring_times(cond))
    step_min = 1.0 / cond.mask_fs / 60.0
    return {p: round(float(np.count_nonzero(pos == p)) * step_min, 2) for p in POSITIONS}


def _row(minutes: float, events: int, min_minutes: float) -> dict[str, object]:
    rei = per_hour(events, minutes / 60.0) if minutes >= min_minutes else None
    return {"monitoring_min": round(minutes, 2), "events": int(events),
            "rei": None if rei is None else round(rei, 1)}


def positional_table(
    cond: Conditioned, resp: pd.DataFrame, overall_rei: float,
    minutes: dict[str, float] | None = None,
) -> dict[str, object]:
    """Time, events and REI per position, supine vs non-supine, and the Cartwright flag."""
    minutes = minutes if minutes is not None else position_minutes(cond)
    pos = position_at(cond, resp["onset_s"].to_numpy(dtype=float))
    by = {p: _row(minutes[p], int(np.count_nonzero(pos == p)), MIN_POSITION_MIN)
          for p in POSITIONS}
    non = [p for p in POSITIONS if p not in ("supine", "unknown")]
    sup_min = minutes["supine"]
    non_min = sum(minutes[p] for p in non)
    sup = _row(sup_min, int(np.count_nonzero(pos == "supine")), MIN_POSITION_MIN)
    nsup = _row(non_min, int(np.count_nonzero(np.isin(pos, non))), MIN_POSITION_MIN)
    ratio = None
    flag = None
    if sup["rei"] is not None and nsup["rei"] is not None:
        if nsup["rei"] > 0:
            ratio = round(sup["rei"] / nsup["rei"], 2)
        if overall_rei >= 5.0:
            flag = bool(sup["rei"] >= 2.0 * nsup["rei"] and sup["rei"] > 0)
    return {
        "by_position": by, "supine": sup, "non_supine": nsup,
        "ratio_supine_to_non_supine": ratio, "positional_osa": flag,
        "definition": POSITIONAL_DEFINITION, "min_minutes": MIN_POSITION_MIN,
    }


def hour_bounds(cond: Conditioned) -> list[tuple[float, float]]:
    """Clock hours from lights off: [off + 3600 k, min(off + 3600 (k+1), on))."""
    off, on = cond.lights_off_s, cond.lights_on_s
    if on <= off:
        return []
    starts = np.arange(off, on, 3600.0)
    return [(float(a), float(min(a + 3600.0, on))) for a in starts]


def hourly_monitoring_min(cond: Conditioned, bounds: list[tuple[float, float]]) -> list[float]:
    """Monitoring minutes inside each hour."""
    t = monitoring_times(cond)
    step_min = 1.0 / cond.mask_fs / 60.0
    return [float(np.count_nonzero((t >= a) & (t < b))) * step_min for a, b in bounds]


#: An hour's REI/ODI is given only with at least this much monitoring time in it (min).
MIN_HOUR_MIN = 10.0


def hourly_events(
    bounds: list[tuple[float, float]], monitoring_min: list[float],
    resp: pd.DataFrame, desats: pd.DataFrame,
) -> list[dict[str, object]]:
    """Events, desaturations, REI and ODI per clock hour."""
    on = resp["onset_s"].to_numpy(dtype=float)
    don = desats["onset_s"].to_numpy(dtype=float)
    rows = []
    for k, ((a, b), mins) in enumerate(zip(bounds, monitoring_min, strict=True)):
        n_ev = int(np.count_nonzero((on >= a) & (on < b)))
        n_de = int(np.count_nonzero((don >= a) & (don < b)))
        enough = mins >= MIN_HOUR_MIN
        rows.append({
            "hour": k + 1, "start_s": a, "end_s": b, "monitoring_min": round(mins, 1),
            "events": n_ev, "rei": round(per_hour(n_ev, mins / 60.0), 1) if enough else None,
            "desaturations": n_de,
            "odi": round(per_hour(n_de, mins / 60.0), 1) if enough else None,
        })
    return rows
