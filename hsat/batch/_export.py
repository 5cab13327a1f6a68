"""``hsat export --deidentify``: a research copy of the registry's results.

What goes out is built from an allow-list, not by deleting from a copy: per study a
reduced summary.json and its events.csv, plus one studies.csv for the cohort. Patients
and studies are named by keyed HMAC-SHA-256 pseudonyms (the same patient gets the same
pseudonym under the same key; without the key the pseudonym cannot be traced back).
Dates are cut to the year and ages of 90 and over are grouped, after the HIPAA Safe
Harbor method (45 CFR 164.514(b)(2); from memory). No PDF, EDF, sign-off or review log
is exported. Before the copy is renamed into place, every exported file is searched for
every identifier of every study (EDF header fields, summary, intake sidecar); one hit
aborts the export.
"""

from __future__ import annotations

import csv
import hashlib
import hmac
import io
import json
import os
import re
import shutil
import uuid
from datetime import UTC, date, datetime
from pathlib import Path
from typing import Any

from hsat import __version__
from hsat.batch._discover import intake_sidecar_for
from hsat.batch._facts import INDEX_KEYS, read_summary
from hsat.batch._identifiers import identifier_pattern, study_identifiers
from hsat.batch._registry import RunRow, open_registry
from hsat.errors import ConfigError, OutputError
from hsat.outputs import atomic_write_text, ensure_dir

KEY_ENV = "HSAT_EXPORT_KEY"
MIN_KEY_BYTES = 16
#: Ages at or above this are exported as this value (Safe Harbor groups 90+; from memory).
AGE_CAP = 90
_REMOVED = "[removed]"
_DATE_IN_TEXT = re.compile(r"\b(\d{4})-\d{2}-\d{2}(?:[T ][0-9:.+\-Z]*)?")
#: summary.json parts copied as they are (numbers, fixed vocabulary, relative times).
_KEPT_AS_IS = ("schema_version", "recording_time_h", "monitoring_time_h", "channels",
               "exclusions", "wake", "adequacy", "indices", "spo2", "pulse", "position",
               "hourly", "sensors", "notes")


def load_key(key_file: str | Path | None, env: dict[str, str] | None = None) -> bytes:
    """The pseudonym key, from ``key_file`` or else the ``HSAT_EXPORT_KEY`` variable.

    Raises
    ------
    ConfigError
        No key, an unreadable key file, or a key shorter than 16 bytes.
    """
    env = dict(os.environ) if env is None else env
    if key_file is not None:
        try:
            key = Path(key_file).read_bytes().strip()
        except OSError as exc:
            raise ConfigError(key_file, f"cannot read key file ({exc.strerror})") from None
        where: object = key_file
    elif env.get(KEY_ENV):
        key, where = env[KEY_ENV].strip().encode("utf-8"), KEY_ENV
    else:
        raise ConfigError(None, f"no pseudonym key: give --key-file FILE or set {KEY_ENV}")
    if len(key) < MIN_KEY_BYTES:
        raise ConfigError(where, f"pseudonym key is too short ({len(key)} bytes; "
                          f"at least {MIN_KEY_BYTES} are needed)")
    return key


def pseudonym(key: bytes, kind: str, value: str) -> str:
    """``<kind>-`` + the first 16 hex digits of HMAC-SHA-256(key, kind:value)."""
    digest = hmac.new(key, f"{kind}:{value}".encode(), hashlib.sha256).hexdigest()
    return f"{kind}-{digest[:16]}"


def _age(birthdate: object, on: object) -> int | None:
    try:
        born = date.fromisoformat(str(birthdate)[:10])
        day = date.fromisoformat(str(on)[:10])
    except ValueError:
        return None
    years = day.year - born.year - ((day.month, day.day) < (born.month, born.day))
    return min(years, AGE_CAP)


def _scrub(value: Any, pattern: re.Pattern[str] | None) -> Any:
    """Dates cut to the year and identifiers replaced, in every string of a JSON value."""
    if isinstance(value, dict):
        return {k: _scrub(v, pattern) for k, v in value.items()}
    if isinstance(value, list):
        return [_scrub(v, pattern) for v in value]
    if isinstance(value, str):
        text = _DATE_IN_TEXT.sub(lambda m: m.group(1), value)
        return pattern.sub(_REMOVED, text) if pattern else text
    return value


def _subject_key(summary: dict[str, Any]) -> str:
    patient = summary.get("patient") or {}
    code = str(patient.get("code") or "").strip().lower()
    if code:
        return "code:" + code
    name = str(patient.get("name") or "").strip().lower()
    return f"name:{name}|{patient.get('birthdate') or ''}" if name else ""


def research_summary(summary: dict[str, Any], study_id: str, subject_id: str,
                     pattern: re.Pattern[str] | None) -> dict[str, Any]:
    """The allow-listed, pseudonymised summary of one study."""
    patient = summary.get("patient") or {}
    study = summary.get("study") or {}
    kit = summary.get("kit") or {}
    start = str(study.get("start_time") or "")
    kept = {key: summary[key] for key in _KEPT_AS_IS if key in summary}
    kept["software"] = {"version": str((summary.get("software") or {}).get("version", ""))}
    kept["study"] = {
        "study_id": study_id, "year": start[:4] if start[:4].isdigit() else "",
        "file_type": study.get("file_type", ""), "profile": study.get("profile", ""),
        "lights_off_s": study.get("lights_off_s"), "lights_on_s": study.get("lights_on_s"),
    }
    kept["patient"] = {"subject_id": subject_id, "sex": patient.get("sex", ""),
                       "age_years": _age(patient.get("birthdate"), start)}
    kept["kit"] = {"kit": kit.get("kit", "")} if isinstance(kit, dict) else {}
    kept["rule_sets"] = [{k: rs.get(k) for k in ("name", "sha256", "parameters")}
                         for rs in summary.get("rule_sets") or [] if isinstance(rs, dict)]
    return _scrub(kept, pattern)


def _studies_csv(rows: list[dict[str, Any]]) -> str:
    columns: list[str] = []
    for row in rows:
        columns.extend(k for k in row if k not in columns)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=columns or ["study_id"], lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    return buffer.getvalue()


def _csv_row(run: RunRow, research: dict[str, Any]) -> dict[str, Any]:
    row: dict[str, Any] = {
        "study_id": research["study"]["study_id"],
        "subject_id": research["patient"]["subject_id"],
        "year": research["study"]["year"], "age_years": research["patient"]["age_years"],
        "sex": research["patient"]["sex"], "kit": run.kit if run.kit else "",
        "status": run.status, "monitoring_time_h": run.monitoring_time_h,
        "t90_pct": run.t90_pct, "nadir_pct": run.nadir_pct,
        "hypoxic_burden": run.hypoxic_burden, "software_version": run.software_version,
    }
    for name, result in run.results.items():
        for index in INDEX_KEYS:
            row[f"{index}_{name}"] = getattr(result, index)
        row[f"severity_{name}"] = result.severity
        row[f"rule_set_sha256_{name}"] = result.rule_set_sha256
    return row


def _verify(folder: Path, pattern: re.Pattern[str] | None) -> None:
    """Refuse the export if any identifier survived in any file (or a PDF/EDF slipped in)."""
    for path in sorted(p for p in folder.rglob("*") if p.is_file()):
        if path.suffix.lower() in (".pdf", ".edf", ".jsonl"):
            raise OutputError(path, "a report, recording or log must not be exported")
        text = path.read_bytes().decode("utf-8", "replace")
        if pattern is not None and pattern.search(text):
            raise OutputError(path.relative_to(folder), "an identifier survived "
                              "de-identification; nothing was exported")


def export_deidentified(out_dir: str | Path, to: str | Path, key: bytes, *,
                        file_mode: int = 0o600, dir_mode: int = 0o700) -> tuple[Path, int]:
    """Write the research copy of ``out_dir``'s completed studies to ``to``.

    Returns the export folder and the number of studies in it. The folder is built under
    a hidden temporary name beside ``to`` and renamed into place when complete and
    verified.

    Raises
    ------
    OutputError
        ``to`` exists and is not empty, cannot be written, or verification failed.
    """
    out, target = Path(out_dir), Path(to)
    if target.exists() and (not target.is_dir() or any(target.iterdir())):
        raise OutputError(target, "export folder exists and is not empty")
    ensure_dir(target.parent, dir_mode)
    partial = target.parent / f".{target.name}.partial-{uuid.uuid4().hex[:8]}"
    ensure_dir(partial, dir_mode)
    try:
        with open_registry(out, create=False) as registry:
            runs = [r for r in registry.list_runs() if r.status != "failed" and r.folder]
        identifiers: set[str] = set()
        loaded = []
        for run in runs:
            summary = read_summary(out / str(run.folder))
            source = Path(run.source_path) if run.source_path else None
            intake = intake_sidecar_for(source) if source is not None else None
            identifiers |= study_identifiers(summary, source, intake)
            loaded.append((run, summary))
        pattern = identifier_pattern(identifiers)
        rows = []
        for run, summary in loaded:
            study_id = pseudonym(key, "study", run.study_sha256)
            subject = _subject_key(summary)
            subject_id = pseudonym(key, "subject", subject) if subject else study_id
            research = research_summary(summary, study_id, subject_id, pattern)
            folder = ensure_dir(partial / study_id, dir_mode)
            atomic_write_text(folder / "summary.json",
                              json.dumps(research, indent=2, default=str) + "\n",
                              mode=file_mode)
            events = out / str(run.folder) / "events.csv"
            if events.is_file():
                atomic_write_text(folder / "events.csv",
                                  events.read_text(encoding="utf-8"), mode=file_mode)
            rows.append(_csv_row(run, research))
        atomic_write_text(partial / "studies.csv", _studies_csv(rows), mode=file_mode)
        manifest = {
            "software": {"name": "hsat", "version": __version__},
            "exported_on": datetime.now(UTC).date().isoformat(),
            "studies": len(rows),
            "key_id": pseudonym(key, "key", "id"),
            "method": "allow-listed fields; HMAC-SHA-256 pseudonyms; dates cut to the "
                      f"year; ages capped at {AGE_CAP}; no reports, recordings or logs",
        }
        atomic_write_text(partial / "manifest.json", json.dumps(manifest, indent=2) + "\n",
                          mode=file_mode)
        _verify(partial, pattern)
        if target.exists():
            target.rmdir()
        os.rename(partial, target)
    finally:
        shutil.rmtree(partial, ignore_errors=True)
    return target, len(rows)
