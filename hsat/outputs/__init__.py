"""Outputs: summary.json and events.csv for a study folder, written atomically.

The study writers (``write_study``, ``read_events_csv``, ...) load pandas and the event
code, so they are imported on first use; the atomic-write helpers stay light.
"""

from __future__ import annotations

from typing import Any

from hsat.outputs._atomic import (
    DIR_MODE,
    FILE_MODE,
    append_line,
    atomic_write_bytes,
    atomic_write_text,
    ensure_dir,
)

_STUDY_NAMES = (
    "EVENTS_NAME", "SUMMARY_NAME", "events_csv", "read_events_csv", "summary_json",
    "write_study",
)

__all__ = [
    "DIR_MODE", "FILE_MODE", "append_line", "atomic_write_bytes", "atomic_write_text",
    "ensure_dir", *_STUDY_NAMES,
]


def __getattr__(name: str) -> Any:
    if name in _STUDY_NAMES:
        from hsat.outputs import _study

        return getattr(_study, name)
    raise AttributeError(f"module 'hsat.outputs' has no attribute {name!r}")
