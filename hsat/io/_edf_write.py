"""Write EDF, EDF+C and EDF+D files (used by the synthetic generator and by tests).

Layout follows the EDF specification (Kemp et al. 1992) and EDF+ (Kemp & Olivan 2003),
as collected in standards.md §7: a 256-byte fixed header, 256 bytes per signal, then
data records of 2-byte little-endian integers, each signal with its own samples per record.
EDF+ files carry an ``EDF Annotations`` signal whose first TAL in every data record is the
record's time-keeping annotation (``+<onset>\\x14\\x14\\x00``).

Physical values map linearly to digital values,
``dig = (phys - pmin) * (dmax - dmin) / (pmax - pmin) + dmin`` (standards.md §7). hsat keeps
the digital minimum for "no value": NaN is written as the digital minimum and finite data
is mapped onto ``dmin + 1 .. dmax`` (the physical range is padded so that real data never
lands on ``dmin``). The reader marks digital-minimum samples invalid.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from datetime import date, datetime
from pathlib import Path
from typing import Literal

import numpy as np

from hsat.outputs import atomic_write_bytes
from hsat.recording import Annotation, Interval, Patient, Signal

DIGITAL_MIN = -32768
DIGITAL_MAX = 32767
ANNOTATION_LABEL = "EDF Annotations"
_MONTHS = ("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC")


def _field(text: str, width: int) -> bytes:
    """A header field: printable US-ASCII, left-justified, space-padded (EDF spec)."""
    raw = text.encode("ascii", errors="replace")
    if len(raw) > width:
        raw = raw[:width]
    if any(b < 32 or b > 126 for b in raw):
        raise ValueError(f"EDF header text {text!r} holds non-printable characters")
    return raw.ljust(width, b" ")


def _edf_subfield(text: str) -> str:
    """An EDF+ identification subfield: spaces become '_', empty becomes 'X'."""
    cleaned = "".join(ch if 32 <= ord(ch) < 127 else "_" for ch in text.strip())
    return cleaned.replace(" ", "_") or "X"


def _edf_date(d: date | None) -> str:
    if d is None:
        return "X"
    return f"{d.day:02d}-{_MONTHS[d.month - 1]}-{d.year:04d}"


def format_number(
    value: float, width: int = 8, direction: Literal["down", "up", "near"] = "near"
) -> str:
    """Format ``value`` in at most ``width`` ASCII characters.

    ``direction`` says which way to round when digits must be dropped, so that a padded
    physical minimum never rises above the data (``down``) and a maximum never falls
    below it (``up``).
    """
    if not math.isfinite(value):
        raise ValueError(f"cannot write non-finite number {value!r} in an EDF header")
    if value == int(value) and len(str(int(value))) <= width:
        return str(int(value))
    for decimals in range(width, -1, -1):
        scale = 10.0**decimals
        if direction == "down":
            rounded = math.floor(value * scale) / scale
        elif direction == "up":
            rounded = math.ceil(value * scale) / scale
        else:
            rounded = round(value, decimals)
        text = f"{rounded:.{decimals}f}"
        if "." in text:
            text = text.rstrip("0").rstrip(".")
        if text in ("-0", ""):
            text = "0"
        if len(text) <= width:
            return text
    raise ValueError(f"number {value!r} does not fit in {width} characters")


def _physical_range(
    sig: Signal, given: Mapping[str, tuple[float, float]] | None
) -> tuple[str, str]:
    """Header strings of the physical min/max for one signal."""
    if given is not None and sig.label in given:
        lo, hi = given[sig.label]
        if not hi > lo:
            raise ValueError(f"signal {sig.label!r}: physical range must have max > min")
        return format_number(lo, direction="down"), format_number(hi, direction="up")
    finite = sig.data[np.isfinite(sig.data)]
    if finite.size == 0:
        lo, hi = -1.0, 1.0
    else:
        lo, hi = float(finite.min()), float(finite.max())
    # Pad so finite data stays clear of the digital minimum reserved for "no value".
    pad = max((hi - lo) * 0.002, abs(hi) * 1e-6, abs(lo) * 1e-6, 1e-3)
    if hi - lo < 1e-9:
        pad = max(abs(lo) * 0.01, 1.0)
    return format_number(lo - pad, direction="down"), format_number(hi + pad, direction="up")


def _digitise(data: np.ndarray, pmin: float, pmax: float) -> np.ndarray:
    """Physical -> int16, NaN -> digital minimum, finite values clipped to dmin+1..dmax."""
    gain = (DIGITAL_MAX - DIGITAL_MIN) / (pmax - pmin)
    dig = np.subtract(data, pmin, dtype=float)
    missing = np.isnan(dig)
    dig *= gain
    dig += DIGITAL_MIN
    np.rint(dig, out=dig)
    np.clip(dig, DIGITAL_MIN + 1, DIGITAL_MAX, out=dig)
    dig[missing] = DIGITAL_MIN
    return dig.astype("<i2")


def _onset_text(t: float) -> str:
    """Seconds as TAL text: '+' sign, '.' decimal point, no exponent (EDF+ spec)."""
    text = str(int(t)) if t == int(t) else f"{t:.6f}".rstrip("0").rstrip(".")
    return text if text.startswith("-") else "+" + text


def _tal(onset_s: float, duration_s: float, texts: Sequence[str]) -> bytes:
    """One time-stamped annotation list (EDF+ spec; standards.md §7)."""
    out = _onset_text(onset_s).encode("ascii")
    if duration_s > 0:
        out += b"\x15" + _onset_text(duration_s)[1:].encode("ascii")
    out += b"\x14"
    for text in texts:
        out += text.encode("utf-8").replace(b"\x14", b" ").replace(b"\x00", b" ") + b"\x14"
    return out + b"\x00"


def _pack_annotations(
    record_starts: np.ndarray, record_duration_s: float, annotations: Sequence[Annotation]
) -> np.ndarray:
    """Bytes of the annotation signal per written record, shape (n_records, n_bytes).

    Every record starts with its time-keeping TAL; annotations go into the record holding
    their onset, overflowing into the next records when one fills up.
    """
    n = len(record_starts)
    keepers = [(_onset_text(t) + "\x14\x14\x00").encode("ascii") for t in record_starts.tolist()]
    ann_tals = sorted(
        ((a.onset_s, _tal(a.onset_s, a.duration_s, [a.text])) for a in annotations),
        key=lambda item: item[0],
    )
    base = max(len(k) for k in keepers)
    longest = max((len(t) for _, t in ann_tals), default=0)
    capacity = base + max(longest, 12)
    while True:
        contents = [bytearray(k) for k in keepers]
        home = np.searchsorted(record_starts, [o for o, _ in ann_tals], side="right") - 1
        placed = True
        cursor = 0
        for (_, tal), want in zip(ann_tals, home, strict=True):
            idx = max(int(want), cursor, 0)
            while idx < n and len(contents[idx]) + len(tal) > capacity:
                idx += 1
            if idx >= n:
                placed = False
                break
            contents[idx] += tal
            cursor = idx
        if placed:
            break
        capacity *= 2
    n_bytes = capacity + (capacity % 2)
    joined = b"".join(bytes(c).ljust(n_bytes, b"\x00") for c in contents)
    return np.frombuffer(joined, dtype=np.uint8).reshape(n, n_bytes)


def _samples_per_record(sig: Signal, record_duration_s: float) -> int:
    spr = sig.fs * record_duration_s
    if abs(spr - round(spr)) > 1e-6 or round(spr) < 1:
        raise ValueError(
            f"signal {sig.label!r}: fs {sig.fs} Hz x record duration {record_duration_s} s "
            "must be a whole number of samples"
        )
    return int(round(spr))


def write_edf(
    path: str | Path,
    signals: Sequence[Signal],
    *,
    start: datetime,
    annotations: Sequence[Annotation] = (),
    patient: Patient = Patient(),  # noqa: B008  (frozen dataclass: a safe default)
    equipment: str = "",
    recording_code: str = "",
    record_duration_s: float = 1.0,
    file_type: Literal["EDF", "EDF+C", "EDF+D"] = "EDF+C",
    gaps: Sequence[Interval] = (),
    physical_ranges: Mapping[str, tuple[float, float]] | None = None,
) -> Path:
    """Write ``signals`` to an EDF/EDF+ file atomically and return its path.

    Parameters
    ----------
    path : target file.
    signals : channels on one time axis starting at 0 s; ``fs * record_duration_s`` must
        be a whole number. Signals shorter than the longest are padded with "no value".
        Labels longer than the 16 characters of the EDF label field are cut to 16.
    start : recording start (header date/time; sub-second part goes into the first
        time-keeping TAL for EDF+).
    annotations : EDF+ annotations (ignored-not-allowed for plain EDF: raises).
    patient, equipment, recording_code : EDF+ identification subfields
        (patient: code sex birthdate name; recording: Startdate dd-MMM-yyyy admincode
        technician equipment), standards.md §7.
    record_duration_s : data-record duration.
    file_type : ``EDF`` (no annotation signal), ``EDF+C`` or ``EDF+D``.
    gaps : for EDF+D, records lying wholly inside one of these spans are not written;
        every written record carries its start in its time-keeping TAL.
    physical_ranges : label -> (min, max); defaults to the data's finite range, padded.
    """
    if not signals:
        raise ValueError("write_edf needs at least one signal")
    if record_duration_s <= 0:
        raise ValueError("record_duration_s must be > 0")
    if file_type == "EDF" and annotations:
        raise ValueError("plain EDF cannot carry annotations; use EDF+C or EDF+D")
    if gaps and file_type != "EDF+D":
        raise ValueError("gaps need file_type='EDF+D'")
    for sig in signals:
        if sig.t0_s != 0:
            raise ValueError(f"signal {sig.label!r}: write_edf needs t0_s == 0")
    # The EDF label field holds 16 characters: longer labels are cut (EDF spec).
    written_labels = [s.label[:16] for s in signals]
    if len(set(written_labels)) != len(written_labels) and physical_ranges:
        raise ValueError("duplicate labels cannot be given separate physical ranges")

    sprs = [_samples_per_record(s, record_duration_s) for s in signals]
    n_records = max(
        math.ceil(len(s.data) / spr - 1e-9) for s, spr in zip(signals, sprs, strict=True)
    )
    n_records = max(n_records, 1)
    record_starts = np.arange(n_records) * record_duration_s
    keep = np.ones(n_records, dtype=bool)
    for gap in gaps:
        keep &= ~(
            (record_starts >= gap.start_s - 1e-9)
            & (record_starts + record_duration_s <= gap.end_s + 1e-9)
        )
    if not keep.any():
        raise ValueError("every data record lies inside a gap")

    is_plus = file_type != "EDF"
    blocks: list[np.ndarray] = []
    headers: list[dict[str, str]] = []
    for sig, spr in zip(signals, sprs, strict=True):
        pmin_s, pmax_s = _physical_range(sig, physical_ranges)
        padded = np.full(n_records * spr, np.nan)
        data = np.asarray(sig.data, dtype=float)
        padded[: len(data)] = data
        dig = _digitise(padded, float(pmin_s), float(pmax_s)).reshape(n_records, spr)
        blocks.append(dig[keep].view(np.uint8).reshape(int(keep.sum()), spr * 2))
        headers.append(
            {
                "label": sig.label[:16],
                "transducer": sig.transducer,
                "unit": sig.unit,
                "pmin": pmin_s,
                "pmax": pmax_s,
                "dmin": str(DIGITAL_MIN),
                "dmax": str(DIGITAL_MAX),
                "prefilter": sig.prefilter,
                "spr": str(spr),
            }
        )
    if is_plus:
        frac = start.microsecond / 1e6
        ann_block = _pack_annotations(
            record_starts[keep] + frac,
            record_duration_s,
            [Annotation(a.onset_s + frac, a.duration_s, a.text) for a in annotations],
        )
        blocks.append(ann_block)
        headers.append(
            {
                "label": ANNOTATION_LABEL,
                "transducer": "",
                "unit": "",
                "pmin": "-1",
                "pmax": "1",
                "dmin": str(DIGITAL_MIN),
                "dmax": str(DIGITAL_MAX),
                "prefilter": "",
                "spr": str(ann_block.shape[1] // 2),
            }
        )

    ns = len(headers)
    if is_plus:
        patient_id = " ".join(
            [
                _edf_subfield(patient.code),
                _edf_subfield(patient.sex or "X"),
                _edf_date(patient.birthdate),
                _edf_subfield(patient.name),
            ]
        )
        recording_id = " ".join(
            [
                "Startdate",
                _edf_date(start.date()),
                _edf_subfield(recording_code),
                "X",
                _edf_subfield(equipment),
            ]
        )
    else:
        patient_id = " ".join(p for p in (patient.code, patient.name) if p)
        recording_id = " ".join(p for p in (recording_code, equipment) if p)
    fixed = b"".join(
        [
            _field("0", 8),
            _field(patient_id, 80),
            _field(recording_id, 80),
            _field(start.strftime("%d.%m.") + f"{start.year % 100:02d}", 8),
            _field(start.strftime("%H.%M.%S"), 8),
            _field(str(256 * (ns + 1)), 8),
            _field(file_type if is_plus else "", 44),
            _field(str(int(keep.sum())), 8),
            _field(format_number(record_duration_s), 8),
            _field(str(ns), 4),
        ]
    )
    widths = (
        ("label", 16),
        ("transducer", 80),
        ("unit", 8),
        ("pmin", 8),
        ("pmax", 8),
        ("dmin", 8),
        ("dmax", 8),
        ("prefilter", 80),
        ("spr", 8),
    )
    per_signal = b"".join(
        b"".join(_field(h[key], width) for h in headers) for key, width in widths
    ) + b" " * (32 * ns)
    records = np.concatenate(blocks, axis=1)
    return atomic_write_bytes(path, fixed + per_signal + records.tobytes())
