"""What the batch keeps from a study folder: the facts the registry and worklist show.

Both the worker (right after it builds a folder) and the parent (when it adopts a
folder a killed batch left complete) read them here, so both paths record the same.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

#: Indices copied into the registry for every rule set (summary.json ``indices``).
INDEX_KEYS: tuple[str, ...] = ("rei", "oai", "cai", "mai", "uai", "hi", "odi")


@dataclass(frozen=True)
class RuleSetResult:
    """One rule set's indices for one run."""

    name: str
    sha256: str
    indices: dict[str, float | None]
    severity: str
    all_indices: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StudyFacts:
    """The registry's and worklist's view of one scored study."""

    patient_code: str = ""
    patient_name: str = ""
    recorded_at: str = ""
    kit: str = ""
    monitoring_time_h: float | None = None
    adequate: bool | None = None
    adequacy_reasons: tuple[str, ...] = ()
    results: tuple[RuleSetResult, ...] = ()
    t90_pct: float | None = None
    nadir_pct: float | None = None
    hypoxic_burden: float | None = None

    @property
    def patient_label(self) -> str:
        if self.patient_name and self.patient_code:
            return f"{self.patient_name} ({self.patient_code})"
        return self.patient_name or self.patient_code


def _as_float(value: object) -> float | None:
    if isinstance(value, bool) or value is None:
        return None
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return number if number == number else None  # NaN -> None


def _text(value: object) -> str:
    return "" if value is None else str(value).strip()


def _first(mapping: dict[str, Any], *keys: str) -> object:
    for key in keys:
        value = mapping.get(key)
        if value not in (None, ""):
            return value
    return None


def _rule_set_hashes(summary: dict[str, Any]) -> dict[str, str]:
    declared = summary.get("rule_sets") or []
    hashes: dict[str, str] = {}
    if isinstance(declared, dict):
        declared = [dict(v, name=k) if isinstance(v, dict) else {"name": k}
                    for k, v in declared.items()]
    for item in declared:
        if isinstance(item, dict) and item.get("name"):
            hashes[str(item["name"])] = _text(_first(item, "sha256", "content_sha256", "hash"))
    return hashes


def facts_from_summary(summary: dict[str, Any]) -> StudyFacts:
    """Pick the registry facts out of a summary.json object (``hsat.api.analyze``)."""
    patient = summary.get("patient") or {}
    study = summary.get("study") or {}
    kit = summary.get("kit") or {}
    adequacy = summary.get("adequacy") or {}
    spo2 = summary.get("spo2") or {}
    hashes = _rule_set_hashes(summary)
    results = []
    for name, values in (summary.get("indices") or {}).items():
        values = values if isinstance(values, dict) else {}
        results.append(RuleSetResult(
            name=str(name),
            sha256=hashes.get(str(name), ""),
            indices={key: _as_float(values.get(key)) for key in INDEX_KEYS},
            severity=_text(values.get("severity")),
            all_indices=values,
        ))
    reasons = adequacy.get("reasons") or ()
    adequate = adequacy.get("adequate")
    return StudyFacts(
        patient_code=_text(patient.get("code")),
        patient_name=_text(patient.get("name")),
        recorded_at=_text(study.get("start_time")),
        kit=_text(_first(kit, "kit") if isinstance(kit, dict) else None)
        or _text(_first(study, "profile", "equipment")),
        monitoring_time_h=_as_float(summary.get("monitoring_time_h")),
        adequate=adequate if isinstance(adequate, bool) else None,
        adequacy_reasons=tuple(_text(r) for r in reasons if _text(r)),
        results=tuple(results),
        t90_pct=_as_float(spo2.get("t90_pct")),
        nadir_pct=_as_float(spo2.get("nadir_pct")),
        hypoxic_burden=_as_float(spo2.get("hypoxic_burden")),
    )


def read_summary(folder: Path) -> dict[str, Any]:
    """The summary.json of a study folder as a dict."""
    return json.loads((folder / "summary.json").read_text(encoding="utf-8"))
