"""The study folder as the review uses it: summaries, the recording, and safe file access.

``summary.json`` is the current summary (the automatic one until a rescore, the reviewed
one after). The first rescore keeps the automatic summary as ``summary-auto.json``; a
later ``hsat analyze`` into the same folder writes a new ``summary.json`` without a
``review`` object, and the next rescore then takes that one as the new automatic summary.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from hsat.errors import UnreadableInput

SUMMARY = "summary.json"
AUTO_SUMMARY = "summary-auto.json"
#: Files of a study folder the page may fetch; nothing else is ever served from it.
SERVABLE_SUFFIXES: frozenset[str] = frozenset({".pdf", ".json", ".csv", ".jsonl"})


def study_folder(path: str | Path) -> Path:
    """The resolved study folder; ``UnreadableInput`` when it is not one."""
    folder = Path(path).expanduser().resolve()
    if not folder.is_dir():
        raise UnreadableInput(path, "no such study folder")
    if not (folder / SUMMARY).is_file():
        raise UnreadableInput(folder, f"not a study folder (no {SUMMARY}; run hsat analyze "
                              "first)")
    return folder


def read_json(path: Path) -> dict[str, Any]:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise UnreadableInput(path, f"cannot read ({exc.strerror})") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise UnreadableInput(path, f"not valid JSON ({exc})") from None
    if not isinstance(data, dict):
        raise UnreadableInput(path, "expected a JSON object")
    return data


def automatic_summary(folder: Path) -> dict[str, Any]:
    """The summary of the automatic scoring (see the module docstring)."""
    current = read_json(folder / SUMMARY)
    if "review" not in current:
        return current
    auto_path = folder / AUTO_SUMMARY
    if not auto_path.is_file():
        raise UnreadableInput(auto_path, f"missing: {SUMMARY} holds reviewed results but the "
                              "automatic summary it was computed from is gone")
    return read_json(auto_path)


def recording_path(folder: Path, summary: dict[str, Any],
                   override: str | Path | None = None) -> Path:
    """The night's EDF.

    ``override`` when given; else ``study.input_path`` of the summary if it exists there;
    else a file named ``study.input_file`` in the study folder, beside it, in a folder
    beside it or beside its parent (``inbox/`` next to ``reports/``, say), or in the
    working directory. The caller checks the SHA-256 against ``study.input_sha256``.
    """
    if override is not None:
        candidate = Path(override).expanduser()
        if not candidate.is_file():
            raise UnreadableInput(candidate, "no such recording")
        return candidate.resolve()
    study = summary.get("study", {})
    full = str(study.get("input_path", "") or "")
    if full and Path(full).is_file():
        return Path(full).resolve()
    named = Path(str(study.get("input_file", "") or "")).name
    if not named:
        raise UnreadableInput(folder / SUMMARY, "study.input_file is empty; pass the "
                              "recording with --recording")
    places = [folder, folder.parent, Path.cwd()]
    for level in (folder.parent, folder.parent.parent):  # e.g. out/inbox beside out/reports
        places += sorted(p for p in level.iterdir() if p.is_dir() and p != folder)
    for place in places:
        candidate = place / named
        if candidate.is_file():
            return candidate.resolve()
    raise UnreadableInput(named, "the study's recording was not found beside the study "
                          "folder; pass it with --recording")


def safe_study_file(folder: Path, name: str) -> Path:
    """A file inside the study folder the page may read, or ``None``-free refusal.

    Only a bare file name is accepted (no folders, no ``..``, no absolute path), its
    suffix must be in ``SERVABLE_SUFFIXES``, and the resolved path (after following any
    symbolic link) must still lie inside the folder.
    """
    if (not name or "/" in name or "\\" in name or name in (".", "..") or "\x00" in name
            or name.startswith(".")):
        raise PermissionError(f"refused file name {name!r}")
    if Path(name).suffix.lower() not in SERVABLE_SUFFIXES:
        raise PermissionError(f"refused file type {name!r}")
    target = (folder / name).resolve()
    if not target.is_relative_to(folder) or target.parent != folder:
        raise PermissionError(f"refused: {name!r} leads outside the study folder")
    if not target.is_file():
        raise FileNotFoundError(name)
    return target
