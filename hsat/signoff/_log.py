"""The append-only sign-off log ``signoff-log.jsonl``: one JSON object per signed version.

Each line records the study, the version, the signed file and its SHA-256, the physician,
the time (UTC, ISO 8601), the reason for an amendment and whether an inadequate study was
acknowledged. Each line also carries the SHA-256 of the line before it
(``previous_entry_sha256``), so an edited or deleted line breaks the chain and
``hsat verify`` notices.
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hsat.outputs import append_line

LOG_NAME = "signoff-log.jsonl"
SIGNED_PATTERN = re.compile(r"^report-v(\d+)-signed\.(pdf|json)$")
#: A log line stays below PIPE_BUF (4096 bytes) so one append is never interleaved.
MAX_LINE_BYTES = 4000


def signed_pdf_name(version: int) -> str:
    return f"report-v{version}-signed.pdf"


def signed_record_name(version: int) -> str:
    return f"report-v{version}-signed.json"


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with path.open("rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def sha256_text(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


@dataclass(frozen=True)
class LogLine:
    """One line of the log as read: its number, raw text and parsed entry (None if bad)."""

    number: int
    raw: str
    entry: dict[str, Any] | None


def read_log(folder: Path) -> list[LogLine]:
    """Every line of the log (an absent log is an empty list)."""
    path = folder / LOG_NAME
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    lines = []
    for number, raw in enumerate(text.splitlines(), start=1):
        try:
            entry = json.loads(raw)
        except json.JSONDecodeError:
            entry = None
        lines.append(LogLine(number, raw, entry if isinstance(entry, dict) else None))
    return lines


def signed_versions_on_disk(folder: Path) -> dict[int, list[str]]:
    """Version -> names of the signed files present (PDF and its record)."""
    found: dict[int, list[str]] = {}
    for p in folder.iterdir():
        m = SIGNED_PATTERN.match(p.name)
        if m:
            found.setdefault(int(m.group(1)), []).append(p.name)
    return found


def last_version(folder: Path) -> int:
    """The highest version in the log or on disk (0 when nothing was signed)."""
    versions = [int(line.entry["version"]) for line in read_log(folder)
                if line.entry and isinstance(line.entry.get("version"), int)]
    versions += list(signed_versions_on_disk(folder))
    return max(versions, default=0)


def append_entry(folder: Path, entry: dict[str, Any]) -> str:
    """Append one entry, chained to the previous line; returns the line written."""
    lines = read_log(folder)
    previous = sha256_text(lines[-1].raw) if lines else ""
    record = {**entry, "previous_entry_sha256": previous}
    line = json.dumps(record, ensure_ascii=False, separators=(",", ":"), sort_keys=False)
    if len(line.encode("utf-8")) > MAX_LINE_BYTES:
        raise ValueError("sign-off log line too long")  # guarded by input limits upstream
    append_line(folder / LOG_NAME, line)
    return line
