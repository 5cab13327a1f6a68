"""How every number in the report is written: one place, so tests can apply the same rules.

Each function takes a value from summary.json and returns the text printed in the PDF.
A missing value (None or NaN) prints as ``MISSING`` rather than as a blank.
"""

from __future__ import annotations

import math
from datetime import date, datetime

#: What a missing number prints as.
MISSING = "n/a"
#: What a missing patient or study field prints as (never left blank).
NOT_RECORDED = "not recorded"


def _missing(value: object) -> bool:
    return value is None or (isinstance(value, float) and not math.isfinite(value))


def number(value: float | None, decimals: int = 1) -> str:
    """A plain number with a fixed number of decimals (``12.3``)."""
    if _missing(value):
        return MISSING
    return f"{float(value):.{decimals}f}"  # type: ignore[arg-type]


def index(value: float | None) -> str:
    """An events-per-hour index (REI, AHI-like indices, ODI): one decimal."""
    return number(value, 1)


def pct(value: float | None) -> str:
    """A percentage (SpO2, T90, time share): one decimal, unit printed beside the label."""
    return number(value, 1)


def burden(value: float | None) -> str:
    """Hypoxic burden (%min/h, Azarbarzin et al. 2019): one decimal."""
    return number(value, 1)


def rate(value: float | None) -> str:
    """Pulse rate in beats per minute: whole numbers."""
    return number(value, 0)


def seconds(value: float | None) -> str:
    """An event duration in seconds: one decimal."""
    return number(value, 1)


def count(value: float | None) -> str:
    """A count of events."""
    if _missing(value):
        return MISSING
    return str(int(round(float(value))))  # type: ignore[arg-type]


def hours(value: float | None) -> str:
    """A time in hours as ``6 h 25 min`` (rounded to the minute)."""
    if _missing(value):
        return MISSING
    total_min = int(round(float(value) * 60))  # type: ignore[arg-type]
    h, m = divmod(total_min, 60)
    return f"{h} h {m:02d} min"


def hours_decimal(value: float | None) -> str:
    """A time in hours with two decimals (technical tables)."""
    return number(value, 2)


#: How summary.json's severity categories print (AASM adult REI bands, 5 / 15 / 30).
SEVERITY_WORDS = {"none": "Normal (<5/h)", "mild": "Mild", "moderate": "Moderate",
                  "severe": "Severe"}


def severity(value: str | None) -> str:
    """A severity category as printed (``moderate`` -> ``Moderate``, ``none`` ->
    ``Normal (<5/h)`` so that it cannot be mistaken for a missing value)."""
    if not value:
        return MISSING
    return SEVERITY_WORDS.get(str(value), str(value).replace("_", " ").capitalize())


def clock(value: datetime | None) -> str:
    """A clock time ``23:41``."""
    return value.strftime("%H:%M") if value is not None else MISSING


def clock_seconds(value: datetime | None) -> str:
    """A clock time with seconds ``23:41:07``."""
    return value.strftime("%H:%M:%S") if value is not None else MISSING


def day(value: date | None) -> str:
    """A calendar date ``2024-03-01`` (ISO 8601, unambiguous across countries)."""
    return value.isoformat() if value is not None else NOT_RECORDED


def text(value: object) -> str:
    """A free-text field: ``not recorded`` when empty or missing."""
    if value is None:
        return NOT_RECORDED
    s = str(value).strip()
    return s if s else NOT_RECORDED


def yes_no(value: bool | None) -> str:
    if value is None:
        return MISSING
    return "yes" if value else "no"
