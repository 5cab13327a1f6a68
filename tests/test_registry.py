"""The study registry (SQLite), its migrations, sign-off mirroring, listing and names.

These tests feed the registry hand-built outcomes (no scoring runs here); the batch
tests in test_batch.py run the real pipeline.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from hsat.batch import (
    SCHEMA_VERSION,
    StudyOutcome,
    discover,
    is_safe_name,
    migrate,
    open_registry,
    safe_name_part,
    study_folder_name,
)
from hsat.batch._facts import facts_from_summary
from hsat.batch._table import registry_csv, registry_groups, registry_table
from hsat.errors import OutputError, UnreadableInput

RULES = (("aasm-3pct", "a" * 64), ("aasm-4pct", "b" * 64))


def _summary(rei3: float, rei4: float, *, adequate: bool = True, kit: str = "alder",
             code: str = "P0001", start: str = "2026-03-02T22:30:00") -> dict:
    def severity(rei: float) -> str:
        # AASM severity bands: <5 none, 5-<15 mild, 15-<30 moderate, >=30 severe
        # (standards.md section 3.1, Flemons 1999 / Nikkonen 2019 convention).
        return "none" if rei < 5 else "mild" if rei < 15 else "moderate" if rei < 30 else "severe"

    return {
        "patient": {"code": code, "name": "Test, Pat", "sex": "female", "birthdate": None},
        "study": {"start_time": start, "profile": "alder-r3", "equipment": "alder R3"},
        "kit": {"kit": kit},
        "monitoring_time_h": 6.5,
        "adequacy": {"adequate": adequate,
                     "reasons": [] if adequate else ["valid flow and SpO2 3.1 h < 4 h"]},
        "rule_sets": [{"name": n, "sha256": h} for n, h in RULES],
        "indices": {"aasm-3pct": {"rei": rei3, "oai": 1.0, "cai": 0.0, "mai": 0.0,
                                  "uai": 0.0, "hi": rei3 - 1, "odi": rei3,
                                  "severity": severity(rei3)},
                    "aasm-4pct": {"rei": rei4, "oai": 1.0, "cai": 0.0, "mai": 0.0,
                                  "uai": 0.0, "hi": rei4 - 1, "odi": rei4,
                                  "severity": severity(rei4)}},
        "spo2": {"t90_pct": 2.5, "nadir_pct": 81.0, "hypoxic_burden": 20.0},
    }


def _outcome(sha: str, folder: str | None, *, rescore: bool = False, status: str = "done",
             summary: dict | None = None, error: str = "", kind: str = "") -> StudyOutcome:
    facts = facts_from_summary(summary or _summary(12.0, 7.0))
    return StudyOutcome(
        source=f"/inbox/{sha[:6]}.edf", sha256=sha, status=status,
        started_at="2026-03-03T02:00:00+00:00", finished_at="2026-03-03T02:01:00+00:00",
        duration_s=60.0, config_hash="c" * 64, software_version="0.1.0", rule_sets=RULES,
        rescore=rescore, error=error, error_kind=kind, folder=folder,
        report_path=f"{folder}/report-draft.pdf" if folder else None,
        facts=facts if status != "failed" else facts_from_summary({}))


@pytest.fixture()
def registry(tmp_path: Path):
    with open_registry(tmp_path) as reg:
        yield reg


def test_new_registry_is_at_current_schema_and_owner_only(tmp_path: Path) -> None:
    with open_registry(tmp_path) as reg:
        version = reg.conn.execute("PRAGMA user_version").fetchone()[0]
    assert version == SCHEMA_VERSION
    assert (tmp_path / "registry.sqlite").stat().st_mode & 0o777 == 0o600


def test_migration_from_v1_keeps_rows(tmp_path: Path) -> None:
    path = tmp_path / "registry.sqlite"
    conn = sqlite3.connect(path, isolation_level=None)
    migrate(conn, str(path), target=1)
    conn.execute("INSERT INTO studies (sha256, file_name, source_path, size_bytes, first_seen)"
                 " VALUES ('s1', 'n.edf', '/in/n.edf', 10, '2026-01-01')")
    conn.execute("INSERT INTO runs (study_sha256, software_version, config_hash, rule_sets, "
                 "started_at, finished_at, duration_s, status, folder) VALUES "
                 "('s1', '0.0.9', 'k', '[]', 't', 't', 1.0, 'done', 'studies/x')")
    conn.close()
    with open_registry(tmp_path) as reg:
        assert reg.conn.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
        rows = reg.list_runs()
        assert [r.folder for r in rows] == ["studies/x"]
        assert rows[0].t90_pct is None  # column added by the v2 migration
        assert reg.sync_signoffs() == 0


def test_registry_from_newer_hsat_is_refused(tmp_path: Path) -> None:
    with open_registry(tmp_path) as reg:
        reg.conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION + 5}")
    with pytest.raises(OutputError, match="newer"):
        open_registry(tmp_path)


def test_missing_registry_is_a_clear_error(tmp_path: Path) -> None:
    with pytest.raises(UnreadableInput, match="no registry"):
        open_registry(tmp_path, create=False)


def test_one_current_result_per_key_and_rescore_keeps_old(registry) -> None:
    first = registry.record(_outcome("s" * 64, "/o/studies/a"), batch_id=None,
                            file_name="a.edf", size_bytes=1)
    again = registry.record(_outcome("s" * 64, "/o/studies/a"), batch_id=None,
                            file_name="a.edf", size_bytes=1)
    assert again == first  # the same folder is one row, however often it is recorded
    registry.record(_outcome("s" * 64, "/o/studies/a-r2", rescore=True), batch_id=None,
                    file_name="a.edf", size_bytes=1)
    runs = registry.list_runs(all_runs=True)
    assert [(r.folder, r.current) for r in runs] == [
        ("studies/a", False), ("studies/a-r2", True)]
    current = registry.completed_run("s" * 64, "0.1.0", "c" * 64)
    assert current is not None and current.folder == "studies/a-r2"
    # The unique index itself refuses a second current result for the same key.
    with pytest.raises(sqlite3.IntegrityError):
        registry.conn.execute(
            "UPDATE runs SET current = 1 WHERE folder = 'studies/a'")


def test_results_per_rule_set_and_status(registry) -> None:
    registry.record(_outcome("i" * 64, "/o/studies/i", status="inadequate",
                             summary=_summary(31.0, 16.0, adequate=False)),
                    batch_id=None, file_name="i.edf", size_bytes=1)
    (run,) = registry.list_runs()
    assert run.status == "inadequate"
    assert run.results["aasm-3pct"].rei == 31.0
    assert run.results["aasm-3pct"].severity == "severe"  # >= 30 is severe (standards 3.1)
    assert run.results["aasm-4pct"].severity == "moderate"
    assert run.results["aasm-4pct"].rule_set_sha256 == "b" * 64
    assert "4 h" in run.adequacy_reasons


def test_input_failure_is_remembered_internal_is_retried(registry) -> None:
    registry.record(_outcome("f" * 64, None, status="failed", error="x.edf: truncated",
                             kind="input"), batch_id=None, file_name="x.edf", size_bytes=1)
    assert registry.input_failure("f" * 64, "0.1.0", "c" * 64) is not None
    registry.record(_outcome("g" * 64, None, status="failed", error="worker died",
                             kind="internal"), batch_id=None, file_name="y.edf", size_bytes=1)
    assert registry.input_failure("g" * 64, "0.1.0", "c" * 64) is None


def test_list_filters(registry) -> None:
    registry.record(_outcome("1" * 64, "/o/studies/one", summary=_summary(
        3.0, 2.0, kit="alder", start="2026-02-10T22:00:00")), batch_id=None,
        file_name="one.edf", size_bytes=1)
    registry.record(_outcome("2" * 64, "/o/studies/two", summary=_summary(
        20.0, 12.0, kit="birch", code="P0002", start="2026-03-05T23:00:00")),
        batch_id=None, file_name="two.edf", size_bytes=1)
    registry.record(_outcome("3" * 64, None, status="failed", error="bad", kind="input"),
                    batch_id=None, file_name="three.edf", size_bytes=1)
    assert [r.file_name for r in registry.list_runs(kits=("BIRCH",))] == ["two.edf"]
    assert [r.file_name for r in registry.list_runs(statuses=("failed",))] == ["three.edf"]
    since = registry.list_runs(since="2026-03-01")
    assert "one.edf" not in [r.file_name for r in since]
    assert "two.edf" in [r.file_name for r in since]
    assert [r.file_name for r in registry.list_runs(statuses=("unsigned",))] == [
        "one.edf", "two.edf"]


def test_signoff_state_is_mirrored_from_the_study_folder(tmp_path: Path) -> None:
    folder = tmp_path / "studies" / "a"
    folder.mkdir(parents=True)
    with open_registry(tmp_path) as reg:
        reg.record(_outcome("s" * 64, str(folder)), batch_id=None, file_name="a.edf",
                   size_bytes=1)
        lines = [json.dumps({"version": 1, "physician": "Dr Invented", "signed_at": "t1",
                             "report_file": "report-v1-signed.pdf"}),
                 json.dumps({"version": 2, "physician": "Dr Invented", "signed_at": "t2",
                             "report_file": "report-v2-signed.pdf"}),
                 '{"version": 3, "physician": "half a li']  # a half-appended last line
        (folder / "signoff-log.jsonl").write_text("\n".join(lines), encoding="utf-8")
        assert reg.sync_signoffs() == 2
        (run,) = reg.list_runs(statuses=("signed",))
        assert [v.version for v in run.signed] == [1, 2]
        assert reg.list_runs(statuses=("unsigned",)) == []


def test_registry_table_is_aligned(registry) -> None:
    registry.record(_outcome("1" * 64, "/o/studies/one"), batch_id=None,
                    file_name="one.edf", size_bytes=1)
    registry.record(_outcome("3" * 64, None, status="failed",
                             error="three.edf: not an EDF file", kind="input"),
                    batch_id=None, file_name="three.edf", size_bytes=1)
    text = registry_table(registry.list_runs(), width=300)
    head, rule, *rows = text.splitlines()
    assert head.startswith("Recorded") and "REI aasm-3pct" in head
    status_col = head.index("Status")
    assert all(row[status_col:].split()[0] in ("done", "failed") for row in rows[:2])
    assert "three.edf: not an EDF file" in rows[1]
    assert text.splitlines()[-1] == "2 studies: 1 done, 1 failed; 0 signed"
    csv_text = registry_csv(registry.list_runs())
    assert csv_text.splitlines()[0].startswith("run_id,study_sha256,file,recorded_at,month")
    assert ",2026-03," in csv_text.splitlines()[1]


def test_qa_summary_per_kit_and_month(registry) -> None:
    reis = {"alder": [4.0, 12.0, 22.0, 41.0], "birch": [8.0, 17.0]}
    n = 0
    for kit, values in reis.items():
        for rei in values:
            n += 1
            registry.record(_outcome(f"{n:x}" * 64, f"/o/studies/{n}", summary=_summary(
                rei, rei - 2, kit=kit, code=f"P{n:04d}",
                start="2026-02-10T22:00:00" if n % 2 else "2026-03-10T22:00:00")),
                batch_id=None, file_name=f"{n}.edf", size_bytes=1)
    registry.record(_outcome("e" * 64, "/o/studies/e", status="inadequate",
                             summary=_summary(35.0, 30.0, adequate=False, kit="birch",
                                              code="P0099")),
                    batch_id=None, file_name="e.edf", size_bytes=1)
    text = registry_groups(registry.list_runs(), "kit")
    head, _rule, alder, birch, *_ = text.splitlines()
    assert head.split()[:4] == ["Kit", "Studies", "Inadequate", "Failed"]
    # median and quartiles as numpy's default (linear) percentile, the reference here
    q25, q50, q75 = np.percentile(reis["alder"], [25, 50, 75])
    assert alder.split()[:4] == ["alder", "4", "0", "(0"]
    assert f"{q50:.1f} ({q25:.1f}-{q75:.1f})" in alder
    # the inadequate study counts in the rate but not in the REI spread (its REI is no finding)
    assert birch.split()[:4] == ["birch", "3", "1", "(33"]
    q25, q50, q75 = np.percentile(reis["birch"], [25, 50, 75])
    assert f"{q50:.1f} ({q25:.1f}-{q75:.1f})" in birch
    # severity classes under aasm-3pct, AASM 5/15/30 (standards.md section 3.1)
    assert "1/1/1/1" in alder and "0/1/1/0" in birch
    months = registry_groups(registry.list_runs(), "month").splitlines()
    assert [line.split()[0] for line in months[2:4]] == ["2026-02", "2026-03"]
    with pytest.raises(ValueError, match="month or kit"):
        registry_groups(registry.list_runs(), "patient")


@pytest.mark.parametrize("raw", [
    "../../etc/passwd", "a/b\\c", "..", ".hidden", "x\x00y\x1b[31m", "  ", "",
    "Müller-Lüdenscheidt, Zoë", "CON..\n..", "\u202eevil",
])
def test_names_from_header_fields_are_safe(raw: str) -> None:
    part = safe_name_part(raw)
    assert "/" not in part and "\\" not in part and ".." not in part
    assert not part.startswith(".") and part.isprintable() and part.isascii()
    name = study_folder_name("2026-03-02", raw, "ab" * 32)
    assert is_safe_name(name) and name.endswith("_abababab" + "ab")


def test_folder_name_keeps_readable_parts() -> None:
    assert study_folder_name("2026-03-02", "Müller, Anna", "0123456789" + "f" * 54) == (
        "2026-03-02_Muller_Anna_0123456789")
    assert study_folder_name("", "", "9" * 64) == "undated_unknown_9999999999"


def test_discovery_pairs_intake_and_hashes(tmp_path: Path) -> None:
    (tmp_path / "day1").mkdir()
    (tmp_path / ".uploading").mkdir()
    (tmp_path / "day1" / "A.EDF").write_bytes(b"0" * 300)
    (tmp_path / "day1" / "A.intake.toml").write_text("[patient]\n", encoding="utf-8")
    (tmp_path / "b.edf").write_bytes(b"1" * 300)
    (tmp_path / ".c.edf").write_bytes(b"2")
    (tmp_path / ".uploading" / "d.edf").write_bytes(b"3")
    (tmp_path / "notes.txt").write_text("x", encoding="utf-8")
    found = discover(tmp_path)
    assert [f.path.relative_to(tmp_path).as_posix() for f in found] == ["b.edf", "day1/A.EDF"]
    # SHA-256 checked against hashlib (Python's standard library).
    assert found[1].sha256 == hashlib.sha256(b"0" * 300).hexdigest()
    assert found[1].intake_path == tmp_path / "day1" / "A.intake.toml"
    assert found[0].intake_path is None
    with pytest.raises(UnreadableInput, match="inbox folder not found"):
        discover(tmp_path / "missing")
