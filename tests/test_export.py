"""``hsat export --deidentify``: no identifier survives in any exported file.

The identifiers are read independently of hsat: the EDF header through pyedflib (a
general-purpose EDF reference library) and the intake sidecar through tomllib.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import hmac
import io
import re
import tomllib
from datetime import date, datetime
from pathlib import Path

import pyedflib
import pytest

from _batch_nights import INADEQUATE, SHORT, write_plan
from hsat.batch import _export as export_module
from hsat.batch import export_deidentified, open_registry
from hsat.cli import main
from hsat.errors import OutputError

KEY = b"invented-test-key-0123456789abcdef"
INTAKE = """
[patient]
name = "Ravensworth, Philippa"
id = "MRN-XQ-88231"
birthdate = 1962-08-14
sex = "female"

[study]
kit = "generic"
kit_serial = "GEN-SN-40917"
referring_clinician = "Dr Umberto Fakename"
interpreting_physician = "Dr Selma Inventova"
notes = "Took the finger probe off once."
"""


def _hsat(*args: object) -> int:
    return _hsat_output(*args)[0]


def _hsat_output(*args: object) -> tuple[int, str]:
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        code = main([str(a) for a in args])
    return code, buffer.getvalue()


@pytest.fixture(scope="module")
def batch_out(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[Path]]:
    inbox = tmp_path_factory.mktemp("inbox")
    edfs = [write_plan(inbox, INADEQUATE), write_plan(inbox, SHORT[0])]
    edfs[1].with_name(edfs[1].stem + ".intake.toml").write_text(INTAKE, encoding="utf-8")
    out = tmp_path_factory.mktemp("out") / "reports"
    code, text = _hsat_output("batch", inbox, "--out", out, "--jobs", "1")
    assert code == 0, text
    return out, edfs


def _date_spellings(day: date) -> set[str]:
    # ISO 8601, EDF header dd.mm.yy and EDF+ dd-MMM-yyyy (EDF+ spec, standards.md s. 7).
    return {day.isoformat(), day.strftime("%d.%m.%y"), day.strftime("%d-%b-%Y").upper(),
            day.strftime("%d/%m/%Y"), day.strftime("%Y%m%d")}


def _identifiers(edfs: list[Path]) -> set[str]:
    found: set[str] = set()
    for edf in edfs:
        header = pyedflib.highlevel.read_edf_header(str(edf), read_annotations=False)
        for key in ("patientname", "patientcode", "admincode", "technician"):
            found |= {t for t in re.split(r"[\s_,/]+", str(header.get(key, "")))
                      if len(t) >= 3}
        found |= {t for t in re.split(r"[\s_,]+", str(header.get("equipment", "")))
                  if re.search(r"\d", t) and len(t) >= 3}
        start = header["startdate"]
        found |= _date_spellings(start.date() if isinstance(start, datetime) else start)
        born = header.get("birthdate")
        if born:
            found |= _date_spellings(datetime.strptime(str(born), "%d %b %Y").date()
                                     if isinstance(born, str) else born)
        intake = edf.with_name(edf.stem + ".intake.toml")
        if intake.exists():
            data = tomllib.loads(intake.read_text(encoding="utf-8"))
            for value in (data["patient"]["name"], data["patient"]["id"],
                          data["study"]["kit_serial"], data["study"]["referring_clinician"],
                          data["study"]["interpreting_physician"]):
                found |= {t for t in re.split(r"[\s,]+", value) if len(t) >= 3} | {value}
            found |= _date_spellings(data["patient"]["birthdate"])
    found.discard("Dr")
    return found


def test_no_identifier_survives_in_any_exported_file(batch_out, tmp_path: Path) -> None:
    out, edfs = batch_out
    key_file = tmp_path / "key"
    key_file.write_bytes(KEY)
    key_file.chmod(0o600)
    target = tmp_path / "research"
    assert _hsat("export", out, "--to", target, "--deidentify", "--key-file", key_file) == 0
    identifiers = _identifiers(edfs)
    # The header really holds the invented identifiers the export must remove.
    assert {"ZX7724", "Halvorsen", "ADM90214", "Ravensworth", "MRN-XQ-88231"} <= identifiers
    files = sorted(p for p in target.rglob("*") if p.is_file())
    assert {p.suffix for p in files} <= {".csv", ".json"}  # no PDF, EDF or sign-off log
    assert len([p for p in files if p.name == "summary.json"]) == 2
    for path in files:
        text = path.read_text(encoding="utf-8").lower()
        for identifier in identifiers:
            assert identifier.lower() not in text, f"{identifier!r} in {path.name}"
    assert all((p.stat().st_mode & 0o777) == 0o600 for p in files)


def test_pseudonyms_are_keyed_hmacs_and_results_survive(batch_out, tmp_path: Path) -> None:
    out, edfs = batch_out
    first, count = export_deidentified(out, tmp_path / "a", KEY)
    again, _ = export_deidentified(out, tmp_path / "b", KEY)
    other, _ = export_deidentified(out, tmp_path / "c", b"another-invented-key-98765")
    assert count == 2

    def rows(folder: Path) -> list[dict[str, str]]:
        with open(folder / "studies.csv", encoding="utf-8", newline="") as fh:
            return list(csv.DictReader(fh))

    a, b, c = rows(first), rows(again), rows(other)
    assert [r["study_id"] for r in a] == [r["study_id"] for r in b]
    assert {r["study_id"] for r in a}.isdisjoint(r["study_id"] for r in c)
    with open_registry(out, create=False) as registry:
        runs = {r.study_sha256: r for r in registry.list_runs()}
    for sha, run in runs.items():
        # HMAC-SHA-256 (RFC 2104) computed with Python's hmac module.
        expected = "study-" + hmac.new(KEY, f"study:{sha}".encode(), hashlib.sha256
                                       ).hexdigest()[:16]
        row = next(r for r in a if r["study_id"] == expected)
        assert float(row["rei_aasm-3pct"]) == pytest.approx(run.results["aasm-3pct"].rei)
        assert row["year"] == run.recorded_at[:4]
        assert (first / expected / "events.csv").is_file()


def test_a_leak_aborts_the_export(batch_out, tmp_path: Path,
                                  monkeypatch: pytest.MonkeyPatch) -> None:
    out, _ = batch_out
    real = export_module.research_summary

    def leaky(summary, study_id, subject_id, pattern):  # type: ignore[no-untyped-def]
        kept = real(summary, study_id, subject_id, pattern)
        kept["notes"] = [f"patient {summary['patient']['code']}"]
        return kept

    monkeypatch.setattr(export_module, "research_summary", leaky)
    with pytest.raises(OutputError, match="identifier survived"):
        export_deidentified(out, tmp_path / "leak", KEY)
    assert not (tmp_path / "leak").exists()
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]


def test_key_is_required_and_long_enough(batch_out, tmp_path: Path,
                                         monkeypatch: pytest.MonkeyPatch,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    out, _ = batch_out
    monkeypatch.delenv("HSAT_EXPORT_KEY", raising=False)
    assert main(["export", str(out), "--to", str(tmp_path / "x"), "--deidentify"]) == 6
    assert "no pseudonym key" in capsys.readouterr().err
    short = tmp_path / "short.key"
    short.write_bytes(b"tiny")
    assert main(["export", str(out), "--to", str(tmp_path / "x"), "--deidentify",
                 "--key-file", str(short)]) == 6
    assert "too short" in capsys.readouterr().err
    monkeypatch.setenv("HSAT_EXPORT_KEY", KEY.decode())
    assert main(["export", str(out), "--to", str(tmp_path / "y"), "--deidentify"]) == 0
    assert main(["export", str(out), "--to", str(tmp_path / "y"), "--deidentify"]) == 7
    assert "not empty" in capsys.readouterr().err
    assert main(["export", str(out), "--to", str(tmp_path / "z")]) == 2
