"""The study registry: an SQLite file under the batch output folder.

Tables: ``studies`` (keyed by the recording's SHA-256), ``batches``, ``runs`` (software
version, rule-set names and hashes, status, error), ``results`` (indices per rule set)
and ``signoffs`` (mirrored from each study folder's signoff-log.jsonl). Only the batch
process writes it, one transaction per finished study; workers never open it.
"""

from __future__ import annotations

import json
import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

from hsat.batch._schema import migrate
from hsat.batch._signoff_state import SignedVersion, read_signoff_log
from hsat.batch._study import StudyOutcome, utc_now
from hsat.errors import OutputError, UnreadableInput

REGISTRY_FILE = "registry.sqlite"
STUDIES_DIR = "studies"
COMPLETED = ("done", "inadequate")
#: What ``--status`` accepts when listing.
LIST_STATUSES = ("done", "inadequate", "failed", "signed", "unsigned")


@dataclass(frozen=True)
class ResultRow:
    rule_set: str
    rule_set_sha256: str
    rei: float | None
    oai: float | None
    cai: float | None
    mai: float | None
    uai: float | None
    hi: float | None
    odi: float | None
    severity: str


@dataclass(frozen=True)
class RunRow:
    """One run joined with its study, results and sign-off state."""

    id: int
    study_sha256: str
    file_name: str
    recorded_at: str
    patient_code: str
    patient_name: str
    kit: str
    batch_id: int | None
    software_version: str
    config_hash: str
    rule_sets: tuple[tuple[str, str], ...]
    started_at: str
    finished_at: str
    duration_s: float
    status: str
    error: str
    error_kind: str
    folder: str | None
    report_path: str | None
    monitoring_time_h: float | None
    adequacy_reasons: str
    current: bool
    t90_pct: float | None
    nadir_pct: float | None
    hypoxic_burden: float | None
    source_path: str = ""
    results: dict[str, ResultRow] = field(default_factory=dict)
    signed: tuple[SignedVersion, ...] = ()


_RUN_COLUMNS = """
    r.id, r.study_sha256, s.file_name, s.recorded_at, s.patient_code, s.patient_name,
    s.kit, r.batch_id, r.software_version, r.config_hash, r.rule_sets, r.started_at,
    r.finished_at, r.duration_s, r.status, r.error, r.error_kind, r.folder, r.report_path,
    r.monitoring_time_h, r.adequacy_reasons, r.current, r.t90_pct, r.nadir_pct,
    r.hypoxic_burden, s.source_path
"""


def _create_private_file(path: Path, mode: int) -> None:
    fd = os.open(path, os.O_WRONLY | os.O_CREAT, mode)
    os.close(fd)


class Registry:
    """An open registry. Use :func:`open_registry`; close it (or use ``with``)."""

    def __init__(self, conn: sqlite3.Connection, path: Path) -> None:
        self.conn = conn
        self.path = path
        self.out_dir = path.parent

    def close(self) -> None:
        self.conn.close()

    def __enter__(self) -> Registry:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @contextmanager
    def transaction(self) -> Iterator[sqlite3.Connection]:
        """One write transaction: all of it lands, or none of it (even on SIGKILL)."""
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            yield self.conn
        except BaseException:
            self.conn.execute("ROLLBACK")
            raise
        self.conn.execute("COMMIT")

    # --- batches -------------------------------------------------------------------
    def start_batch(self, inbox: str, jobs: int, scheduler: str, log_path: str) -> int:
        with self.transaction() as conn:
            cur = conn.execute(
                "INSERT INTO batches (started_at, inbox, jobs, scheduler, log_path) "
                "VALUES (?, ?, ?, ?, ?)", (utc_now(), inbox, jobs, scheduler, log_path))
            return int(cur.lastrowid or 0)

    def finish_batch(self, batch_id: int, found: int, computed: int, failed: int,
                     exit_code: int) -> None:
        with self.transaction() as conn:
            conn.execute(
                "UPDATE batches SET finished_at = ?, found = ?, computed = ?, failed = ?, "
                "exit_code = ? WHERE id = ?",
                (utc_now(), found, computed, failed, exit_code, batch_id))

    # --- lookups used to plan a batch ---------------------------------------------
    def completed_run(self, sha256: str, software: str, config_hash: str) -> RunRow | None:
        """The current completed run of a study under this software and configuration."""
        rows = self._select(
            "r.study_sha256 = ? AND r.software_version = ? AND r.config_hash = ? "
            "AND r.current = 1 AND r.status != 'failed'", (sha256, software, config_hash))
        return rows[0] if rows else None

    def input_failure(self, sha256: str, software: str, config_hash: str) -> RunRow | None:
        """The latest run under this configuration when it failed on the input itself."""
        rows = self._select(
            "r.study_sha256 = ? AND r.software_version = ? AND r.config_hash = ?",
            (sha256, software, config_hash), order="r.id DESC", limit=1)
        if rows and rows[0].status == "failed" and rows[0].error_kind == "input":
            return rows[0]
        return None

    def run(self, run_id: int) -> RunRow:
        """One run by id."""
        return self._select("r.id = ?", (run_id,))[0]

    def known_folders(self) -> set[str]:
        return {row[0] for row in self.conn.execute(
            "SELECT folder FROM runs WHERE folder IS NOT NULL")}

    # --- writing one finished study ---------------------------------------------------
    def record(self, outcome: StudyOutcome, *, batch_id: int | None, file_name: str,
               size_bytes: int) -> int:
        """Record one outcome in one transaction; return the run id.

        A completed outcome becomes the current result for its key (study, software
        version, configuration); with ``outcome.rescore`` the previous current result is
        kept but retired. Recording the same folder twice returns the first row's id.
        """
        facts = outcome.facts
        folder = f"{STUDIES_DIR}/{Path(outcome.folder).name}" if outcome.folder else None
        report = (f"{folder}/{Path(outcome.report_path).name}"
                  if folder and outcome.report_path else None)
        key = (outcome.sha256, outcome.software_version, outcome.config_hash)
        with self.transaction() as conn:
            if folder is not None:
                existing = conn.execute("SELECT id FROM runs WHERE folder = ?",
                                        (folder,)).fetchone()
                if existing:
                    return int(existing[0])
            conn.execute(
                "INSERT INTO studies (sha256, file_name, source_path, size_bytes, first_seen)"
                " VALUES (?, ?, ?, ?, ?) ON CONFLICT (sha256) DO UPDATE SET "
                "file_name = excluded.file_name, source_path = excluded.source_path",
                (outcome.sha256, file_name, outcome.source, size_bytes, utc_now()))
            if outcome.completed:
                conn.execute(
                    "UPDATE studies SET recorded_at = ?, patient_code = ?, patient_name = ?,"
                    " kit = ? WHERE sha256 = ?",
                    (facts.recorded_at, facts.patient_code, facts.patient_name, facts.kit,
                     outcome.sha256))
            current = 1
            if outcome.completed:
                holder = conn.execute(
                    "SELECT id FROM runs WHERE study_sha256 = ? AND software_version = ? "
                    "AND config_hash = ? AND current = 1 AND status != 'failed'", key
                ).fetchone()
                if holder and outcome.rescore:
                    conn.execute("UPDATE runs SET current = 0 WHERE id = ?", (holder[0],))
                elif holder:
                    current = 0  # an older result holds the key: keep this one retired
            cur = conn.execute(
                "INSERT INTO runs (study_sha256, batch_id, software_version, config_hash, "
                "rule_sets, profile, intake_sha256, started_at, finished_at, duration_s, "
                "status, error, error_kind, folder, report_path, monitoring_time_h, "
                "adequacy_reasons, current, t90_pct, nadir_pct, hypoxic_burden) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (*key[:1], batch_id, *key[1:], json.dumps([list(p) for p in outcome.rule_sets]),
                 outcome.profile_fingerprint, outcome.intake_sha256, outcome.started_at,
                 outcome.finished_at, outcome.duration_s, outcome.status, outcome.error,
                 outcome.error_kind, folder, report, facts.monitoring_time_h,
                 "; ".join(facts.adequacy_reasons), current, facts.t90_pct,
                 facts.nadir_pct, facts.hypoxic_burden))
            run_id = int(cur.lastrowid or 0)
            for result in facts.results:
                ix = result.indices
                conn.execute(
                    "INSERT INTO results (run_id, rule_set, rule_set_sha256, rei, oai, cai, "
                    "mai, uai, hi, odi, severity, indices_json) "
                    "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                    (run_id, result.name, result.sha256, ix["rei"], ix["oai"], ix["cai"],
                     ix["mai"], ix["uai"], ix["hi"], ix["odi"], result.severity,
                     json.dumps(result.all_indices, default=str)))
        return run_id

    # --- sign-off state ---------------------------------------------------------------
    def sync_signoffs(self) -> int:
        """Mirror every study folder's signoff-log.jsonl; return the signed versions seen."""
        rows = self.conn.execute(
            "SELECT id, folder FROM runs WHERE folder IS NOT NULL").fetchall()
        seen = 0
        with self.transaction() as conn:
            for run_id, folder in rows:
                versions = read_signoff_log(self.out_dir / folder)
                seen += len(versions)
                conn.execute("DELETE FROM signoffs WHERE run_id = ?", (run_id,))
                conn.executemany(
                    "INSERT OR REPLACE INTO signoffs (run_id, version, signed_by, signed_at,"
                    " report_file) VALUES (?, ?, ?, ?, ?)",
                    [(run_id, v.version, v.signed_by, v.signed_at, v.report_file)
                     for v in versions])
        return seen

    # --- listing ---------------------------------------------------------------------
    def list_runs(self, *, statuses: tuple[str, ...] = (), since: str = "",
                  kits: tuple[str, ...] = (), all_runs: bool = False) -> list[RunRow]:
        """Runs for ``hsat registry``: the latest run of each study unless ``all_runs``.

        ``since`` (an ISO date) keeps studies recorded on or after it (first seen, for
        studies whose recording date is unknown); ``kits`` match case-insensitively.
        """
        where, params = ["1 = 1"], []
        if not all_runs:
            where.append("r.id = (SELECT MAX(id) FROM runs WHERE study_sha256 = r.study_sha256)")
        if since:
            where.append("COALESCE(NULLIF(s.recorded_at, ''), s.first_seen) >= ?")
            params.append(since)
        if kits:
            where.append(f"LOWER(s.kit) IN ({', '.join('?' * len(kits))})")
            params.extend(k.lower() for k in kits)
        plain = [s for s in statuses if s in ("done", "inadequate", "failed")]
        if plain:
            where.append(f"r.status IN ({', '.join('?' * len(plain))})")
            params.extend(plain)
        signed_clause = "EXISTS (SELECT 1 FROM signoffs g WHERE g.run_id = r.id)"
        if "signed" in statuses and "unsigned" not in statuses:
            where.append(signed_clause)
        elif "unsigned" in statuses and "signed" not in statuses:
            where.append(f"r.status != 'failed' AND NOT {signed_clause}")
        return self._select(" AND ".join(where), tuple(params),
                            order="COALESCE(NULLIF(s.recorded_at, ''), s.first_seen), r.id")

    def _select(self, where: str, params: tuple[object, ...], *, order: str = "r.id",
                limit: int | None = None) -> list[RunRow]:
        sql = (f"SELECT {_RUN_COLUMNS} FROM runs r JOIN studies s ON s.sha256 = "
               f"r.study_sha256 WHERE {where} ORDER BY {order}")
        if limit:
            sql += f" LIMIT {int(limit)}"
        rows = self.conn.execute(sql, params).fetchall()
        return [self._hydrate(row) for row in rows]

    def _hydrate(self, row: tuple[object, ...]) -> RunRow:
        run_id = int(row[0])  # type: ignore[arg-type]
        results = {
            r[0]: ResultRow(*r) for r in self.conn.execute(
                "SELECT rule_set, rule_set_sha256, rei, oai, cai, mai, uai, hi, odi, severity"
                " FROM results WHERE run_id = ? ORDER BY rule_set", (run_id,))
        }
        signed = tuple(SignedVersion(*s) for s in self.conn.execute(
            "SELECT version, signed_by, signed_at, report_file FROM signoffs "
            "WHERE run_id = ? ORDER BY version", (run_id,)))
        values = list(row)
        values[10] = tuple(tuple(p) for p in json.loads(str(values[10])))
        values[21] = bool(values[21])
        return RunRow(*values, results=results, signed=signed)  # type: ignore[arg-type]


def open_registry(out_dir: str | Path, *, create: bool = True,
                  file_mode: int = 0o600) -> Registry:
    """Open (creating and migrating as needed) the registry under ``out_dir``.

    Raises
    ------
    UnreadableInput
        ``create`` is False and there is no registry under ``out_dir``.
    OutputError
        The file cannot be opened or was written by a newer hsat.
    """
    path = Path(out_dir) / REGISTRY_FILE
    if not path.exists():
        if not create:
            raise UnreadableInput(out_dir, "no registry here (run `hsat batch` into this "
                                  "folder first)")
        _create_private_file(path, file_mode)
    try:
        conn = sqlite3.connect(path, isolation_level=None, timeout=30.0)
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")
        migrate(conn, str(path))
    except sqlite3.DatabaseError as exc:
        raise OutputError(path, f"cannot open registry ({exc})") from None
    return Registry(conn, path)
