"""The nightly batch end to end: real nights through hsat.api.analyze, bad files, re-runs,
--rescore, a batch killed with SIGKILL, the worklist, progress and the log file."""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from _batch_nights import GOOD, INADEQUATE, SHORT, write_corrupt, write_plan, write_truncated
from hsat.batch import (
    RUN_MARKER,
    BatchOptions,
    StudyOutcome,
    StudyTask,
    config_hash,
    discover,
    is_safe_name,
    make_config,
    open_registry,
    process_study,
    run_batch,
)
from hsat.batch._dispatch import run_local
from hsat.batch._lock import BatchLock
from hsat.cli import main
from hsat.errors import EXIT_BATCH_FAILED, EXIT_OK, OutputError

STUDY_FILES = ("summary.json", "events.csv", "report-draft.pdf", RUN_MARKER)


def _hsat(*args: str) -> tuple[int, str]:
    """Run the hsat command line in this process; return (exit code, stdout)."""
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        code = main([str(a) for a in args])
    return code, buffer.getvalue()


def _runs(out: Path) -> list:
    with open_registry(out, create=False) as registry:
        return registry.list_runs(all_runs=True)


def _worklist(out: Path) -> dict[str, dict[str, str]]:
    with open(out / "worklist.csv", encoding="utf-8", newline="") as fh:
        return {row["file"]: row for row in csv.DictReader(fh)}


def _visible_folders(out: Path) -> list[Path]:
    return sorted(p for p in (out / "studies").iterdir() if not p.name.startswith("."))


@pytest.fixture(scope="module")
def inbox(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("inbox")
    good = [write_plan(folder, plan) for plan in GOOD]
    write_plan(folder, INADEQUATE)
    write_corrupt(folder)
    write_truncated(folder, good[0])
    return folder


@pytest.fixture(scope="module")
def first(inbox: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, int, str]:
    out = tmp_path_factory.mktemp("out") / "reports"
    code, text = _hsat("batch", inbox, "--out", out, "--jobs", "2")
    return out, code, text


@pytest.fixture(scope="module")
def second(first: tuple[Path, int, str], inbox: Path) -> tuple[Path, int, str, list, list]:
    out = first[0]
    before = _runs(out)
    code, text = _hsat("batch", inbox, "--out", out, "--jobs", "2")
    return out, code, text, before, _runs(out)


@pytest.fixture(scope="module")
def signed(second: tuple) -> tuple[Path, Path, str]:
    """The physician signs one study (hsat.signoff) before the rescore."""
    from hsat.signoff import sign

    out = second[0]
    run = next(r for r in _runs(out) if r.file_name == f"{GOOD[0].stem}.edf")
    folder = out / str(run.folder)
    result = sign(folder, None, "Dr Invented Signer",
                  interpretation_text="Reviewed against the raw signals (test night).")
    return out, folder, hashlib.sha256(result.pdf_path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def rescored(signed: tuple, inbox: Path) -> tuple[Path, int, list, list]:
    out = signed[0]
    before = _runs(out)
    code, _ = _hsat("batch", inbox, "--out", out, "--jobs", "2", "--rescore", "--no-report")
    return out, code, before, _runs(out)


def test_failures_set_the_exit_code(first: tuple[Path, int, str]) -> None:
    assert first[1] == EXIT_BATCH_FAILED  # 9: some recordings failed (hsat.errors)


def test_good_done_bad_recorded_with_reasons(first: tuple[Path, int, str]) -> None:
    out = first[0]
    by_file = {run.file_name: run for run in _runs(out)}
    assert set(by_file) == {f"{p.stem}.edf" for p in (*GOOD, INADEQUATE)} | {
        "night-x-corrupt.edf", "night-y-truncated.edf"}
    for plan in GOOD:
        assert by_file[f"{plan.stem}.edf"].status == "done"
    # AASM HSAT guideline (Kapur 2017): adequate needs >= 4 h of valid flow and
    # oximetry (standards.md section 3.3); a 1.5 h night cannot meet it.
    short = by_file[f"{INADEQUATE.stem}.edf"]
    assert short.status == "inadequate" and short.adequacy_reasons
    assert short.results and short.folder  # inadequate studies are still scored
    for name in ("night-x-corrupt.edf", "night-y-truncated.edf"):
        run = by_file[name]
        assert run.status == "failed" and run.error_kind == "input"
        assert name in run.error and run.folder is None
        assert "Traceback" not in run.error
    assert "night-x-corrupt.edf" in first[2]  # the log lines name the failed file


def test_study_folders_are_complete_private_and_safely_named(
        first: tuple[Path, int, str], inbox: Path) -> None:
    out = first[0]
    assert (out.stat().st_mode & 0o777) == 0o700
    assert ((out / "registry.sqlite").stat().st_mode & 0o777) == 0o600
    runs = [r for r in _runs(out) if r.status != "failed"]
    assert [p.name for p in _visible_folders(out)] == sorted(
        Path(str(r.folder)).name for r in runs)
    assert not [p for p in (out / "studies").iterdir() if p.name.startswith(".")]
    for run in runs:
        folder = out / str(run.folder)
        assert is_safe_name(folder.name) and folder.parent == out / "studies"
        for name in STUDY_FILES:
            assert (folder / name).is_file(), f"{folder.name} lacks {name}"
        assert (folder.stat().st_mode & 0o777) == 0o700
        assert all((p.stat().st_mode & 0o777) == 0o600 for p in folder.iterdir())
        # The registry key is the SHA-256 of the recording (checked with hashlib).
        source = inbox / run.file_name
        assert run.study_sha256 == hashlib.sha256(source.read_bytes()).hexdigest()
        summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
        assert run.results["aasm-4pct"].rei == summary["indices"]["aasm-4pct"]["rei"]
        assert run.results["aasm-3pct"].rule_set_sha256 == next(
            rs["sha256"] for rs in summary["rule_sets"] if rs["name"] == "aasm-3pct")
    # The header's patient code "../../ZX6613" must not climb out of the studies folder.
    inadequate = next(r for r in runs if r.file_name == f"{INADEQUATE.stem}.edf")
    assert ".." not in str(inadequate.folder) and "ZX6613" in str(inadequate.folder)


def test_worklist_lists_every_recording(first: tuple[Path, int, str]) -> None:
    out = first[0]
    rows = _worklist(out)
    assert {r["status"] for n, r in rows.items() if n.startswith(("night-a", "night-b"))} == {
        "new"}
    assert rows[f"{INADEQUATE.stem}.edf"]["status"] == "inadequate - repeat study"
    assert rows["night-x-corrupt.edf"]["status"] == "failed"
    assert rows["night-x-corrupt.edf"]["reason"]  # the problem, without the inbox path
    good = rows[f"{GOOD[0].stem}.edf"]
    assert good["patient"] == GOOD[0].patient.name and good["patient_code"] == "ZX4471"
    assert float(good["rei_aasm-3pct"]) >= float(good["rei_aasm-4pct"])  # 3 % rule counts
    # at least the hypopneas the 4 % rule counts (AASM 1A vs 1B, standards.md 1.2)
    assert good["severity_aasm-3pct"] in ("none", "mild", "moderate", "severe")
    assert (out / good["report"]).is_file() and good["adequacy"] == "adequate"
    html = (out / "worklist.html").read_text(encoding="utf-8")
    assert html.count("<tr class=") == len(rows) == 5
    assert "qualified clinician" in html and "@page" in html
    assert (out / "worklists" / "worklist-batch-0001.csv").is_file()


def test_second_run_does_nothing_new(second: tuple) -> None:
    out, code, text, before, after = second
    assert code == EXIT_BATCH_FAILED  # the bad files are still in the inbox
    assert [(r.id, r.status, r.current) for r in after] == [
        (r.id, r.status, r.current) for r in before]
    rows = _worklist(out)
    assert rows[f"{GOOD[0].stem}.edf"]["status"] == "done earlier"
    assert rows["night-y-truncated.edf"]["status"] == "failed"
    assert "(earlier)" in text


def test_rescore_adds_a_run_and_keeps_the_old(rescored: tuple) -> None:
    out, code, before, after = rescored
    assert code == EXIT_BATCH_FAILED
    completed_before = [r for r in before if r.status != "failed"]
    for old in completed_before:
        runs = [r for r in after if r.study_sha256 == old.study_sha256 and r.status != "failed"]
        assert len(runs) == 2
        assert [r.current for r in runs] == [False, True]
        assert (out / str(old.folder) / "summary.json").is_file()  # old folder kept
        assert runs[0].results["aasm-4pct"].rei == runs[1].results["aasm-4pct"].rei
    assert len(_visible_folders(out)) == 2 * len(completed_before)


def test_signoff_state_is_listed_and_a_rescore_leaves_the_signed_report(
        signed: tuple, rescored: tuple) -> None:
    from hsat.signoff import verify

    out, folder, pdf_sha = signed
    assert not verify(folder).problems  # the rescore wrote a new folder, not into this one
    assert hashlib.sha256((folder / "report-v1-signed.pdf").read_bytes()).hexdigest() == pdf_sha
    code, text = _hsat("registry", out, "--status", "signed", "--all-runs")
    assert code == 0
    (row,) = [line for line in text.splitlines() if GOOD[0].patient.name in line]
    assert " v1 " in row and folder.name in row and "done (old)" in row


def test_sigkill_mid_batch_then_rerun(tmp_path: Path) -> None:
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    for plan in SHORT:
        write_plan(inbox, plan)
    out = tmp_path / "out"
    process = subprocess.Popen(
        [sys.executable, "-m", "hsat.cli", "batch", str(inbox), "--out", str(out),
         "--jobs", "1", "--no-report"],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 180
    try:
        while time.monotonic() < deadline and process.poll() is None:
            studies = out / "studies"
            if studies.is_dir() and any((p / RUN_MARKER).exists() for p in studies.iterdir()
                                        if not p.name.startswith(".")):
                break
            time.sleep(0.02)
        assert process.poll() is None, process.stderr.read().decode() if process.stderr else ""
        os.kill(process.pid, signal.SIGKILL)
    finally:
        process.wait(timeout=30)
    assert process.returncode == -signal.SIGKILL
    time.sleep(1.0)  # the orphaned worker notices its parent is gone within 0.05 s
    finished = _visible_folders(out)
    assert 1 <= len(finished) < len(SHORT)  # killed mid-way
    for folder in finished:  # nothing half-written under a final name
        assert all((folder / name).is_file() for name in STUDY_FILES if name.endswith(
            (".json", ".csv")))
    code, _ = _hsat("batch", inbox, "--out", out, "--jobs", "1", "--no-report")
    assert code == EXIT_OK
    runs = _runs(out)
    assert sorted(r.file_name for r in runs) == sorted(f"{p.stem}.edf" for p in SHORT)
    assert len({r.study_sha256 for r in runs}) == len(runs) == len(SHORT)
    assert all(r.status != "failed" and r.current for r in runs)
    assert len(_visible_folders(out)) == len(SHORT)
    assert not [p for p in (out / "studies").iterdir() if p.name.startswith(".")]
    leftovers = [p for p in out.rglob("*") if p.name.endswith((".part", ".tmp"))]
    assert leftovers == []


def test_progress_line_on_a_terminal_and_log_file(tmp_path: Path) -> None:
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    write_corrupt(inbox)
    screen = io.StringIO()
    report = run_batch(BatchOptions(inbox=inbox, out=tmp_path / "out"), stream=screen,
                       live=True)
    assert report.exit_code == EXIT_BATCH_FAILED
    text = screen.getvalue()
    assert "failed" in text and "night-x-corrupt.edf" in text
    log = report.log_path.read_text(encoding="utf-8")
    assert "night-x-corrupt.edf" in log and log.splitlines()[0][:4].isdigit()
    plain = io.StringIO()
    run_batch(BatchOptions(inbox=inbox, out=tmp_path / "out"), stream=plain, live=False)
    assert "\x1b" not in plain.getvalue()
    assert all(line[:4].isdigit() for line in plain.getvalue().splitlines())


def test_one_batch_at_a_time_per_output_folder(tmp_path: Path) -> None:
    (tmp_path / "inbox").mkdir()
    (tmp_path / "out").mkdir()
    with BatchLock(tmp_path / "out"), pytest.raises(OutputError, match="another batch"):
        run_batch(BatchOptions(inbox=tmp_path / "inbox", out=tmp_path / "out"),
                  stream=io.StringIO())


def test_missing_inbox_is_a_clear_error(tmp_path: Path, capsys: pytest.CaptureFixture[str]
                                        ) -> None:
    code = main(["batch", str(tmp_path / "nope"), "--out", str(tmp_path / "out")])
    assert code == 4  # unreadable input (hsat.errors)
    assert "inbox folder not found" in capsys.readouterr().err


def _dies_on_first_task(task: StudyTask) -> StudyOutcome:
    """A per-study job whose worker process dies (as on an out-of-memory kill)."""
    if task.source.endswith("dies.edf"):
        os._exit(1)
    return StudyOutcome(source=task.source, sha256=task.sha256, status="failed",
                        started_at="", finished_at="", duration_s=0.0,
                        config_hash=task.config_hash, software_version="t", rule_sets=(),
                        error="outcome of the test job", error_kind="input")


def test_a_dying_worker_fails_only_its_study(tmp_path: Path) -> None:
    config = make_config(BatchOptions(inbox=tmp_path, out=tmp_path))
    tasks = [StudyTask(source=str(tmp_path / name), sha256=name * 8, studies_dir=str(tmp_path),
                       config=config, config_hash="k") for name in ("dies.edf", "lives.edf")]
    outcomes = {Path(o.source).name: o for o in run_local(tasks, 1, lambda running: None,
                                                          job=_dies_on_first_task)}
    assert set(outcomes) == {"dies.edf", "lives.edf"}
    assert "died twice" in outcomes["dies.edf"].error
    assert outcomes["dies.edf"].error_kind == "internal"  # retried by the next batch
    assert outcomes["lives.edf"].error == "outcome of the test job"


def test_folder_left_by_a_killed_batch_is_adopted_not_redone(tmp_path: Path) -> None:
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    write_plan(inbox, SHORT[2])
    out = tmp_path / "out"
    options = BatchOptions(inbox=inbox, out=out, jobs=1, pdf=False, file_mode=0o640,
                           dir_mode=0o750)
    config = make_config(options)
    (found,) = discover(inbox)
    (out / "studies" / ".partial-0123456789ab-deadbeef").mkdir(parents=True)
    # As if a batch died right after renaming the folder, before its registry commit:
    outcome = process_study(StudyTask(
        source=str(found.path), sha256=found.sha256, studies_dir=str(out / "studies"),
        config=config, config_hash=config_hash(config, "")))
    assert outcome.completed and outcome.folder
    report = run_batch(options, stream=io.StringIO())
    assert report.adopted == 1
    (run,) = _runs(out)
    assert Path(str(run.folder)).name == Path(outcome.folder).name
    assert [p.name for p in (out / "studies").iterdir()] == [Path(outcome.folder).name]
    # --group-readable modes (0o750 folders, 0o640 files) instead of owner-only.
    folder = Path(outcome.folder)
    assert (folder.stat().st_mode & 0o777) == 0o750
    assert all((p.stat().st_mode & 0o777) == 0o640 for p in folder.iterdir())
