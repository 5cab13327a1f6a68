"""The per-study job: analyse one recording into a finished study folder.

This is the only code that runs in worker processes (local pool or Dask workers). It
computes and writes a study folder and returns a small picklable outcome; it never
touches the registry. The folder is built under a hidden ``.partial-*`` name and renamed
into place only when complete, so a worker killed at any moment leaves no folder that
looks finished.
"""

from __future__ import annotations

import json
import os
import shutil
import threading
import time
import uuid
from dataclasses import asdict, dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from hsat.batch._facts import StudyFacts, facts_from_summary, read_summary
from hsat.batch._names import study_folder_name
from hsat.errors import ChannelError, ConfigError, HsatError, UnreadableInput
from hsat.outputs import atomic_write_text, ensure_dir

#: Written last into every study folder the batch builds; its presence marks the folder
#: complete and says which recording and configuration produced it.
RUN_MARKER = "batch-run.json"
PARTIAL_PREFIX = ".partial-"
#: Errors that the same file under the same configuration will always raise again.
_INPUT_ERRORS = (UnreadableInput, ChannelError, ConfigError)


def utc_now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


@dataclass(frozen=True)
class BatchConfig:
    """What every study of a batch is analysed with (the same for all workers)."""

    software_version: str
    rules: tuple[str, ...]
    rule_sets: tuple[tuple[str, str], ...]  # (name, SHA-256 of the rule file)
    profile: str | None = None
    profile_fingerprint: str = ""
    site: str | None = None
    pdf: bool = True
    file_mode: int = 0o600
    dir_mode: int = 0o700


@dataclass(frozen=True)
class StudyTask:
    """One recording to analyse into ``studies_dir``."""

    source: str
    sha256: str
    studies_dir: str
    config: BatchConfig
    config_hash: str
    intake: str | None = None
    intake_sha256: str = ""
    rescore: bool = False


@dataclass(frozen=True)
class StudyOutcome:
    """What became of one task; ``folder`` is set for completed studies only."""

    source: str
    sha256: str
    status: str  # "done", "inadequate" or "failed"
    started_at: str
    finished_at: str
    duration_s: float
    config_hash: str
    software_version: str
    rule_sets: tuple[tuple[str, str], ...]
    profile_fingerprint: str = ""
    intake_sha256: str = ""
    rescore: bool = False
    error: str = ""
    error_kind: str = ""  # "input" (will fail again) or "internal" (worth a retry)
    folder: str | None = None
    report_path: str | None = None
    facts: StudyFacts = field(default_factory=StudyFacts)

    @property
    def completed(self) -> bool:
        return self.status in ("done", "inadequate")


def _apply_modes(folder: Path, file_mode: int, dir_mode: int) -> None:
    for path in folder.rglob("*"):
        os.chmod(path, dir_mode if path.is_dir() else file_mode)
    os.chmod(folder, dir_mode)


def _fsync_dir(folder: Path) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _claim_name(studies_dir: Path, base: str) -> Path:
    """The first of ``base``, ``base-r2``, ``base-r3``, ... that does not exist yet."""
    candidate, n = studies_dir / base, 1
    while candidate.exists():
        n += 1
        candidate = studies_dir / f"{base}-r{n}"
    return candidate


def marker_for(task: StudyTask, started_at: str, finished_at: str, duration_s: float
               ) -> dict[str, Any]:
    return {
        "format": 1,
        "sha256": task.sha256,
        "source": task.source,
        "software_version": task.config.software_version,
        "config_hash": task.config_hash,
        "rule_sets": [list(pair) for pair in task.config.rule_sets],
        "profile": task.config.profile_fingerprint,
        "intake_sha256": task.intake_sha256,
        "rescore": task.rescore,
        "started_at": started_at,
        "finished_at": finished_at,
        "duration_s": duration_s,
    }


def outcome_from_folder(folder: Path, marker: dict[str, Any]) -> StudyOutcome:
    """Rebuild the outcome of a finished study folder from its marker and summary."""
    facts = facts_from_summary(read_summary(folder))
    reports = sorted(folder.glob("report-draft*.pdf"))
    return StudyOutcome(
        source=str(marker["source"]), sha256=str(marker["sha256"]),
        status="inadequate" if facts.adequate is False else "done",
        started_at=str(marker["started_at"]), finished_at=str(marker["finished_at"]),
        duration_s=float(marker["duration_s"]), config_hash=str(marker["config_hash"]),
        software_version=str(marker["software_version"]),
        rule_sets=tuple((str(n), str(h)) for n, h in marker["rule_sets"]),
        profile_fingerprint=str(marker.get("profile", "")),
        intake_sha256=str(marker.get("intake_sha256", "")),
        rescore=bool(marker.get("rescore", False)),
        folder=str(folder), report_path=str(reports[0]) if reports else None, facts=facts,
    )


def _failed(task: StudyTask, started: str, t0: float, message: str, kind: str
            ) -> StudyOutcome:
    return StudyOutcome(
        source=task.source, sha256=task.sha256, status="failed", started_at=started,
        finished_at=utc_now(), duration_s=round(time.monotonic() - t0, 3),
        config_hash=task.config_hash, software_version=task.config.software_version,
        rule_sets=task.config.rule_sets, profile_fingerprint=task.config.profile_fingerprint,
        intake_sha256=task.intake_sha256, rescore=task.rescore, error=message,
        error_kind=kind,
    )


def process_study(task: StudyTask) -> StudyOutcome:
    """Analyse one recording into a complete study folder under ``task.studies_dir``.

    Never raises for a bad recording or a bug in a stage: the outcome then has status
    ``failed`` and the reason. The folder appears under its final name only once every
    file in it, the run marker last, is written.
    """
    from hsat.api import analyze

    started, t0 = utc_now(), time.monotonic()
    studies_dir = Path(task.studies_dir)
    partial = studies_dir / f"{PARTIAL_PREFIX}{task.sha256[:12]}-{uuid.uuid4().hex[:8]}"
    cfg = task.config
    try:
        exit_if_orphaned()
        ensure_dir(partial, cfg.dir_mode)
        result = analyze(
            task.source, partial, rules=list(cfg.rules), profile=cfg.profile,
            pdf=cfg.pdf, intake=task.intake, site=cfg.site,
        )
        facts = facts_from_summary(result.summary)
        duration = round(time.monotonic() - t0, 3)
        marker = marker_for(task, started, utc_now(), duration)
        atomic_write_text(partial / RUN_MARKER, json.dumps(marker, indent=2) + "\n",
                          mode=cfg.file_mode)
        _apply_modes(partial, cfg.file_mode, cfg.dir_mode)
        date_part = facts.recorded_at[:10]
        final = _claim_name(studies_dir, study_folder_name(
            date_part, facts.patient_code or facts.patient_name, task.sha256))
        exit_if_orphaned()
        os.rename(partial, final)
        _fsync_dir(studies_dir)
        return outcome_from_folder(final, marker)
    except _INPUT_ERRORS as err:
        return _failed(task, started, t0, str(err), "input")
    except HsatError as err:
        return _failed(task, started, t0, str(err), "internal")
    except Exception as exc:  # a bug in a stage must not stop the batch
        return _failed(task, started, t0,
                       f"internal error ({type(exc).__name__}: {exc})", "internal")
    finally:
        shutil.rmtree(partial, ignore_errors=True)


def outcome_to_json(outcome: StudyOutcome) -> str:
    """One line of JSON describing an outcome (for the batch log)."""
    return json.dumps(asdict(outcome), default=str, separators=(",", ":"))


#: The batch process a pool worker serves (set by ``watch_parent`` in the worker only).
_WORKER_PARENT: dict[str, int] = {}


def exit_if_orphaned() -> None:
    """In a pool worker whose batch process is gone, exit at once (before a rename)."""
    parent = _WORKER_PARENT.get("pid")
    if parent is not None and os.getppid() != parent:
        os._exit(70)


def watch_parent(parent_pid: int, interval_s: float = 0.05) -> None:
    """Worker initializer: exit as soon as the batch process that started us is gone.

    A batch killed with SIGKILL cannot stop its pool; without this, orphaned workers
    would finish their study and rename folders while the next batch runs. The thread
    polls the parent; ``process_study`` checks again before it starts and before it
    renames a finished folder, so an orphan never publishes a study.
    """
    _WORKER_PARENT["pid"] = parent_pid

    def _watch() -> None:
        while True:
            exit_if_orphaned()
            time.sleep(interval_s)

    threading.Thread(target=_watch, name="hsat-parent-watch", daemon=True).start()
