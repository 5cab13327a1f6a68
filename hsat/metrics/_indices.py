"""Per-rule-set event indices: REI, apnea indices by type, HI, ODI, severity, durations.

AASM HSAT rules (standards.md §1.6, from memory there): REI = (apneas + hypopneas) x 60 /
monitoring time (min). ODI: desaturations per hour of valid oximetry (standards.md §2).
Severity: AASM adult categories on the REI with half-open intervals, none < 5, mild
5 to < 15, moderate 15 to < 30, severe >= 30 (standards.md §3.1: 30 is severe).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from hsat.events import APNEA_TYPES

SEVERITY_NAMES: tuple[str, str, str, str] = ("none", "mild", "moderate", "severe")


def severity(rei: float, thresholds: Sequence[float] = (5.0, 15.0, 30.0)) -> str:
    """AASM adult severity category of an REI (events/h).

    Half-open intervals (standards.md §3.1; Nikkonen et al., Sci Rep 2019): below the
    first threshold 'none', then 'mild', 'moderate', and from the last one 'severe'.
    """
    a, b, c = thresholds
    if not np.isfinite(rei):
        raise ValueError(f"severity: REI must be a finite number, got {rei}")
    if rei < a:
        return SEVERITY_NAMES[0]
    if rei < b:
        return SEVERITY_NAMES[1]
    if rei < c:
        return SEVERITY_NAMES[2]
    return SEVERITY_NAMES[3]


def per_hour(count: float, hours: float) -> float:
    """``count / hours``, 0 when there is no time to divide by."""
    return float(count) / hours if hours > 0 else 0.0


def event_counts(resp: pd.DataFrame, desats: pd.DataFrame) -> dict[str, int]:
    """Counts by event kind (respiratory rows ``resp``, desaturation rows ``desats``)."""
    kinds = resp["event"].value_counts()
    counts = {k: int(kinds.get(k, 0)) for k in APNEA_TYPES}
    counts["apnea"] = sum(counts[k] for k in APNEA_TYPES)
    counts["hypopnea"] = int(kinds.get("hypopnea", 0))
    counts["respiratory_events"] = counts["apnea"] + counts["hypopnea"]
    counts["desaturation"] = int(len(desats))
    return counts


def _mean_max(durations: np.ndarray) -> tuple[float | None, float | None]:
    if len(durations) == 0:
        return None, None
    return round(float(np.mean(durations)), 1), round(float(np.max(durations)), 1)


def event_durations(resp: pd.DataFrame) -> dict[str, float | None]:
    """Mean and longest duration (s) of all events, of apneas and of hypopneas."""
    dur = resp["duration_s"].to_numpy(dtype=float)
    is_apnea = resp["event"].isin(APNEA_TYPES).to_numpy()
    is_hyp = (resp["event"] == "hypopnea").to_numpy()
    out: dict[str, float | None] = {}
    for label, sel in (("event", slice(None)), ("apnea", is_apnea), ("hypopnea", is_hyp)):
        mean, longest = _mean_max(dur[sel])
        out[f"mean_{label}_s"] = mean
        out[f"longest_{label}_s"] = longest
    return out


def basic_indices(
    counts: dict[str, int], monitoring_h: float, oximetry_h: float,
    thresholds: Sequence[float],
) -> dict[str, object]:
    """REI, OAI, CAI, MAI, UAI, AI, HI (per hour of monitoring time), ODI (per hour of
    valid oximetry) and the severity category. Indices are rounded to 0.1/h for
    reporting and the severity is taken from the rounded REI, so the category always
    agrees with the number the physician reads."""
    rei = round(per_hour(counts["respiratory_events"], monitoring_h), 1)
    return {
        "rei": rei,
        "oai": round(per_hour(counts["obstructive_apnea"], monitoring_h), 1),
        "cai": round(per_hour(counts["central_apnea"], monitoring_h), 1),
        "mai": round(per_hour(counts["mixed_apnea"], monitoring_h), 1),
        "uai": round(per_hour(counts["unclassified_apnea"], monitoring_h), 1),
        "ai": round(per_hour(counts["apnea"], monitoring_h), 1),
        "hi": round(per_hour(counts["hypopnea"], monitoring_h), 1),
        "odi": round(per_hour(counts["desaturation"], oximetry_h), 1),
        "severity": severity(rei, thresholds),
    }
