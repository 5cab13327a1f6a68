"""Verification: every signed file against the sign-off log.

A study fails verification when a signed PDF or its record is missing or no longer has
the SHA-256 the log holds, when a signed file is on disk that the log does not list, or
when the log itself was edited: a line that is not valid JSON, that does not carry the
SHA-256 of the line before it, or whose facts (version, physician, time, PDF hash)
differ from the signed record written with the PDF.

This makes changes evident; it is not a cryptographic signature (someone who rewrites
the PDF, its record and the whole log consistently is not caught).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from hsat.errors import UnreadableInput
from hsat.signoff._log import (
    LOG_NAME,
    read_log,
    sha256_file,
    sha256_text,
    signed_versions_on_disk,
)


@dataclass(frozen=True)
class Verification:
    """What ``verify`` found: files that check out and problems, each naming a file."""

    folder: Path
    verified: list[str] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.problems

    @property
    def nothing_signed(self) -> bool:
        return not self.verified and not self.problems


def _check_file(folder: Path, name: object, expected: object, what: str, v: Verification
                ) -> None:
    if not isinstance(name, str) or not isinstance(expected, str):
        v.problems.append(f"{LOG_NAME}: the entry for {what} lacks its file name or SHA-256")
        return
    path = folder / name
    if not path.is_file():
        v.problems.append(f"{name}: missing (the log records it as signed)")
        return
    actual = sha256_file(path)
    if actual != expected:
        v.problems.append(f"{name}: ALTERED (SHA-256 {actual[:16]}... differs from the "
                          f"signed {expected[:16]}...)")
    else:
        v.verified.append(name)


_CROSS_CHECKED = ("version", "physician", "signed_at", "acknowledged_inadequate", "pdf_sha256")


def _cross_check(folder: Path, line_number: int, entry: dict[str, Any], v: Verification
                 ) -> None:
    """The log entry must state what the signed record (written with the PDF) states."""
    name = entry.get("record_file")
    if not isinstance(name, str) or name not in v.verified:
        return  # a missing or altered record is already reported
    try:
        record = json.loads((folder / name).read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError):
        v.problems.append(f"{name}: not a readable record")
        return
    for key in _CROSS_CHECKED:
        if key in record and record.get(key) != entry.get(key):
            v.problems.append(f"{LOG_NAME}: line {line_number} gives {key} "
                              f"{entry.get(key)!r} but {name} says {record.get(key)!r} "
                              "(the log was edited)")


def verify(study_dir: str | Path) -> Verification:
    """Check every signed file of a study folder against its sign-off log."""
    folder = Path(study_dir)
    if not folder.is_dir():
        raise UnreadableInput(folder, "study folder not found")
    v = Verification(folder)
    lines = read_log(folder)
    listed: set[str] = set()
    previous_raw = ""
    for line in lines:
        entry = line.entry
        if entry is None:
            v.problems.append(f"{LOG_NAME}: line {line.number} is not a valid record "
                              "(the log was edited or damaged)")
            previous_raw = line.raw
            continue
        expected_prev = sha256_text(previous_raw) if line.number > 1 else ""
        if entry.get("previous_entry_sha256") != expected_prev:
            v.problems.append(f"{LOG_NAME}: line {line.number} does not chain to the line "
                              "before it (a line was edited, removed or inserted)")
        previous_raw = line.raw
        version = entry.get("version")
        _check_file(folder, entry.get("report_file"), entry.get("pdf_sha256"),
                    f"version {version}", v)
        if entry.get("record_file") is not None:
            _check_file(folder, entry.get("record_file"), entry.get("record_sha256"),
                        f"version {version} record", v)
        _cross_check(folder, line.number, entry, v)
        listed.update(str(entry.get(k)) for k in ("report_file", "record_file"))
    for version, names in sorted(signed_versions_on_disk(folder).items()):
        for name in sorted(names):
            if name not in listed:
                v.problems.append(f"{name}: signed file for version {version} is not in "
                                  f"{LOG_NAME} (added or the log was truncated)")
    return v
