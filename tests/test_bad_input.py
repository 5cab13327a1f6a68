"""Bad input: one line on stderr naming the file and the problem, a documented exit code,
never a traceback (exit codes as documented in hsat.errors and the README).

The bad files are small valid EDF+ files with bytes patched at the offsets the EDF
specification gives (standards.md §7: 256-byte fixed header, then 256 bytes per signal,
record count at byte 236, samples per record in the per-signal block).
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import numpy as np
import pytest

from hsat import errors
from hsat.cli import main
from hsat.io import write_edf
from hsat.recording import Signal

START = datetime(2025, 7, 7, 22, 0, 0)
SECONDS = 300


def _signals(**override: np.ndarray) -> list[Signal]:
    t = np.arange(SECONDS * 10) / 10
    breath = np.sin(2 * np.pi * 0.25 * t)
    data = {
        "Resp nasal pressure": (10, -breath * np.abs(breath), "cmH2O"),
        "Resp thorax": (10, breath, "uV"),
        "SpO2": (1, np.full(SECONDS, 96.0), "%"),
    }
    for label, values in override.items():
        fs, _, unit = data[label]
        data[label] = (fs, values, unit)
    return [Signal("", label, fs, values, unit) for label, (fs, values, unit) in data.items()]


@pytest.fixture()
def good(tmp_path) -> Path:
    return write_edf(tmp_path / "good.edf", _signals(), start=START)


def _layout(raw: bytes) -> tuple[int, int, list[int]]:
    ns = int(raw[252:256])
    base = 256 + ns * (16 + 80 + 8 + 8 + 8 + 8 + 8 + 80)
    spr = [int(raw[base + 8 * i:base + 8 * (i + 1)]) for i in range(ns)]
    return int(raw[184:192]), int(raw[236:244]), spr


def _run(capsys, *args: str) -> tuple[int, str]:
    code = main(["check", *args])
    err = capsys.readouterr().err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err  # one line, no traceback
    assert "Traceback" not in err
    return code, lines[0]


def test_missing_file(tmp_path, capsys):
    path = tmp_path / "nowhere.edf"
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_UNREADABLE
    assert line == f"hsat: {path}: no such file"


def test_not_an_edf(tmp_path, capsys):
    path = tmp_path / "photo.edf"
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(2000))
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_UNREADABLE
    assert line == (f"hsat: {path}: not an EDF file "
                    "(it does not start with the EDF version field '0')")


def test_file_shorter_than_a_header(tmp_path, capsys):
    path = tmp_path / "tiny.edf"
    path.write_bytes(b"0       " + b" " * 50)
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_UNREADABLE
    assert line == f"hsat: {path}: not an EDF file: 58 bytes, shorter than the 256-byte EDF header"


def test_truncated_inside_the_header(good, capsys):
    good.write_bytes(good.read_bytes()[:700])
    code, line = _run(capsys, str(good))
    assert code == errors.EXIT_UNREADABLE
    assert line == f"hsat: {good}: truncated: the file ends inside its header (700 of 1280 bytes)"


def test_truncated_inside_the_data(good, capsys):
    raw = good.read_bytes()
    good.write_bytes(raw[:-1000])
    code, line = _run(capsys, str(good))
    assert code == errors.EXIT_UNREADABLE
    assert line.startswith(f"hsat: {good}: truncated: the file ends inside data record ")
    assert "of 300 (1000 bytes missing)" in line


@pytest.mark.parametrize("delta", [+7, -7])
def test_record_count_disagrees_with_file_size(good, capsys, delta):
    raw = bytearray(good.read_bytes())
    _, n_records, _ = _layout(bytes(raw))
    raw[236:244] = str(n_records + delta).ljust(8).encode()
    good.write_bytes(bytes(raw))
    code, line = _run(capsys, str(good))
    assert code == errors.EXIT_UNREADABLE
    assert line.startswith(f"hsat: {good}: header says {n_records + delta} data records")


def test_no_data_records(good, capsys):
    raw = bytearray(good.read_bytes())
    header, _, _ = _layout(bytes(raw))
    raw[236:244] = b"0       "
    good.write_bytes(bytes(raw[:header]))
    code, line = _run(capsys, str(good))
    assert code == errors.EXIT_UNREADABLE
    assert line == f"hsat: {good}: holds no data records (zero-length recording)"


def test_zero_length_channel(good, capsys):
    """SpO2 declared with 0 samples per record, its samples cut from every record."""
    raw = good.read_bytes()
    header, n_rec, spr = _layout(raw)
    ns = len(spr)
    records = np.frombuffer(raw[header:], dtype="<i2").reshape(n_rec, sum(spr))
    spo2 = 2  # file order: flow, thorax, SpO2, EDF Annotations
    start = sum(spr[:spo2])
    kept = np.delete(records, np.s_[start:start + spr[spo2]], axis=1)
    head = bytearray(raw[:header])
    base = 256 + ns * (16 + 80 + 8 + 8 + 8 + 8 + 8 + 80)
    head[base + 8 * spo2:base + 8 * (spo2 + 1)] = b"0       "
    good.write_bytes(bytes(head) + kept.astype("<i2").tobytes())
    code, line = _run(capsys, str(good))
    assert code == errors.EXIT_CHANNELS
    assert line == f"hsat: {good}: spo2 channel 'SpO2' is zero-length (no samples)"


def test_all_nan_flow(tmp_path, capsys):
    path = write_edf(tmp_path / "nan.edf", _signals(**{
        "Resp nasal pressure": np.full(SECONDS * 10, np.nan)}), start=START)
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_CHANNELS
    assert line == f"hsat: {path}: airflow channel 'Resp nasal press' holds no valid data"


def test_flat_flow(tmp_path, capsys):
    path = write_edf(tmp_path / "flat.edf", _signals(**{
        "Resp nasal pressure": np.full(SECONDS * 10, 0.2)}), start=START)
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_CHANNELS
    assert line == (f"hsat: {path}: airflow channel 'Resp nasal press' is flat or noise only "
                    "for the whole recording (no breathing rhythm): cannula never connected?")


def test_spo2_entirely_out_of_range(tmp_path, capsys):
    """Nothing within 50-100 % (standards.md §2 artefact floor, common practice)."""
    path = write_edf(tmp_path / "sat.edf", _signals(SpO2=np.full(SECONDS, 31.0)), start=START)
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_CHANNELS
    assert line.startswith(f"hsat: {path}: SpO2 channel 'SpO2' holds no value within 50-100 %")


def test_duplicate_labels(tmp_path, capsys):
    signals = _signals() + [Signal("", "SpO2", 1, np.full(SECONDS, 95.0), "%")]
    path = write_edf(tmp_path / "dup.edf", signals, start=START)
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_CHANNELS
    assert line == (f"hsat: {path}: ambiguous spo2 channel: labels 'SpO2', 'SpO2' all match "
                    "pattern 'spo2' of profile generic; give a profile that names one")


def test_ambiguous_labels(tmp_path, capsys):
    t = np.arange(SECONDS * 10) / 10
    extra = Signal("", "Nasal Pressure 2", 10, np.sin(2 * np.pi * 0.25 * t), "cmH2O")
    first = Signal("", "Nasal Pressure 1", 10, np.sin(2 * np.pi * 0.25 * t), "cmH2O")
    signals = [first, extra] + _signals()[1:]
    path = write_edf(tmp_path / "amb.edf", signals, start=START)
    code, line = _run(capsys, str(path))
    assert code == errors.EXIT_CHANNELS
    assert "ambiguous flow channel: labels 'Nasal Pressure 1', 'Nasal Pressure 2'" in line
    assert line.startswith(f"hsat: {path}: ")


def test_profile_with_a_typo_in_a_key(good, tmp_path, capsys):
    prof = tmp_path / "kit.toml"
    prof.write_text('name = "kit"\n[roles.flow]\nlabels = ["Resp nasal*"]\n'
                    '[roles.spo2]\nlabels = ["SpO2"]\nprobe_of = [0]\n')
    code, line = _run(capsys, str(good), "--profile", str(prof))
    assert code == errors.EXIT_CONFIG
    assert line == (
        f"hsat: {prof}: invalid channel profile: unknown key 'roles.spo2.probe_of' (allowed: "
        "labels, unit, scale, offset, convert, probe_off, probe_off_tolerance, codes, "
        "digital_minimum_is_value)")


def test_unknown_profile_name(good, capsys):
    code, line = _run(capsys, str(good), "--profile", "cedar-x1")
    assert code == errors.EXIT_CONFIG
    assert line == ("hsat: cedar-x1: no such channel profile; built-in ones are: alder-r3, "
                    "birch-p2, generic")
