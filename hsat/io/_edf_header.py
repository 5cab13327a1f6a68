"""EDF/EDF+ header fields: numbers, dates, identification subfields, signal headers.

Field layout per the EDF specification (Kemp et al. 1992) and EDF+ (Kemp & Olivan 2003),
standards.md §7. Every problem raises ``UnreadableInput`` naming the file and the field.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path

from hsat.errors import UnreadableInput
from hsat.recording import Patient

_MONTHS = {
    m: i + 1
    for i, m in enumerate(
        ("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC")
    )
}


@dataclass(frozen=True)
class EdfChannelHeader:
    """The per-signal header fields of one EDF channel."""

    label: str
    transducer: str
    unit: str
    physical_min: float
    physical_max: float
    digital_min: int
    digital_max: int
    prefilter: str
    samples_per_record: int


def text_field(raw: bytes) -> str:
    return raw.decode("latin-1").strip()


def number_field(path: Path, raw: bytes, what: str) -> float:
    text = text_field(raw)
    try:
        value = float(text)
    except ValueError:
        raise UnreadableInput(
            path, f"corrupt EDF header: {what} is {text!r}, not a number"
        ) from None
    if not math.isfinite(value):
        raise UnreadableInput(path, f"corrupt EDF header: {what} is {text!r}")
    return value


def integer_field(path: Path, raw: bytes, what: str) -> int:
    value = number_field(path, raw, what)
    if value != int(value):
        raise UnreadableInput(
            path, f"corrupt EDF header: {what} is {text_field(raw)!r}, not a whole number"
        )
    return int(value)


def _edf_date(text: str) -> date | None:
    """An EDF+ dd-MMM-yyyy date, or None for 'X' / unparseable."""
    m = re.fullmatch(r"(\d{1,2})-([A-Za-z]{3})-(\d{4})", text)
    if not m or m.group(2).upper() not in _MONTHS:
        return None
    try:
        return date(int(m.group(3)), _MONTHS[m.group(2).upper()], int(m.group(1)))
    except ValueError:
        return None


def _subfield(text: str) -> str:
    return "" if text == "X" else text.replace("_", " ")


def start_time(path: Path, date_raw: bytes, time_raw: bytes, recording_id: str) -> datetime:
    """Header start date/time; a 4-digit year from the EDF+ 'Startdate' wins.

    Two-digit years: 85-99 -> 1985-1999, 00-84 -> 2000-2084 (EDF+ clipping-date rule,
    standards.md §7, from memory).
    """
    d_text, t_text = text_field(date_raw), text_field(time_raw)
    dm = re.fullmatch(r"(\d\d)\.(\d\d)\.(\d\d)", d_text)
    tm = re.fullmatch(r"(\d\d)\.(\d\d)\.(\d\d)", t_text)
    if not dm:
        raise UnreadableInput(path, f"corrupt EDF header: start date {d_text!r} is not dd.mm.yy")
    if not tm:
        raise UnreadableInput(path, f"corrupt EDF header: start time {t_text!r} is not hh.mm.ss")
    yy = int(dm.group(3))
    year = 1900 + yy if yy >= 85 else 2000 + yy
    parts = recording_id.split()
    if len(parts) >= 2 and parts[0] == "Startdate":
        full = _edf_date(parts[1])
        if full is not None and full.year % 100 == yy:
            year = full.year
    try:
        return datetime(
            year,
            int(dm.group(2)),
            int(dm.group(1)),
            int(tm.group(1)),
            int(tm.group(2)),
            int(tm.group(3)),
        )
    except ValueError as exc:
        raise UnreadableInput(
            path, f"corrupt EDF header: start {d_text} {t_text} ({exc})"
        ) from None


def identification(patient_id: str, recording_id: str, is_plus: bool) -> tuple[Patient, str, str]:
    """Patient, equipment and admin code from the EDF+ identification subfields."""
    if not is_plus:
        return Patient(code=patient_id), "", recording_id
    p = patient_id.split()
    patient = Patient(
        code=_subfield(p[0]) if len(p) > 0 else "",
        sex=_subfield(p[1]) if len(p) > 1 else "",
        birthdate=_edf_date(p[2]) if len(p) > 2 else None,
        name=_subfield(p[3]) if len(p) > 3 else "",
    )
    r = recording_id.split()
    if len(r) >= 2 and r[0] == "Startdate":
        code = _subfield(r[2]) if len(r) > 2 else ""
        equipment = " ".join(_subfield(x) for x in r[4:] if x != "X")
        return patient, equipment, code
    return patient, "", recording_id


def header_signals(path: Path, head: bytes, ns: int) -> list[EdfChannelHeader]:
    base = 256
    fields = (
        (16, "label"),
        (80, "transducer"),
        (8, "unit"),
        (8, "pmin"),
        (8, "pmax"),
        (8, "dmin"),
        (8, "dmax"),
        (80, "prefilter"),
        (8, "spr"),
        (32, "reserved"),
    )
    values: dict[str, list[bytes]] = {}
    for width, name in fields:
        values[name] = [head[base + i * width : base + (i + 1) * width] for i in range(ns)]
        base += width * ns
    channels = []
    for i in range(ns):
        label = text_field(values["label"][i])
        where = f"signal {i + 1} ({label!r})"
        spr = integer_field(path, values["spr"][i], f"{where} samples per record")
        if spr < 0:
            raise UnreadableInput(path, f"corrupt EDF header: {where} has {spr} samples per record")
        channels.append(
            EdfChannelHeader(
                label=label,
                transducer=text_field(values["transducer"][i]),
                unit=text_field(values["unit"][i]),
                physical_min=number_field(path, values["pmin"][i], f"{where} physical minimum"),
                physical_max=number_field(path, values["pmax"][i], f"{where} physical maximum"),
                digital_min=integer_field(path, values["dmin"][i], f"{where} digital minimum"),
                digital_max=integer_field(path, values["dmax"][i], f"{where} digital maximum"),
                prefilter=text_field(values["prefilter"][i]),
                samples_per_record=spr,
            )
        )
    return channels


def check_size(
    path: Path, size: int, header_bytes: int, record_bytes: int, n_records: int, warnings: list[str]
) -> int:
    """Validate the record count against the file size; return the count to use."""
    data_bytes = size - header_bytes
    if n_records == -1:
        n_records = data_bytes // record_bytes
        warnings.append(
            f"header gives no record count; {n_records} records found from the file size"
        )
    if n_records < 0:
        raise UnreadableInput(path, f"corrupt EDF header: {n_records} data records")
    expected = n_records * record_bytes
    if data_bytes < expected:
        whole = data_bytes // record_bytes
        if data_bytes % record_bytes:
            raise UnreadableInput(
                path,
                (
                    f"truncated: the file ends inside data record {whole + 1} of {n_records} "
                    f"({expected - data_bytes} bytes missing)"
                ),
            )
        raise UnreadableInput(
            path,
            (
                f"header says {n_records} data records but the file size holds {whole} "
                f"({record_bytes} bytes each)"
            ),
        )
    if data_bytes > expected:
        raise UnreadableInput(
            path,
            (
                f"header says {n_records} data records ({expected} bytes) but the file holds "
                f"{data_bytes} bytes of data"
            ),
        )
    if n_records == 0:
        raise UnreadableInput(path, "holds no data records (zero-length recording)")
    return n_records
