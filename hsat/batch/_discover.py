"""Discovery: find the recordings (and their intake sidecars) in an inbox folder."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

from hsat.errors import UnreadableInput

#: Recording suffixes taken from an inbox (compared case-insensitively).
RECORDING_SUFFIXES: tuple[str, ...] = (".edf",)
#: The intake sidecar beside ``<stem>.edf`` (parsed by ``hsat.intake``).
INTAKE_SUFFIX = ".intake.toml"
_CHUNK = 1 << 20


@dataclass(frozen=True)
class FoundRecording:
    """One recording found in the inbox.

    ``problem`` is set (and ``sha256`` empty) when the file could not even be read to
    hash it, e.g. for lack of permission; the batch then lists it as failed.
    """

    path: Path
    sha256: str
    size_bytes: int
    intake_path: Path | None = None
    intake_sha256: str = ""
    problem: str = ""

    @property
    def name(self) -> str:
        return self.path.name


def file_sha256(path: Path) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB chunks (constant memory)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(_CHUNK), b""):
            digest.update(chunk)
    return digest.hexdigest()


def intake_sidecar_for(recording: Path) -> Path | None:
    """``<stem>.intake.toml`` beside the recording, when it exists."""
    candidate = recording.with_name(recording.stem + INTAKE_SUFFIX)
    return candidate if candidate.is_file() else None


def _is_candidate(path: Path) -> bool:
    return (
        path.suffix.lower() in RECORDING_SUFFIXES
        and not path.name.startswith(".")
        and path.is_file()
    )


def discover(inbox: str | Path) -> list[FoundRecording]:
    """List the recordings under ``inbox`` (sub-folders included, hidden ones skipped).

    Files are returned in path order so that a batch's worklist is stable. Hidden files
    (a kit upload still in progress is often written under a dot name) are left alone.

    Raises
    ------
    UnreadableInput
        ``inbox`` does not exist or is not a folder.
    """
    root = Path(inbox)
    if not root.is_dir():
        raise UnreadableInput(root, "inbox folder not found" if not root.exists()
                              else "inbox is not a folder")
    found: list[FoundRecording] = []
    for path in sorted(root.rglob("*")):
        relative = path.relative_to(root)
        if any(part.startswith(".") for part in relative.parts[:-1]):
            continue
        if not _is_candidate(path):
            continue
        intake = intake_sidecar_for(path)
        try:
            size = path.stat().st_size
            sha = file_sha256(path)
            intake_sha = file_sha256(intake) if intake else ""
        except OSError as exc:
            found.append(FoundRecording(path, "", 0, intake, "",
                                        f"cannot read file ({exc.strerror})"))
            continue
        found.append(FoundRecording(path, sha, size, intake, intake_sha))
    return found
