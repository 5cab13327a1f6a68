"""EDF/EDF+ reading and writing, checked against pyedflib and the EDF/EDF+ specification.

References: pyedflib (a general-purpose EDF library) writes files that hsat must read,
and reads files hsat writes; the byte layout, scaling formula, TAL syntax and date rules
are those of the EDF (Kemp et al. 1992) and EDF+ (Kemp & Olivan 2003) specifications as
collected in standards.md §7.
"""

from __future__ import annotations

import hashlib
from datetime import date, datetime
from pathlib import Path

import numpy as np
import pyedflib
import pytest

from hsat.io import read_edf, write_edf
from hsat.recording import Annotation, Interval, Patient, Signal

START = datetime(2025, 11, 3, 22, 41, 7)


def _step(pmin: float, pmax: float, dmin: int = -32768, dmax: int = 32767) -> float:
    """One quantisation step: (pmax - pmin) / (dmax - dmin) (standards.md §7 scaling)."""
    return (pmax - pmin) / (dmax - dmin)


def _channels(seconds: int = 120, seed: int = 1) -> dict[str, tuple[float, np.ndarray, str]]:
    rng = np.random.default_rng(seed)
    t100 = np.arange(seconds * 100) / 100
    t25 = np.arange(seconds * 25) / 25
    return {
        "Resp nasal press": (100.0, 3 * np.sin(2 * np.pi * 0.25 * t100)
                             + 0.1 * rng.normal(size=t100.size), "cmH2O"),
        "Resp thorax": (25.0, 400 * np.sin(2 * np.pi * 0.25 * t25 + 0.3), "uV"),
        "SpO2": (1.0, 95 + np.round(rng.normal(0, 1, seconds)), "%"),
    }


def _pyedflib_file(path: Path, channels: dict, *, file_type: int, annotations=(),
                   ranges: dict | None = None) -> dict[str, tuple[float, float]]:
    """Write ``channels`` with pyedflib; return the physical ranges used."""
    used = {}
    headers = []
    for label, (fs, data, unit) in channels.items():
        lo, hi = (ranges or {}).get(label, (float(np.floor(data.min() - 1)),
                                            float(np.ceil(data.max() + 1))))
        used[label] = (lo, hi)
        headers.append({"label": label, "dimension": unit, "sample_frequency": fs,
                        "physical_min": lo, "physical_max": hi, "digital_min": -32768,
                        "digital_max": 32767, "transducer": "", "prefilter": ""})
    writer = pyedflib.EdfWriter(str(path), len(channels), file_type=file_type)
    try:
        writer.setSignalHeaders(headers)
        writer.setStartdatetime(START)
        if file_type != pyedflib.FILETYPE_EDF:
            writer.setPatientCode("PX-7")
            writer.setPatientName("Ida_Invented")  # EDF+: no spaces
            writer.setSex(0)
            writer.setBirthdate(date(1961, 4, 9))
            writer.setEquipment("kit_A2")
            writer.setAdmincode("ST-77")
        writer.writeSamples([data for _, data, _ in channels.values()])
        for onset, duration, text in annotations:
            writer.writeAnnotation(onset, duration, text)
    finally:
        writer.close()
    return used


def test_pyedflib_edfplus_file_reads_within_one_quantisation_step(tmp_path):
    channels = _channels()
    path = tmp_path / "py.edf"
    ranges = _pyedflib_file(path, channels, file_type=pyedflib.FILETYPE_EDFPLUS,
                            annotations=[(30.5, 0, "Lights off"), (100, 2.5, "free text")])
    edf = read_edf(path)
    assert edf.file_type == "EDF+C"
    assert edf.start == START
    assert edf.duration_s == pytest.approx(120.0)
    for sig in edf.signals:
        fs, data, unit = channels[sig.label]
        assert sig.fs == fs and sig.unit == unit
        # pyedflib puts the physical minimum on the digital minimum, which hsat reads as
        # "no value"; compare the samples that carry values.
        ok = sig.mask
        assert ok.mean() > 0.99
        assert np.max(np.abs(sig.data[ok] - data[ok])) <= _step(*ranges[sig.label]) + 1e-12
    texts = [(a.onset_s, a.duration_s, a.text) for a in edf.annotations]
    assert (30.5, 0.0, "Lights off") in texts and (100.0, 2.5, "free text") in texts
    assert edf.patient.code == "PX-7" and edf.patient.name == "Ida Invented"
    assert edf.patient.sex == "F" and edf.patient.birthdate == date(1961, 4, 9)
    assert edf.equipment == "kit A2" and edf.recording_code == "ST-77"


def test_pyedflib_plain_edf_reads(tmp_path):
    channels = _channels(seconds=60)
    path = tmp_path / "plain.edf"
    ranges = _pyedflib_file(path, channels, file_type=pyedflib.FILETYPE_EDF)
    edf = read_edf(path)
    assert edf.file_type == "EDF" and edf.annotations == () and edf.gaps == ()
    assert edf.start == START
    for sig in edf.signals:
        data = channels[sig.label][1]
        assert np.max(np.abs(sig.data[sig.mask] - data[sig.mask])) <= _step(*ranges[sig.label])


def test_hsat_file_reads_back_in_pyedflib(tmp_path):
    channels = _channels()
    signals = [Signal("", label, fs, data, unit) for label, (fs, data, unit) in channels.items()]
    path = write_edf(
        tmp_path / "ours.edf", signals, start=START,
        annotations=[Annotation(12.0, 0.0, "LIGHTS OFF"), Annotation(90.25, 3.0, "snoring, loud")],
        patient=Patient(code="PX-9", name="Ola Made Up", sex="M", birthdate=date(1970, 1, 31)),
        equipment="kit B", recording_code="ST-1",
    )
    reader = pyedflib.EdfReader(str(path))
    try:
        assert reader.getSignalLabels() == list(channels)
        assert reader.getStartdatetime() == START
        assert reader.getPatientCode() == "PX-9"
        assert reader.getPatientName() == "Ola Made Up"
        # EDF+ patient field: code sex birthdate name, spaces inside a subfield as '_'
        assert path.read_bytes()[8:88].rstrip() == b"PX-9 M 31-JAN-1970 Ola_Made_Up"
        assert reader.getSex() in ("Male", "M")
        onsets, durations, texts = reader.readAnnotations()
        assert list(texts) == ["LIGHTS OFF", "snoring, loud"]
        assert list(onsets) == [12.0, 90.25]
        for i, label in enumerate(channels):
            fs, data, _ = channels[label]
            assert reader.getSampleFrequency(i) == fs
            step = _step(reader.getPhysicalMinimum(i), reader.getPhysicalMaximum(i))
            assert np.max(np.abs(reader.readSignal(i) - data)) <= step
    finally:
        reader.close()


def test_round_trip_keeps_values_nan_and_header_facts(tmp_path):
    channels = _channels(seconds=90)
    spo2 = channels["SpO2"][1].copy()
    spo2[40:50] = np.nan
    signals = [Signal("", "Resp nasal pressure", 100.0, channels["Resp nasal press"][1], "cmH2O"),
               Signal("", "SpO2", 1.0, spo2, "%")]
    start = datetime(2024, 2, 29, 23, 59, 58, 250000)
    path = write_edf(tmp_path / "rt.edf", signals, start=start,
                     patient=Patient(code="C1", sex="F", birthdate=date(1990, 12, 1)))
    edf = read_edf(path)
    assert edf.start == start  # sub-second start from the first time-keeping TAL
    flow, sat = edf.signals
    assert flow.label == "Resp nasal press"  # the EDF label field holds 16 characters
    assert np.all(flow.mask)
    assert np.max(np.abs(flow.data - signals[0].data)) < 1e-3
    assert not sat.mask[40:50].any() and sat.mask[:40].all() and sat.mask[50:].all()
    assert np.max(np.abs(sat.data[sat.mask] - spo2[sat.mask])) < 1e-3
    assert edf.patient.birthdate == date(1990, 12, 1) and edf.patient.sex == "F"
    assert edf.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def _record_layout(raw: bytes) -> tuple[int, int, list[int], list[str]]:
    """Header size, record count, samples per record and labels (EDF spec offsets)."""
    ns = int(raw[252:256])
    labels = [raw[256 + 16 * i:256 + 16 * (i + 1)].decode().strip() for i in range(ns)]
    base = 256 + ns * (16 + 80 + 8 + 8 + 8 + 8 + 8 + 80)
    spr = [int(raw[base + 8 * i:base + 8 * (i + 1)]) for i in range(ns)]
    return int(raw[184:192]), int(raw[236:244]), spr, labels


def test_edfplus_d_gaps_follow_the_time_keeping_annotations(tmp_path):
    """An EDF+C file written by pyedflib, turned into EDF+D by hand: the time-keeping TALs
    of records 30..59 move 20 s later, so a 20 s gap opens at 30 s (EDF+ spec: in EDF+D
    every record's start comes from its time-keeping TAL)."""
    channels = _channels(seconds=60)
    path = tmp_path / "d.edf"
    _pyedflib_file(path, channels, file_type=pyedflib.FILETYPE_EDFPLUS)
    raw = bytearray(path.read_bytes())
    header, n_rec, spr, labels = _record_layout(bytes(raw))
    assert n_rec == 60
    raw[192:197] = b"EDF+D"
    record_bytes = 2 * sum(spr)
    ann_offset = 2 * sum(spr[: labels.index("EDF Annotations")])
    for k in range(30, 60):
        pos = header + k * record_bytes + ann_offset
        old = f"+{k}\x14\x14".encode()
        assert raw[pos:pos + len(old)] == old
        raw[pos:pos + len(old)] = f"+{k + 20}\x14\x14".encode()
    path.write_bytes(bytes(raw))
    with pytest.raises(OSError):  # pyedflib refuses EDF+D (fact measured for this project)
        pyedflib.EdfReader(str(path)).close()

    edf = read_edf(path)
    assert edf.file_type == "EDF+D"
    assert edf.gaps == (Interval(30.0, 50.0, "EDF+D gap"),)
    assert edf.duration_s == pytest.approx(80.0)
    flow = next(s for s in edf.signals if s.label == "Resp nasal press")
    original = channels["Resp nasal press"][1]
    assert len(flow.data) == 8000
    assert np.isnan(flow.data[3000:5000]).all() and not flow.mask[3000:5000].any()
    assert np.allclose(flow.data[:3000], original[:3000], atol=1e-3)
    assert np.allclose(flow.data[5000:], original[3000:], atol=1e-3)


def test_writer_edfplus_d_omits_records_inside_gaps(tmp_path):
    channels = _channels(seconds=100)
    signals = [Signal("", label, fs, data, unit) for label, (fs, data, unit) in channels.items()]
    path = write_edf(tmp_path / "gaps.edf", signals, start=START, file_type="EDF+D",
                     gaps=[Interval(20.0, 35.0), Interval(70.5, 80.0)],
                     annotations=[Annotation(50.0, 0.0, "marker")])
    header, n_rec, _, _ = _record_layout(path.read_bytes())
    assert n_rec == 100 - 15 - 9  # records [20,35) and [71,80) lie inside the gaps
    edf = read_edf(path)
    assert edf.gaps == (Interval(20.0, 35.0, "EDF+D gap"), Interval(71.0, 80.0, "EDF+D gap"))
    thorax = next(s for s in edf.signals if s.label == "Resp thorax")
    assert not thorax.mask[20 * 25:35 * 25].any() and thorax.mask[35 * 25:70 * 25].all()
    assert np.allclose(thorax.data[thorax.mask], channels["Resp thorax"][1][thorax.mask],
                       atol=0.05)
    assert [a.text for a in edf.annotations] == ["marker"]


def _patch(path: Path, offset: int, text: bytes) -> None:
    raw = bytearray(path.read_bytes())
    raw[offset:offset + len(text)] = text
    path.write_bytes(bytes(raw))


@pytest.mark.parametrize(("yy", "year"), [("85", 1985), ("99", 1999), ("00", 2000),
                                          ("84", 2084)])
def test_two_digit_year_rule(tmp_path, yy, year):
    """EDF 'clipping date': 85-99 -> 1985-1999, 00-84 -> 2000-2084 (standards.md §7,
    from memory)."""
    sig = Signal("", "SpO2", 1.0, np.full(10, 96.0), "%")
    path = write_edf(tmp_path / "y.edf", [sig], start=START, file_type="EDF")
    _patch(path, 168, f"03.11.{yy}".encode())
    assert read_edf(path).start.year == year


def test_four_digit_year_of_edfplus_startdate_wins(tmp_path):
    """EDF+: prefer the 4-digit year of 'Startdate dd-MMM-yyyy' (standards.md §7)."""
    sig = Signal("", "SpO2", 1.0, np.full(10, 96.0), "%")
    path = write_edf(tmp_path / "y4.edf", [sig], start=datetime(2091, 3, 2, 1, 0, 0))
    raw = path.read_bytes()
    assert raw[168:176] == b"02.03.91" and b"Startdate 02-MAR-2091" in raw[88:168]
    assert read_edf(path).start == datetime(2091, 3, 2, 1, 0, 0)


def test_many_annotations_spill_into_later_records(tmp_path):
    sig = Signal("", "SpO2", 1.0, np.full(30, 96.0), "%")
    notes = [Annotation(2.0 + i * 0.01, 0.0, f"note number {i}") for i in range(60)]
    path = write_edf(tmp_path / "many.edf", [sig], start=START, annotations=notes)
    assert [a.text for a in read_edf(path).annotations] == [a.text for a in notes]
    reader = pyedflib.EdfReader(str(path))
    try:
        assert len(reader.readAnnotations()[2]) == 60
    finally:
        reader.close()


def test_writer_rejects_a_rate_that_does_not_fill_whole_records(tmp_path):
    sig = Signal("", "Odd", 0.3, np.zeros(9))
    with pytest.raises(ValueError, match="whole number"):
        write_edf(tmp_path / "odd.edf", [sig], start=START)
    assert not (tmp_path / "odd.edf").exists()
