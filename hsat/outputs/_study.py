"""The study folder's scoring files: summary.json and events.csv.

Both are written atomically (temporary name, then rename) and readable by the owner only
(they hold patient data). ``read_events_csv`` reads an events.csv back, e.g. after review
edits, as a ``Scoring`` that ``hsat.metrics.summarize`` accepts.
"""

from __future__ import annotations

import io
import json
import math
from pathlib import Path
from typing import Any

import pandas as pd

from hsat.errors import OutputError, UnreadableInput
from hsat.events import Scoring
from hsat.outputs._atomic import atomic_write_text, ensure_dir

SUMMARY_NAME = "summary.json"
EVENTS_NAME = "events.csv"
#: Decimals kept in events.csv (0.1 s grid, SpO2 in 0.1 points).
CSV_DECIMALS = 3


def _finite(value: Any) -> Any:
    """JSON has no NaN: replace non-finite floats by null, recursively."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def summary_json(summary: dict[str, Any]) -> str:
    """The summary as JSON text (2-space indent, UTF-8, no NaN)."""
    try:
        return json.dumps(_finite(summary), indent=2, ensure_ascii=False, allow_nan=False) + "\n"
    except (TypeError, ValueError) as exc:
        raise OutputError(SUMMARY_NAME, f"summary cannot be written as JSON ({exc})") from None


def events_csv(scoring: Scoring) -> str:
    """The events table as CSV text (``EVENT_COLUMNS`` first; blanks for missing)."""
    df = scoring.to_table()
    buf = io.StringIO()
    df.round(CSV_DECIMALS).to_csv(buf, index=False, na_rep="", lineterminator="\n")
    return buf.getvalue()


def write_study(
    out_dir: str | Path, summary: dict[str, Any], scoring: Scoring
) -> tuple[Path, Path]:
    """Write events.csv, then summary.json, into ``out_dir`` (created owner-only).

    Returns
    -------
    (summary_path, events_path)

    Raises
    ------
    OutputError
        The folder cannot be created or written.
    """
    folder = ensure_dir(out_dir)
    events_text = events_csv(scoring)
    summary_text = summary_json(summary)
    events_path = atomic_write_text(folder / EVENTS_NAME, events_text)
    summary_path = atomic_write_text(folder / SUMMARY_NAME, summary_text)
    return summary_path, events_path


def read_events_csv(path: str | Path, rule_set_names: list[str] | None = None) -> Scoring:
    """Read an events.csv (as written by ``write_study``, possibly edited) as a Scoring.

    Raises
    ------
    UnreadableInput
        The file is missing or not CSV.
    hsat.events.EventTableError
        A column is missing or a value is wrong (the message names the file and row).
    """
    p = Path(path)
    try:
        table = pd.read_csv(p, dtype={"rule_sets": str, "event": str}, keep_default_na=True)
    except FileNotFoundError:
        raise UnreadableInput(p, "no such events file") from None
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise UnreadableInput(p, f"not a readable events CSV ({exc})") from None
    return Scoring.from_table(table, rule_set_names, source=str(p))
