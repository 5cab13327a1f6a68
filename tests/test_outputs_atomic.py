"""Atomic writes: a reader never sees a half-written file; signed files are never replaced."""

from __future__ import annotations

import os
import stat

import pytest

from hsat.errors import OutputError
from hsat.outputs import append_line, atomic_write_bytes, atomic_write_text


def test_write_then_replace_leaves_no_temporary_files(tmp_path):
    target = tmp_path / "summary.json"
    atomic_write_text(target, "first")
    atomic_write_text(target, "second")
    assert target.read_text() == "second"
    assert [p.name for p in tmp_path.iterdir()] == ["summary.json"]


def test_files_are_owner_only_by_default(tmp_path):
    # Recordings and reports hold patient data (common practice: least privilege).
    target = atomic_write_bytes(tmp_path / "r.pdf", b"%PDF")
    assert stat.S_IMODE(target.stat().st_mode) == 0o600


def test_refuses_to_overwrite_when_asked(tmp_path):
    target = tmp_path / "report-v1-signed.pdf"
    atomic_write_bytes(target, b"signed", overwrite=False)
    with pytest.raises(OutputError, match="will not be overwritten"):
        atomic_write_bytes(target, b"other", overwrite=False)
    assert target.read_bytes() == b"signed"
    assert len(list(tmp_path.iterdir())) == 1


@pytest.mark.skipif(os.geteuid() == 0, reason="root can write into read-only folders")
def test_read_only_folder_is_a_clear_error(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        with pytest.raises(OutputError, match="ro"):
            atomic_write_text(folder / "x.json", "{}")
    finally:
        folder.chmod(0o700)


def test_append_only_log_keeps_every_line(tmp_path):
    log = tmp_path / "signoff-log.jsonl"
    append_line(log, '{"version": 1}')
    append_line(log, '{"version": 2}')
    assert log.read_text().splitlines() == ['{"version": 1}', '{"version": 2}']
    with pytest.raises(ValueError):
        append_line(log, "two\nlines")
