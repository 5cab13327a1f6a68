"""The registry's SQLite schema and its migrations.

The schema version lives in SQLite's ``PRAGMA user_version``. Each migration moves the
database up one version inside one transaction, so a registry is always at a version
hsat knows; a registry written by a newer hsat is refused rather than guessed at.
"""

from __future__ import annotations

import sqlite3

from hsat.errors import OutputError

_V1 = """
CREATE TABLE studies (
    sha256        TEXT PRIMARY KEY,
    file_name     TEXT NOT NULL,
    source_path   TEXT NOT NULL,
    size_bytes    INTEGER NOT NULL,
    first_seen    TEXT NOT NULL,
    recorded_at   TEXT NOT NULL DEFAULT '',
    patient_code  TEXT NOT NULL DEFAULT '',
    patient_name  TEXT NOT NULL DEFAULT '',
    kit           TEXT NOT NULL DEFAULT ''
);
CREATE TABLE batches (
    id           INTEGER PRIMARY KEY,
    started_at   TEXT NOT NULL,
    finished_at  TEXT,
    inbox        TEXT NOT NULL,
    jobs         INTEGER NOT NULL,
    scheduler    TEXT NOT NULL DEFAULT '',
    log_path     TEXT NOT NULL DEFAULT '',
    found        INTEGER NOT NULL DEFAULT 0,
    computed     INTEGER NOT NULL DEFAULT 0,
    failed       INTEGER NOT NULL DEFAULT 0,
    exit_code    INTEGER
);
CREATE TABLE runs (
    id                INTEGER PRIMARY KEY,
    study_sha256      TEXT NOT NULL REFERENCES studies(sha256),
    batch_id          INTEGER REFERENCES batches(id),
    software_version  TEXT NOT NULL,
    config_hash       TEXT NOT NULL,
    rule_sets         TEXT NOT NULL,
    profile           TEXT NOT NULL DEFAULT '',
    intake_sha256     TEXT NOT NULL DEFAULT '',
    started_at        TEXT NOT NULL,
    finished_at       TEXT NOT NULL,
    duration_s        REAL NOT NULL,
    status            TEXT NOT NULL CHECK (status IN ('done', 'inadequate', 'failed')),
    error             TEXT NOT NULL DEFAULT '',
    error_kind        TEXT NOT NULL DEFAULT '' CHECK (error_kind IN ('', 'input', 'internal')),
    folder            TEXT,
    report_path       TEXT,
    monitoring_time_h REAL,
    adequacy_reasons  TEXT NOT NULL DEFAULT '',
    current           INTEGER NOT NULL DEFAULT 1 CHECK (current IN (0, 1))
);
-- One current completed result per study, software version and configuration:
-- a re-run cannot add a duplicate, a rescore must first retire the old one.
CREATE UNIQUE INDEX runs_one_current_result
    ON runs (study_sha256, software_version, config_hash)
    WHERE current = 1 AND status != 'failed';
CREATE UNIQUE INDEX runs_one_row_per_folder ON runs (folder) WHERE folder IS NOT NULL;
CREATE INDEX runs_by_study ON runs (study_sha256, id);
CREATE TABLE results (
    run_id          INTEGER NOT NULL REFERENCES runs(id),
    rule_set        TEXT NOT NULL,
    rule_set_sha256 TEXT NOT NULL,
    rei REAL, oai REAL, cai REAL, mai REAL, uai REAL, hi REAL, odi REAL,
    severity        TEXT NOT NULL DEFAULT '',
    indices_json    TEXT NOT NULL DEFAULT '{}',
    PRIMARY KEY (run_id, rule_set)
);
"""

# v2: oximetry measures per run (for QA queries without opening every summary) and the
# physician's sign-off state, mirrored from each study folder's signoff-log.jsonl.
_V2 = """
ALTER TABLE runs ADD COLUMN t90_pct REAL;
ALTER TABLE runs ADD COLUMN nadir_pct REAL;
ALTER TABLE runs ADD COLUMN hypoxic_burden REAL;
CREATE TABLE signoffs (
    run_id      INTEGER NOT NULL REFERENCES runs(id),
    version     INTEGER NOT NULL,
    signed_by   TEXT NOT NULL DEFAULT '',
    signed_at   TEXT NOT NULL DEFAULT '',
    report_file TEXT NOT NULL DEFAULT '',
    PRIMARY KEY (run_id, version)
);
"""

#: (version reached, SQL) in order; append new migrations, never edit old ones.
MIGRATIONS: tuple[tuple[int, str], ...] = ((1, _V1), (2, _V2))
SCHEMA_VERSION = MIGRATIONS[-1][0]


def schema_version(conn: sqlite3.Connection) -> int:
    return int(conn.execute("PRAGMA user_version").fetchone()[0])


def migrate(conn: sqlite3.Connection, path: str, *, target: int = SCHEMA_VERSION) -> int:
    """Bring the registry up to ``target``; return the version it was at.

    Raises
    ------
    OutputError
        The registry was written by a newer hsat (its version is above ``target``).
    """
    found = schema_version(conn)
    if found > SCHEMA_VERSION:
        raise OutputError(
            path, f"registry schema version {found} is newer than this hsat knows "
            f"({SCHEMA_VERSION}); upgrade hsat to use it"
        )
    for version, sql in MIGRATIONS:
        if found < version <= target:
            statements = [s.strip() for s in sql.split(";") if s.strip()]
            conn.execute("BEGIN IMMEDIATE")
            try:
                for statement in statements:
                    conn.execute(statement)
                conn.execute(f"PRAGMA user_version = {version}")
                conn.execute("COMMIT")
            except BaseException:
                conn.execute("ROLLBACK")
                raise
    return found
