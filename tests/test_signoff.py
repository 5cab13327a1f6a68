"""Sign-off: signing, refusing to overwrite, amending, verifying, and the refusals.

Studies are short synthetic nights analysed by the real pipeline. An adequate study has
at least 4 h of valid flow and oximetry (Kapur et al. 2017, standards.md section 3.3).
"""

from __future__ import annotations

import hashlib
import json
from datetime import UTC, datetime
from pathlib import Path

import pytest

from _report_study import (
    ADEQUATE_HOURS,
    INADEQUATE_HOURS,
    clone,
    flat,
    make_study,
    page_texts,
    read_only,
)
from hsat.cli import main
from hsat.errors import (
    EXIT_INADEQUATE,
    EXIT_OK,
    EXIT_OUTPUT,
    EXIT_TAMPERED,
    EXIT_USAGE,
    OutputError,
)
from hsat.report import ACKNOWLEDGEMENT_TEXT, CAUTION_POINTS, render_draft
from hsat.signoff import LOG_NAME, parse_interpretation, read_log, sign, verify

INTERPRETATION = """\
# Impression
Obstructive sleep apnea; see the indices under both rule sets.

## Recommendations
- Discuss positive airway pressure therapy.
- Review in clinic.
"""
PHYSICIAN = "Dr Reader Test, MD"


@pytest.fixture(scope="module")
def adequate(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("signoff-ok")
    folder, edf, site = make_study(root, hours=ADEQUATE_HOURS, seed=43)
    render_draft(folder, site=site, recording=edf)
    summary = json.loads((folder / "summary.json").read_text())
    assert summary["adequacy"]["adequate"]
    return folder


@pytest.fixture(scope="module")
def inadequate(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("signoff-short")
    folder, edf, site = make_study(root, hours=INADEQUATE_HOURS, seed=44)
    render_draft(folder, site=site, recording=edf)
    summary = json.loads((folder / "summary.json").read_text())
    assert not summary["adequacy"]["adequate"]
    return folder


@pytest.fixture()
def notes(tmp_path: Path) -> Path:
    path = tmp_path / "notes.md"
    path.write_text(INTERPRETATION, encoding="utf-8")
    return path


def _signed_files(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.glob("report-v*-signed.*"))


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_sign_writes_v1_with_signature_block_and_logs_its_hash(adequate, notes):
    folder = clone(adequate, "sign")
    when = datetime(2026, 3, 3, 9, 15, 0, tzinfo=UTC)
    result = sign(folder, notes, PHYSICIAN, now=when)
    assert result.pdf_path.name == "report-v1-signed.pdf"
    (entry,) = [line.entry for line in read_log(folder)]
    assert entry["version"] == 1 and entry["physician"] == PHYSICIAN
    assert entry["signed_at"] == "2026-03-03T09:15:00Z"
    assert entry["pdf_sha256"] == _sha(result.pdf_path)
    assert entry["study"] == folder.name
    pages = page_texts(result.pdf_path)
    interp = flat(pages[1])
    assert "Signature" in interp and PHYSICIAN in interp
    assert "2026-03-03 09:15:00 UTC" in interp and "Report version" in interp
    assert "Discuss positive airway pressure therapy." in interp
    assert all("DRAFT" not in p for p in pages)
    assert "Signed, version 1." in flat(pages[0])
    assert verify(folder).ok


def test_sign_command_then_verify_command(adequate, notes, capsys):
    folder = clone(adequate, "cli")
    assert main(["sign", str(folder), "--interpretation", str(notes),
                 "--physician", PHYSICIAN]) == EXIT_OK
    assert main(["verify", str(folder)]) == EXIT_OK
    assert "ok       report-v1-signed.pdf" in capsys.readouterr().out


def test_re_signing_refuses_to_overwrite(adequate, notes, capsys):
    folder = clone(adequate, "resign")
    sign(folder, notes, PHYSICIAN)
    before = (folder / "report-v1-signed.pdf").read_bytes()
    code = main(["sign", str(folder), "--interpretation", str(notes), "--physician", "Other"])
    assert code == EXIT_OUTPUT
    assert "never overwritten" in capsys.readouterr().err
    assert (folder / "report-v1-signed.pdf").read_bytes() == before
    assert len(read_log(folder)) == 1


def test_amend_makes_v2_states_why_and_keeps_v1(adequate, notes, tmp_path, capsys):
    folder = clone(adequate, "amend")
    sign(folder, notes, PHYSICIAN)
    v1 = (folder / "report-v1-signed.pdf").read_bytes()
    revised = tmp_path / "revised.md"
    revised.write_text(INTERPRETATION + "\n- Repeat study if symptoms persist.\n")
    assert main(["amend", str(folder), "--reason", "Added a follow-up recommendation",
                 "--interpretation", str(revised)]) == EXIT_OK
    assert (folder / "report-v1-signed.pdf").read_bytes() == v1
    v2 = flat(page_texts(folder / "report-v2-signed.pdf")[1])
    assert "version 2 replaces version 1" in v2
    assert "Reason: Added a follow-up recommendation" in v2
    assert "The interpretation text was revised." in v2
    entries = [line.entry for line in read_log(folder)]
    assert [e["version"] for e in entries] == [1, 2]
    assert entries[1]["kind"] == "amend" and entries[1]["amends_version"] == 1
    assert entries[1]["reason"] == "Added a follow-up recommendation"
    assert main(["verify", str(folder)]) == EXIT_OK


def test_tampered_signed_pdf_fails_verify_naming_it(adequate, notes, capsys):
    folder = clone(adequate, "tamper")
    sign(folder, notes, PHYSICIAN)
    pdf = folder / "report-v1-signed.pdf"
    data = bytearray(pdf.read_bytes())
    data[len(data) // 2] ^= 0x01  # one flipped bit
    pdf.write_bytes(bytes(data))
    assert main(["verify", str(folder)]) == EXIT_TAMPERED
    captured = capsys.readouterr()
    assert "report-v1-signed.pdf: ALTERED" in captured.out
    assert "report-v1-signed.pdf" in captured.err


def test_missing_signed_pdf_and_edited_log_fail_verify(adequate, notes):
    folder = clone(adequate, "missing")
    sign(folder, notes, PHYSICIAN)
    (folder / "report-v1-signed.pdf").unlink()
    problems = " ".join(verify(folder).problems)
    assert "report-v1-signed.pdf: missing" in problems

    folder = clone(adequate, "edited-log")
    sign(folder, notes, PHYSICIAN)
    log = folder / LOG_NAME
    original = log.read_text()
    log.write_text(original.replace(PHYSICIAN, "Someone Else"))
    problems = " ".join(verify(folder).problems)  # the line disagrees with the record
    assert "line 1 gives physician 'Someone Else'" in problems
    assert main(["verify", str(folder)]) == EXIT_TAMPERED

    log.write_text(original)
    assert main(["amend", str(folder), "--reason", "second version"]) == EXIT_OK
    first, second = log.read_text().splitlines()
    edited = json.loads(first)
    edited["signed_at"] = "2000-01-01T00:00:00Z"
    log.write_text(json.dumps(edited) + "\n" + second + "\n")
    problems = " ".join(verify(folder).problems)
    assert "line 2 does not chain to the line before it" in problems


def test_signed_file_not_in_the_log_fails_verify(adequate, notes):
    folder = clone(adequate, "unlisted")
    sign(folder, notes, PHYSICIAN)
    (folder / LOG_NAME).unlink()
    problems = " ".join(verify(folder).problems)
    assert "report-v1-signed.pdf: signed file for version 1 is not in" in problems


def test_inadequate_study_needs_the_acknowledgement(inadequate, notes, capsys):
    folder = clone(inadequate, "inadequate")
    code = main(["sign", str(folder), "--interpretation", str(notes), "--physician", PHYSICIAN])
    assert code == EXIT_INADEQUATE
    assert "--acknowledge-inadequate" in capsys.readouterr().err
    assert _signed_files(folder) == [] and not (folder / LOG_NAME).exists()
    assert main(["sign", str(folder), "--interpretation", str(notes), "--physician", PHYSICIAN,
                 "--acknowledge-inadequate"]) == EXIT_OK
    pages = page_texts(folder / "report-v1-signed.pdf")
    assert "Signed although technically inadequate" in flat(pages[0])
    assert "TECHNICALLY INADEQUATE" in pages[0]
    assert all(flat(point) in flat(pages[0]) for point in CAUTION_POINTS)  # still one page
    assert flat(ACKNOWLEDGEMENT_TEXT) in flat(pages[1])
    assert read_log(folder)[0].entry["acknowledged_inadequate"] is True


def test_empty_interpretation_is_refused_and_nothing_written(adequate, tmp_path, capsys):
    folder = clone(adequate, "empty")
    empty = tmp_path / "empty.md"
    empty.write_text("\n  \n# \n")
    assert main(["sign", str(folder), "--interpretation", str(empty),
                 "--physician", PHYSICIAN]) == EXIT_USAGE
    err = capsys.readouterr().err
    assert "empty.md" in err and "empty" in err
    assert _signed_files(folder) == [] and not (folder / LOG_NAME).exists()


def test_physician_name_the_font_cannot_draw_is_refused(adequate, notes, capsys):
    folder = clone(adequate, "cjk")
    assert main(["sign", str(folder), "--interpretation", str(notes),
                 "--physician", "\u738b\u533b\u751f"]) == EXIT_USAGE
    assert "U+738B" in capsys.readouterr().err
    assert _signed_files(folder) == [] and not (folder / LOG_NAME).exists()
    # Latin letters with diacritics are drawn (DejaVu covers Latin Extended)
    assert sign(folder, notes, "Dr \u0141ucja \u017b\u00f3\u0142\u0107, MD").version == 1


def test_read_only_folder_is_refused_and_nothing_written(adequate, notes, capsys):
    folder = clone(adequate, "ro")
    with read_only(folder):
        code = main(["sign", str(folder), "--interpretation", str(notes),
                     "--physician", PHYSICIAN])
    assert code == EXIT_OUTPUT
    assert "not writable" in capsys.readouterr().err
    assert _signed_files(folder) == [] and not (folder / LOG_NAME).exists()


def test_a_failed_log_append_leaves_no_signed_file(adequate, notes, monkeypatch):
    import hsat.signoff._sign as signing

    def refuse(*_args: object, **_kwargs: object) -> str:
        raise OutputError("signoff-log.jsonl", "cannot append (disk full)")

    folder = clone(adequate, "half")
    monkeypatch.setattr(signing, "append_entry", refuse)
    with pytest.raises(OutputError):
        sign(folder, notes, PHYSICIAN)
    assert _signed_files(folder) == []


def test_amend_needs_a_signed_version_and_a_reason(adequate, notes, capsys):
    folder = clone(adequate, "amend-refusals")
    assert main(["amend", str(folder), "--reason", "x"]) == EXIT_USAGE
    assert "nothing to amend" in capsys.readouterr().err
    sign(folder, notes, PHYSICIAN)
    assert main(["amend", str(folder), "--reason", "   "]) == EXIT_USAGE
    assert _signed_files(folder) == ["report-v1-signed.json", "report-v1-signed.pdf"]


def test_interpretation_markup_headings_bullets_paragraphs():
    blocks = parse_interpretation("# A\n\nline one\nline two\n\n- x\n  more\n2. y\n")
    assert [(b.kind, b.text) for b in blocks] == [
        ("heading", "A"), ("paragraph", "line one line two"), ("bullet", "x more"),
        ("numbered", "y")]
