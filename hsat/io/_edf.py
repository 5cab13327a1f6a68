"""Decode EDF, EDF+C and EDF+D files with numpy.

The header is parsed and validated field by field (EDF spec, Kemp et al. 1992; EDF+,
Kemp & Olivan 2003; layout in standards.md §7). All data records are decoded at once
(``np.frombuffer`` + one reshape to records x samples), scaled digital -> physical with
``phys = (dig - dmin) * (pmax - pmin) / (dmax - dmin) + pmin`` (standards.md §7), and
placed on one time axis in seconds. For EDF+ the first TAL of every record in the first
``EDF Annotations`` signal gives the record's start (time-keeping); records of an EDF+D
file are placed at those times and the spans between them become NaN / invalid samples
and ``EDF+D gap`` intervals, never closed up.

Samples at a channel's digital minimum are marked invalid ("no value"): common practice,
standards.md §7 ("probe-off is often encoded as out-of-range values (0, >100, or the
digital extremes)"); hsat's own writer stores NaN there.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

from hsat.errors import UnreadableInput
from hsat.io._edf_header import (
    EdfChannelHeader,
    check_size,
    header_signals,
    identification,
    integer_field,
    number_field,
    start_time,
    text_field,
)
from hsat.io._tal import TIME_TOL_S, read_annotations, record_times
from hsat.recording import Annotation, Interval, Patient, Signal

ANNOTATION_LABEL = "EDF Annotations"
_CHUNK = 8 * 1024 * 1024


@dataclass(frozen=True)
class EdfFile:
    """Everything decoded from one EDF/EDF+ file, before channels get roles.

    ``signals`` hold every ordinary channel (annotation channels excluded) in file order,
    with ``role`` empty; ``valid`` is False in EDF+D gaps and at the digital minimum.
    """

    path: str
    file_type: str
    start: datetime
    duration_s: float
    record_duration_s: float
    n_records: int
    channels: tuple[EdfChannelHeader, ...]
    signals: tuple[Signal, ...]
    annotations: tuple[Annotation, ...]
    gaps: tuple[Interval, ...]
    patient: Patient
    equipment: str
    recording_code: str
    sha256: str
    warnings: tuple[str, ...]


def _read_bytes(path: Path) -> tuple[bytearray, str]:
    """The whole file and its SHA-256, hashed chunk by chunk while reading."""
    try:
        size = path.stat().st_size
    except FileNotFoundError:
        raise UnreadableInput(path, "no such file") from None
    except OSError as exc:
        raise UnreadableInput(path, f"cannot read ({exc.strerror})") from None
    if path.is_dir():
        raise UnreadableInput(path, "is a folder, not an EDF file")
    digest = hashlib.sha256()
    buf = bytearray(size)
    view = memoryview(buf)
    try:
        with path.open("rb") as fh:
            pos = 0
            while pos < size:
                got = fh.readinto(view[pos : pos + _CHUNK])
                if not got:
                    break
                digest.update(view[pos : pos + got])
                pos += got
    except OSError as exc:
        raise UnreadableInput(path, f"cannot read ({exc.strerror})") from None
    view.release()
    if pos < size:  # the file shrank while being read
        del buf[pos:]
    return buf, digest.hexdigest()


def read_edf(path: str | Path) -> EdfFile:
    """Read and validate an EDF/EDF+ file.

    Raises
    ------
    UnreadableInput
        Missing file, not EDF, truncated file, a record count that disagrees with the
        file size, corrupt header fields or time-keeping.
    """
    p = Path(path)
    buf, sha = _read_bytes(p)
    size = len(buf)
    if size < 256:
        raise UnreadableInput(
            p, f"not an EDF file: {size} bytes, shorter than the 256-byte EDF header"
        )
    if buf[:8] == b"\xffBIOSEMI":
        raise UnreadableInput(p, "is a BDF (24-bit) file; only EDF/EDF+ are read")
    if buf[:8] != b"0       ":
        raise UnreadableInput(
            p, "not an EDF file (it does not start with the EDF version field '0')"
        )
    ns = integer_field(p, buf[252:256], "number of signals")
    header_bytes = integer_field(p, buf[184:192], "number of header bytes")
    if ns < 1:
        raise UnreadableInput(p, f"corrupt EDF header: {ns} signals")
    if header_bytes != 256 * (ns + 1):
        raise UnreadableInput(
            p,
            (
                f"corrupt EDF header: header size field says {header_bytes} bytes but "
                f"{ns} signals need {256 * (ns + 1)}"
            ),
        )
    if size < header_bytes:
        raise UnreadableInput(
            p, f"truncated: the file ends inside its header ({size} of {header_bytes} bytes)"
        )
    reserved = text_field(buf[192:236])
    file_type = (
        "EDF+D"
        if reserved.startswith("EDF+D")
        else "EDF+C"
        if reserved.startswith("EDF+C")
        else "EDF"
    )
    is_plus = file_type != "EDF"
    dur = number_field(p, buf[244:252], "data record duration")
    n_records_field = integer_field(p, buf[236:244], "number of data records")
    channels = header_signals(p, buf[:header_bytes], ns)
    warnings: list[str] = []
    head = np.frombuffer(buf, dtype=np.uint8, count=header_bytes)
    if np.any((head < 32) | (head > 126)):
        warnings.append(
            "header holds characters outside printable US-ASCII (EDF spec); read as Latin-1"
        )
    if any(not c.label for c in channels):
        warnings.append("a signal has an empty label")
    is_ann = [is_plus and c.label == ANNOTATION_LABEL for c in channels]
    if is_plus and not any(is_ann):
        warnings.append(
            f"{file_type} file without an '{ANNOTATION_LABEL}' signal: read as plain EDF"
        )
        file_type, is_plus = "EDF", False
    if dur <= 0:
        raise UnreadableInput(p, f"data record duration is {dur:g} s: no signal data to read")
    sprs = np.array([c.samples_per_record for c in channels])
    record_samples = int(sprs.sum())
    if record_samples == 0:
        raise UnreadableInput(p, "zero-length: no channel has any samples")
    n_records = check_size(p, size, header_bytes, 2 * record_samples, n_records_field, warnings)

    records = np.frombuffer(
        buf, dtype="<i2", offset=header_bytes, count=n_records * record_samples
    ).reshape(n_records, record_samples)
    offsets = np.concatenate([[0], np.cumsum(sprs)])
    ann_blocks = [
        records[:, offsets[i] : offsets[i + 1]].view(np.uint8)
        for i in range(ns)
        if is_ann[i] and sprs[i] > 0
    ]
    tk, raw_anns = read_annotations(p, ann_blocks, is_plus, n_records)
    times, offset, contiguous = record_times(p, tk, n_records, dur, file_type, warnings)
    duration_s = float(times[-1] + dur)

    gaps: list[Interval] = []
    if not contiguous:
        ends = times[:-1] + dur
        for i in np.flatnonzero(times[1:] - ends > TIME_TOL_S).tolist():
            gaps.append(Interval(float(ends[i]), float(times[i + 1]), "EDF+D gap"))

    signals: list[Signal] = []
    for i, ch in enumerate(channels):
        if is_ann[i]:
            continue
        fs = ch.samples_per_record / dur
        if ch.samples_per_record == 0:
            signals.append(
                Signal(
                    role="",
                    label=ch.label,
                    fs=1.0 / dur,
                    data=np.empty(0),
                    unit=ch.unit,
                    valid=np.empty(0, dtype=bool),
                    transducer=ch.transducer,
                    prefilter=ch.prefilter,
                )
            )
            continue
        dig = records[:, offsets[i] : offsets[i + 1]]
        scalable = ch.digital_max > ch.digital_min and ch.physical_max != ch.physical_min
        if scalable:
            gain = (ch.physical_max - ch.physical_min) / (ch.digital_max - ch.digital_min)
            phys = np.subtract(dig, ch.digital_min, dtype=np.float64)  # exact: integers
            phys *= gain
            phys += ch.physical_min
            valid = dig != ch.digital_min
        else:
            warnings.append(
                f"signal {ch.label!r} has an empty physical or digital range: no usable values"
            )
            phys = np.full(dig.shape, np.nan)
            valid = np.zeros(dig.shape, dtype=bool)
        if contiguous:
            data, mask = phys.reshape(-1), valid.reshape(-1)
        else:
            n_total = int(round(duration_s * fs))
            data = np.full(n_total, np.nan)
            mask = np.zeros(n_total, dtype=bool)
            idx = np.rint(times * fs).astype(np.int64)[:, None] + np.arange(ch.samples_per_record)
            idx = np.minimum(idx, n_total - 1)
            data[idx] = phys
            mask[idx] = valid
        signals.append(
            Signal(
                role="",
                label=ch.label,
                fs=fs,
                data=data,
                unit=ch.unit,
                valid=mask,
                transducer=ch.transducer,
                prefilter=ch.prefilter,
            )
        )

    patient_id, recording_id = text_field(buf[8:88]), text_field(buf[88:168])
    start = start_time(p, buf[168:176], buf[176:184], recording_id if is_plus else "")
    start += timedelta(seconds=offset)
    patient, equipment, code = identification(patient_id, recording_id, is_plus)
    annotations = tuple(
        sorted(
            (Annotation(a.onset_s - offset, a.duration_s, a.text) for a in raw_anns),
            key=lambda a: a.onset_s,
        )
    )
    return EdfFile(
        path=str(p),
        file_type=file_type,
        start=start,
        duration_s=duration_s,
        record_duration_s=dur,
        n_records=n_records,
        channels=tuple(channels),
        signals=tuple(signals),
        annotations=annotations,
        gaps=tuple(gaps),
        patient=patient,
        equipment=equipment,
        recording_code=code,
        sha256=sha,
        warnings=tuple(warnings),
    )
