"""Collect the identifiers of one study, to scrub them and to prove they are gone.

Sources: the EDF header's patient and recording fields (read here from the raw bytes, on
purpose independent of ``hsat.io``: a check must not trust the code it checks), the
summary's patient and study fields, and the intake sidecar. Dates are expanded into the
spellings they are commonly written in.
"""

from __future__ import annotations

import re
import tomllib
from datetime import date, datetime
from pathlib import Path
from typing import Any

_SPLIT = re.compile(r"[\s_,;:()\[\]/\\|]+")
_DIGIT = re.compile(r"\d")
_MONTHS = ("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC")
#: Shortest token treated as an identifier: shorter ones (initials, "M", "X") would match
#: everywhere and identify no one.
MIN_TOKEN = 3
#: EDF+ placeholders and field keywords (EDF+ specification, section 2.1.3; from memory).
_EDF_WORDS = {"x", "startdate", "m", "f"}


def date_spellings(day: date) -> set[str]:
    """The ways a date is commonly written: ISO, EDF (dd.mm.yy), EDF+ (dd-MMM-yyyy),
    day-first and month-first with slashes, and compact yyyymmdd."""
    return {
        day.isoformat(), day.strftime("%d.%m.%y"), day.strftime("%d.%m.%Y"),
        f"{day.day:02d}-{_MONTHS[day.month - 1]}-{day.year}",
        day.strftime("%d/%m/%Y"), day.strftime("%m/%d/%Y"), day.strftime("%Y%m%d"),
    }


def _parse_date(text: str) -> date | None:
    text = text.strip()
    for fmt in ("%Y-%m-%d", "%d-%b-%Y", "%d.%m.%y", "%d.%m.%Y"):
        try:
            return datetime.strptime(text[:11] if fmt == "%d-%b-%Y" else text[:10],
                                     fmt).date()
        except ValueError:
            continue
    return None


def tokens(text: str) -> set[str]:
    """Words of a free-text identifier long enough to identify (``Doe, Jane`` -> both)."""
    return {t for t in _SPLIT.split(text) if len(t) >= MIN_TOKEN
            and t.lower() not in _EDF_WORDS}


def read_edf_identification(path: Path) -> tuple[str, str, str]:
    """The raw patient field, recording field and start date of an EDF header."""
    with open(path, "rb") as fh:
        head = fh.read(176)
    if len(head) < 176:
        return "", "", ""
    decode = lambda raw: raw.decode("latin-1").strip()  # noqa: E731
    return decode(head[8:88]), decode(head[88:168]), decode(head[168:176])


def _from_edf_fields(patient_field: str, recording_field: str, start_date: str
                     ) -> tuple[set[str], set[date]]:
    found: set[str] = set()
    dates: set[date] = set()
    parts = patient_field.split()
    if len(parts) >= 4:  # EDF+: code sex birthdate name
        found |= tokens(parts[0]) | tokens(" ".join(parts[3:]))
        if (born := _parse_date(parts[2])) is not None:
            dates.add(born)
    else:
        found |= tokens(patient_field)
    rec = recording_field.split()
    if len(rec) >= 2 and rec[0] == "Startdate":  # EDF+: Startdate date admin tech equip
        if (started := _parse_date(rec[1])) is not None:
            dates.add(started)
        found |= tokens(" ".join(rec[2:4]))
        found |= {t for t in tokens(" ".join(rec[4:])) if _DIGIT.search(t)}
    else:  # plain EDF: free text; serial-like words identify a device
        found |= {t for t in tokens(recording_field) if _DIGIT.search(t)}
    if (started := _parse_date(start_date)) is not None:
        dates.add(started)
    return found, dates


def _from_intake(path: Path) -> tuple[set[str], set[date]]:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError, UnicodeDecodeError):
        return set(), set()
    found: set[str] = set()
    dates: set[date] = set()
    for table, keys in (("patient", ("name", "id")),
                        ("study", ("kit_serial", "referring_clinician",
                                   "interpreting_physician"))):
        section = data.get(table) or {}
        found |= {t for key in keys if isinstance(section.get(key), str)
                  for t in tokens(section[key])}
        for key in ("birthdate", "study_date"):
            value = section.get(key)
            parsed = value if isinstance(value, date) else _parse_date(str(value or ""))
            if parsed is not None:
                dates.add(parsed)
    return found, dates


def _from_summary(summary: dict[str, Any]) -> tuple[set[str], set[date]]:
    patient = summary.get("patient") or {}
    study = summary.get("study") or {}
    kit = summary.get("kit") or {}
    found: set[str] = set()
    dates: set[date] = set()
    for value in (patient.get("code"), patient.get("name"), study.get("recording_code"),
                  kit.get("kit_serial") if isinstance(kit, dict) else None,
                  kit.get("referring_clinician") if isinstance(kit, dict) else None,
                  kit.get("interpreting_physician") if isinstance(kit, dict) else None):
        if isinstance(value, str):
            found |= tokens(value)
    input_file = study.get("input_file")
    if isinstance(input_file, str) and input_file:
        found |= {t for t in tokens(Path(input_file).stem) if _DIGIT.search(t)}
    for value in (patient.get("birthdate"), study.get("start_time")):
        if isinstance(value, str) and (parsed := _parse_date(value)) is not None:
            dates.add(parsed)
    return found, dates


def study_identifiers(summary: dict[str, Any], source: Path | None,
                      intake: Path | None) -> set[str]:
    """Every identifier string of one study (words and date spellings)."""
    found, dates = _from_summary(summary)
    if source is not None and source.is_file():
        more, more_dates = _from_edf_fields(*read_edf_identification(source))
        found |= more | {t for t in tokens(source.stem) if _DIGIT.search(t)}
        dates |= more_dates
    if intake is not None and intake.is_file():
        more, more_dates = _from_intake(intake)
        found |= more
        dates |= more_dates
    for day in dates:
        found |= date_spellings(day)
    return found


def identifier_pattern(identifiers: set[str]) -> re.Pattern[str] | None:
    """A case-insensitive pattern matching any identifier as a whole word."""
    if not identifiers:
        return None
    alternatives = "|".join(re.escape(i) for i in sorted(identifiers, key=len, reverse=True))
    return re.compile(rf"(?<![A-Za-z0-9])(?:{alternatives})(?![A-Za-z0-9])", re.IGNORECASE)
