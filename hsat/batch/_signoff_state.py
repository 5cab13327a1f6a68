"""Sign-off state of a study folder, read from its append-only signoff-log.jsonl.

The log is written by ``hsat sign`` / ``hsat amend`` (hsat.signoff); the batch only reads
it so that the registry can say which studies are signed. A line that is not a JSON
object is skipped: a half-appended last line must not hide the lines before it.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

SIGNOFF_LOG = "signoff-log.jsonl"


@dataclass(frozen=True)
class SignedVersion:
    version: int
    signed_by: str
    signed_at: str
    report_file: str


def _pick(entry: dict[str, object], *keys: str) -> str:
    for key in keys:
        value = entry.get(key)
        if value not in (None, ""):
            return str(value)
    return ""


def read_signoff_log(folder: Path) -> list[SignedVersion]:
    """The signed versions recorded in ``folder/signoff-log.jsonl`` (oldest first)."""
    log = folder / SIGNOFF_LOG
    try:
        text = log.read_text(encoding="utf-8")
    except (FileNotFoundError, NotADirectoryError):
        return []
    versions: dict[int, SignedVersion] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        try:
            entry = json.loads(line)
        except json.JSONDecodeError:
            continue
        if not isinstance(entry, dict):
            continue
        raw_version = entry.get("version", number)
        try:
            version = int(raw_version)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            version = number
        versions[version] = SignedVersion(
            version=version,
            signed_by=_pick(entry, "signed_by", "signer", "physician", "by"),
            signed_at=_pick(entry, "signed_at", "time", "at", "timestamp"),
            report_file=_pick(entry, "report_file", "report", "file", "pdf"),
        )
    return [versions[v] for v in sorted(versions)]
