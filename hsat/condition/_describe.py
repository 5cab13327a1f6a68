"""``describe(cond)``: a JSON-ready account of a conditioned recording (``hsat check``)."""

from __future__ import annotations

from typing import Any

from hsat.condition._wake import HOW_WAKE_IS_JUDGED
from hsat.recording import ROLES, Conditioned

CAUTION = (
    "Automated output: a qualified clinician must review the raw signals. A technically "
    "inadequate, negative or inconclusive HSAT does not exclude sleep apnea (Kapur 2017)."
)


def _r(x: float, nd: int = 3) -> float:
    return round(float(x), nd)


def describe(cond: Conditioned) -> dict[str, Any]:
    """What was read, what was taken for each role and why, what was excluded, the
    monitoring time and the adequacy verdict, as one JSON-ready dict."""
    rec = cond.recording
    reasons = {c.role: c.reason for c in rec.channel_choices}
    roles: dict[str, Any] = {}
    for role in ROLES:
        sig = cond.signals.get(role)
        if sig is None:
            continue
        roles[role] = {
            "label": sig.label,
            "fs": _r(sig.fs, 6),
            "unit": sig.unit,
            "recorded_unit": rec.signals[role].unit if role in rec.signals else sig.unit,
            "valid_h": _r(sig.valid_seconds() / 3600),
            "reason": reasons.get(role, ""),
        }
    totals: dict[str, float] = {}
    for e in cond.exclusions:
        key = f"{e.role or 'all'}: {e.reason}"
        totals[key] = totals.get(key, 0.0) + e.duration_s / 60
    a = cond.adequacy
    return {
        "file": rec.path,
        "sha256": rec.sha256,
        "file_type": rec.file_type,
        "start": rec.start.isoformat(),
        "duration_h": _r(rec.duration_s / 3600),
        "equipment": rec.equipment,
        "profile": rec.profile_name,
        "roles": roles,
        "unused_labels": list(rec.other_labels),
        "annotations": [
            {"onset_s": _r(x.onset_s), "duration_s": _r(x.duration_s), "text": x.text}
            for x in rec.annotations
        ],
        "lights_off_s": _r(cond.lights_off_s, 1),
        "lights_on_s": _r(cond.lights_on_s, 1),
        "recording_time_h": _r(cond.recording_time_s / 3600),
        "exclusions": [
            {
                "start_s": _r(e.start_s, 1),
                "end_s": _r(e.end_s, 1),
                "duration_s": _r(e.duration_s, 1),
                "role": e.role,
                "reason": e.reason,
            }
            for e in cond.exclusions
        ],
        "exclusion_minutes": {k: _r(v, 1) for k, v in sorted(totals.items())},
        "wake": [
            {"start_s": _r(w.start_s, 1), "end_s": _r(w.end_s, 1), "reason": w.reason}
            for w in cond.wake
        ],
        "wake_judged_by": HOW_WAKE_IS_JUDGED,
        "monitoring_time_h": _r(cond.monitoring_time_s / 3600),
        "adequate": a.adequate,
        "adequacy": {
            "minimum_h": a.minimum_h,
            "valid_flow_h": _r(a.valid_flow_h),
            "valid_spo2_h": _r(a.valid_spo2_h),
            "valid_flow_and_spo2_h": _r(a.valid_flow_and_spo2_h),
            "reasons": list(a.reasons),
            "source": "Kapur et al., JCSM 2017 (from memory): >= 4 h of technically "
            "adequate oximetry and flow",
        },
        "warnings": list(rec.warnings) + [n for n in cond.notes if not n.startswith("wake judged")],
        "caution": CAUTION,
    }
