"""Sign-off state of a study folder, from its append-only signoff-log.jsonl.

The log belongs to ``hsat.signoff`` (``hsat sign`` / ``hsat amend`` write it, its
``read_log`` reads it); the batch only condenses it so that the registry can say which
studies are signed. A line that is not a JSON object (a half-appended last line) is
skipped and does not hide the lines before it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path


@dataclass(frozen=True)
class SignedVersion:
    version: int
    signed_by: str
    signed_at: str
    report_file: str


def read_signoff_log(folder: Path) -> list[SignedVersion]:
    """The signed versions recorded in ``folder``'s sign-off log (oldest first)."""
    from hsat.signoff import read_log

    if not folder.is_dir():
        return []
    versions: dict[int, SignedVersion] = {}
    for line in read_log(folder):
        entry = line.entry
        if entry is None or not isinstance(entry.get("version"), int):
            continue
        version = int(entry["version"])
        versions[version] = SignedVersion(
            version=version, signed_by=str(entry.get("physician") or ""),
            signed_at=str(entry.get("signed_at") or ""),
            report_file=str(entry.get("report_file") or ""))
    return [versions[v] for v in sorted(versions)]
