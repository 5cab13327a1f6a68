"""Outputs: summary.json and events.csv for a study folder, written atomically."""

from hsat.outputs._atomic import (
    DIR_MODE,
    FILE_MODE,
    append_line,
    atomic_write_bytes,
    atomic_write_text,
    ensure_dir,
)

__all__ = [
    "DIR_MODE", "FILE_MODE", "append_line", "atomic_write_bytes", "atomic_write_text",
    "ensure_dir",
]
