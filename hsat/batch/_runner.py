"""The nightly batch: discover, plan, analyse in parallel, record, write the worklist.

Only this process writes the registry, one transaction per finished study, right after
the worker renamed the study folder into place. A batch killed in between leaves a
complete folder that the registry does not know yet: the next batch adopts it (from the
folder's run marker) instead of analysing the recording again.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import shutil
import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any, TextIO

from hsat import __version__
from hsat.batch._discover import FoundRecording, discover, file_sha256
from hsat.batch._dispatch import connect, run_dask, run_local
from hsat.batch._lock import BatchLock
from hsat.batch._progress import BatchLog, Progress
from hsat.batch._registry import STUDIES_DIR, Registry, RunRow, open_registry
from hsat.batch._study import (
    PARTIAL_PREFIX,
    RUN_MARKER,
    BatchConfig,
    StudyOutcome,
    StudyTask,
    outcome_from_folder,
)
from hsat.batch._worklist import WorklistItem, write_worklist
from hsat.errors import EXIT_BATCH_FAILED, EXIT_OK
from hsat.outputs import ensure_dir

LOGS_DIR = "logs"


@dataclass(frozen=True)
class BatchOptions:
    """Everything ``hsat batch`` was asked to do."""

    inbox: Path
    out: Path
    jobs: int | None = None
    rules: tuple[str, ...] = ()
    profile: str | None = None
    site: str | None = None
    rescore: bool = False
    scheduler: str | None = None
    scheduler_timeout_s: float = 20.0
    pdf: bool = True
    file_mode: int = 0o600
    dir_mode: int = 0o700


@dataclass(frozen=True)
class BatchReport:
    """What a batch did: one worklist item per recording found, and where things went."""

    batch_id: int
    items: tuple[WorklistItem, ...]
    exit_code: int
    log_path: Path
    worklist_csv: Path
    worklist_html: Path
    adopted: int = 0
    counts: dict[str, int] = field(default_factory=dict)


def make_config(options: BatchOptions) -> BatchConfig:
    """Load the rule sets (failing early on a bad one) and fingerprint the profile."""
    from hsat.rulesets import load_rule_sets

    rule_sets = load_rule_sets(list(options.rules) or None)
    profile_fp = ""
    if options.profile:
        path = Path(options.profile)
        profile_fp = (f"{path.name}:{file_sha256(path)}" if path.is_file()
                      else f"name:{options.profile}")
    return BatchConfig(
        software_version=__version__, rules=tuple(options.rules),
        rule_sets=tuple((rs.name, rs.content_sha256) for rs in rule_sets),
        profile=options.profile, profile_fingerprint=profile_fp, site=options.site,
        pdf=options.pdf, file_mode=options.file_mode, dir_mode=options.dir_mode)


def config_hash(config: BatchConfig, intake_sha256: str) -> str:
    """The key of a configuration: rule-set names and hashes, profile and intake file."""
    canonical = json.dumps({"rule_sets": sorted(config.rule_sets),
                            "profile": config.profile_fingerprint,
                            "intake": intake_sha256}, sort_keys=True)
    return hashlib.sha256(canonical.encode("utf-8")).hexdigest()


def adopt_finished_folders(registry: Registry, studies_dir: Path) -> int:
    """Register complete study folders a killed batch left behind; drop partial ones."""
    known = {Path(folder).name for folder in registry.known_folders()}
    adopted = 0
    for folder in sorted(studies_dir.iterdir()):
        if folder.name.startswith(PARTIAL_PREFIX):
            shutil.rmtree(folder, ignore_errors=True)
            continue
        marker_path = folder / RUN_MARKER
        if folder.name in known or not marker_path.is_file():
            continue
        marker = json.loads(marker_path.read_text(encoding="utf-8"))
        outcome = outcome_from_folder(folder, marker)
        source = Path(outcome.source)
        registry.record(outcome, batch_id=None, file_name=source.name,
                        size_bytes=source.stat().st_size if source.exists() else 0)
        adopted += 1
    return adopted


def _rei_text(run: RunRow) -> str:
    parts = [f"{name} {r.rei:.1f}" for name, r in run.results.items() if r.rei is not None]
    return ("REI " + ", ".join(parts)) if parts else ""


def _item(found: FoundRecording, status: str, run: RunRow | None, reason: str = ""
          ) -> WorklistItem:
    return WorklistItem(file_name=found.name, status=status, run=run, reason=reason,
                        source=str(found.path))


def _status_of(run: RunRow, fresh: bool) -> str:
    if run.status == "inadequate":
        return "inadequate - repeat study"
    if run.status == "failed":
        return "failed"
    return "new" if fresh else "done earlier"


def run_batch(options: BatchOptions, *, stream: TextIO | None = None,
              live: bool | None = None) -> BatchReport:
    """Run one batch over ``options.inbox`` into ``options.out``.

    Recordings already done under the same software version and configuration are not
    analysed again unless ``options.rescore``; a failure is recorded with its reason and
    never stops the others. The exit code is 9 when any recording in the inbox failed.
    """
    stream = stream or sys.stdout
    live = stream.isatty() if live is None else live
    config = make_config(options)  # a bad rule set or inbox fails before OUT is touched
    found = discover(options.inbox)
    out = ensure_dir(options.out, options.dir_mode)
    with BatchLock(out, options.file_mode), contextlib.ExitStack() as stack:
        studies_dir = ensure_dir(out / STUDIES_DIR, options.dir_mode)
        logs_dir = ensure_dir(out / LOGS_DIR, options.dir_mode)
        client = None
        if options.scheduler:
            client = connect(options.scheduler, options.scheduler_timeout_s)
            stack.callback(client.close)
        stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
        log = BatchLog(logs_dir / f"batch-{stamp}-{os.getpid()}.log", options.file_mode)
        progress = Progress(stream, log, live=live)
        jobs = options.jobs or os.cpu_count() or 1
        with open_registry(out, file_mode=options.file_mode) as registry:
            batch_id = registry.start_batch(str(options.inbox), jobs,
                                            options.scheduler or "", str(log.path))
            adopted = adopt_finished_folders(registry, studies_dir)
            where = f"on {options.scheduler}" if options.scheduler else f"with {jobs} job(s)"
            progress.note(f"batch {batch_id}: {len(found)} recording(s) in {options.inbox}, "
                          f"rule sets {', '.join(n for n, _ in config.rule_sets)}, {where}"
                          + (f"; adopted {adopted} finished folder(s)" if adopted else ""))
            progress.total = len(found)
            items, tasks = _plan(found, config, options, registry, studies_dir, progress)
            by_source = {str(rec.path): rec for rec in found}
            for outcome in _execute(tasks, client, jobs, progress):
                _record(outcome, registry, batch_id, by_source[outcome.source], items,
                        progress)
            progress.close()
            registry.sync_signoffs()
            ordered = tuple(items[f.path] for f in found)
            failed = sum(1 for item in ordered if item.status == "failed")
            exit_code = EXIT_BATCH_FAILED if failed else EXIT_OK
            csv_path, html_path = write_worklist(out, ordered, config.rule_sets, batch_id,
                                                 mode=options.file_mode,
                                                 dir_mode=options.dir_mode)
            registry.finish_batch(batch_id, len(found), len(tasks), failed, exit_code)
        counts: dict[str, int] = {}
        for item in ordered:
            counts[item.status] = counts.get(item.status, 0) + 1
        progress.note(f"batch {batch_id} finished: "
                      + ", ".join(f"{v} {k}" for k, v in counts.items())
                      + f"; worklist {csv_path}")
        return BatchReport(batch_id, ordered, exit_code, log.path, csv_path, html_path,
                           adopted, counts)


def _plan(found: list[FoundRecording], config: BatchConfig, options: BatchOptions,
          registry: Registry, studies_dir: Path, progress: Progress
          ) -> tuple[dict[Path, WorklistItem], list[StudyTask]]:
    items: dict[Path, WorklistItem] = {}
    tasks: list[StudyTask] = []
    first_by_sha: dict[str, FoundRecording] = {}
    for rec in found:
        if rec.problem:
            items[rec.path] = _item(rec, "failed", None, f"{rec.path}: {rec.problem}")
            progress.study("failed", rec.name, rec.problem)
            continue
        if rec.sha256 in first_by_sha:
            same = first_by_sha[rec.sha256].name
            items[rec.path] = _item(rec, f"same recording as {same}", None)
            progress.study("skipped", rec.name, f"same recording as {same}")
            continue
        first_by_sha[rec.sha256] = rec
        key = config_hash(config, rec.intake_sha256)
        if not options.rescore:
            done = registry.completed_run(rec.sha256, config.software_version, key)
            if done is not None:
                items[rec.path] = _item(rec, _status_of(done, False), done)
                progress.study(items[rec.path].status, rec.name, f"{done.folder}")
                continue
            failure = registry.input_failure(rec.sha256, config.software_version, key)
            if failure is not None:
                items[rec.path] = _item(rec, "failed", failure, failure.error)
                progress.study("failed", rec.name, f"(earlier) {failure.error}")
                continue
        tasks.append(StudyTask(
            source=str(rec.path), sha256=rec.sha256, studies_dir=str(studies_dir),
            config=config, config_hash=key,
            intake=str(rec.intake_path) if rec.intake_path else None,
            intake_sha256=rec.intake_sha256, rescore=options.rescore))
    return items, tasks


def _execute(tasks: list[StudyTask], client: Any, jobs: int, progress: Progress
             ) -> Iterator[StudyOutcome]:
    if not tasks:
        return iter(())
    started = time.monotonic()

    def tick(running: list[StudyTask]) -> None:
        progress.redraw([Path(t.source).name for t in running], time.monotonic() - started)

    if client is not None:
        return run_dask(tasks, client, tick)
    return run_local(tasks, jobs, tick)


def _record(outcome: StudyOutcome, registry: Registry, batch_id: int, rec: FoundRecording,
            items: dict[Path, WorklistItem], progress: Progress) -> None:
    run_id = registry.record(outcome, batch_id=batch_id, file_name=rec.name,
                             size_bytes=rec.size_bytes)
    run = registry.run(run_id)
    status = _status_of(run, True)
    items[rec.path] = _item(rec, status, run, outcome.error)
    detail = outcome.error if outcome.status == "failed" else _rei_text(run)
    progress.study(status, rec.name, f"{detail} ({outcome.duration_s:.0f} s)")
