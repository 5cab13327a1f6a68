"""The scored events of one night (``Scoring``) and their table form (events.csv).

One row per scored event. A respiratory event found identically under several rule sets
is one row whose ``rule_sets`` lists them all (``;``-joined); a hypopnea whose linked
desaturation meets 3 % but not 4 % is scored under ``aasm-3pct`` only. Desaturations are
rows too (``event == 'desaturation'``), under the rule sets whose drop they meet.

A ``Scoring`` can be rebuilt from an edited table (``Scoring.from_table``), so the
indices can be recomputed after a physician's review (``hsat.metrics.summarize``).

Columns of events.csv (``EVENT_COLUMNS``; blank where not applicable):

==========================  =============================================================
onset_s, duration_s         event start and length (s from the recording start)
event                       obstructive_apnea | central_apnea | mixed_apnea |
                            unclassified_apnea | hypopnea | desaturation
rule_sets                   ';'-joined rule-set names the row is scored under
event_id                    1, 2, ... in onset order
end_s                       onset_s + duration_s
position                    body position at onset (supine, left, right, prone, upright,
                            unknown)
sensor                      channel the event was measured on (thermal / flow)
baseline_amplitude          the fixed pre-event baseline (channel units; inspiratory
                            excursion for airflow)
min_amplitude_ratio,        lowest and mean breath amplitude / baseline over the event
mean_amplitude_ratio
effort_absent_fraction      apneas: part of the event before the first effort breath
hypopnea_type               obstructive | central | '' (optional AASM rule)
desat_pct, nadir_pct,       respiratory events: the event's desaturation (pre-event
spo2_baseline_pct           baseline - nadir, SpO2 points); desaturation rows: their own
linked_desat_onset_s        respiratory events: onset of the linked desaturation row
linked_event_id             desaturation rows: event_id of the event they are linked to
==========================  =============================================================
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from hsat.errors import UnreadableInput

#: Event names in events.csv (the contract in DEVELOPERS.md).
APNEA_TYPES: tuple[str, ...] = (
    "obstructive_apnea", "central_apnea", "mixed_apnea", "unclassified_apnea",
)
RESPIRATORY_TYPES: tuple[str, ...] = (*APNEA_TYPES, "hypopnea")
EVENT_TYPES: tuple[str, ...] = (*RESPIRATORY_TYPES, "desaturation")

#: Column order of events.csv; the first four are the contract other tools read.
EVENT_COLUMNS: tuple[str, ...] = (
    "onset_s", "duration_s", "event", "rule_sets",
    "event_id", "end_s", "position", "sensor", "baseline_amplitude",
    "min_amplitude_ratio", "mean_amplitude_ratio", "effort_absent_fraction",
    "hypopnea_type", "desat_pct", "nadir_pct", "spo2_baseline_pct",
    "linked_desat_onset_s", "linked_event_id",
)
_FLOAT_COLUMNS = (
    "onset_s", "duration_s", "end_s", "baseline_amplitude", "min_amplitude_ratio",
    "mean_amplitude_ratio", "effort_absent_fraction", "desat_pct", "nadir_pct", "spo2_baseline_pct",
    "linked_desat_onset_s",
)
_TEXT_COLUMNS = ("event", "rule_sets", "position", "sensor", "hypopnea_type")
_INT_COLUMNS = ("event_id", "linked_event_id")


class EventTableError(UnreadableInput):
    """An events table (e.g. an edited events.csv) is malformed (exit code 4)."""


def split_rule_sets(value: object) -> tuple[str, ...]:
    """``'aasm-3pct;aasm-4pct'`` -> ``('aasm-3pct', 'aasm-4pct')``; blanks are dropped."""
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ()
    return tuple(p.strip() for p in str(value).split(";") if p.strip())


def empty_table() -> pd.DataFrame:
    """An events table with every column and no rows."""
    return normalise_table(pd.DataFrame({c: [] for c in EVENT_COLUMNS}))


def normalise_table(table: pd.DataFrame, *, source: str = "") -> pd.DataFrame:
    """Check an events table and give it the standard columns, types and order.

    Parameters
    ----------
    table : at least ``onset_s, duration_s, event, rule_sets``; other known columns are
        optional (filled with blanks); unknown columns are kept after the known ones.
    source : file name used in error messages.

    Raises
    ------
    EventTableError
        A required column is missing, an event name is unknown, or a time is not a
        finite number / a duration is negative.
    """
    missing = [c for c in EVENT_COLUMNS[:4] if c not in table.columns]
    if missing:
        raise EventTableError(source, f"events table lacks column(s): {', '.join(missing)}")
    df = table.copy()
    for col in EVENT_COLUMNS:
        if col not in df.columns:
            df[col] = np.nan if col in _FLOAT_COLUMNS or col in _INT_COLUMNS else ""
    for col in _FLOAT_COLUMNS:
        df[col] = pd.to_numeric(df[col], errors="coerce").astype(float)
    for col in _TEXT_COLUMNS:
        df[col] = df[col].astype(object).where(df[col].notna(), "").astype(str)
    for col in _INT_COLUMNS:
        df[col] = pd.to_numeric(df[col], errors="coerce").astype("Int64")
    bad_time = ~np.isfinite(df["onset_s"].to_numpy()) | ~np.isfinite(df["duration_s"].to_numpy())
    if bad_time.any():
        row = int(np.flatnonzero(bad_time)[0])
        raise EventTableError(source, f"row {row + 1}: onset_s and duration_s must be numbers")
    if (df["duration_s"] < 0).any():
        row = int(np.flatnonzero(df["duration_s"].to_numpy() < 0)[0])
        raise EventTableError(source, f"row {row + 1}: duration_s must not be negative")
    unknown = sorted(set(df["event"]) - set(EVENT_TYPES))
    if unknown:
        raise EventTableError(
            source, f"unknown event name(s) {', '.join(map(repr, unknown))}; "
            f"known: {', '.join(EVENT_TYPES)}",
        )
    df["end_s"] = df["onset_s"] + df["duration_s"]
    df["rule_sets"] = df["rule_sets"].map(lambda v: ";".join(split_rule_sets(v)))
    if df["event_id"].isna().any():
        # edited tables may add rows without ids: number them after the largest id
        start = int(df["event_id"].max()) + 1 if df["event_id"].notna().any() else 1
        fill = df["event_id"].isna().to_numpy()
        ids = df["event_id"].to_numpy(dtype=object)
        ids[fill] = np.arange(start, start + int(fill.sum()))
        df["event_id"] = pd.array(ids.astype(np.int64), dtype="Int64")
    extra = [c for c in df.columns if c not in EVENT_COLUMNS]
    df = df[list(EVENT_COLUMNS) + extra]
    return df.sort_values(["onset_s", "event_id"], kind="stable").reset_index(drop=True)


@dataclass(frozen=True)
class Scoring:
    """The scored events of one night under one or more rule sets.

    Attributes
    ----------
    events : the events table (columns ``EVENT_COLUMNS``), sorted by onset.
    rule_set_names : names of the rule sets the night was scored with, in order.
    sensors : which channel role each detector used ('apnea', 'hypopnea', 'effort').
    notes : remarks for the report (e.g. "no thermal sensor: apneas scored on nasal
        pressure").
    """

    events: pd.DataFrame
    rule_set_names: tuple[str, ...]
    sensors: dict[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    def for_rule_set(self, name: str, kinds: Iterable[str] | None = None) -> pd.DataFrame:
        """The rows scored under rule set ``name`` (optionally only the given event kinds)."""
        df = self.events
        mask = df["rule_sets"].map(lambda v: name in split_rule_sets(v)).astype(bool)
        if kinds is not None:
            mask &= df["event"].isin(tuple(kinds))
        return df[mask.to_numpy()]

    def respiratory(self, name: str) -> pd.DataFrame:
        """Apneas and hypopneas scored under rule set ``name``."""
        return self.for_rule_set(name, RESPIRATORY_TYPES)

    def desaturations(self, name: str) -> pd.DataFrame:
        """Desaturation rows scored under rule set ``name``."""
        return self.for_rule_set(name, ("desaturation",))

    def to_table(self) -> pd.DataFrame:
        """The events table as written to events.csv."""
        return self.events.copy()

    @classmethod
    def from_table(
        cls,
        table: pd.DataFrame,
        rule_set_names: Sequence[str] | None = None,
        *,
        source: str = "",
        sensors: dict[str, str] | None = None,
        notes: Sequence[str] = (),
    ) -> Scoring:
        """A Scoring from an events table, e.g. an events.csv edited in review.

        Parameters
        ----------
        table : the events (see ``normalise_table`` for what is checked).
        rule_set_names : the rule sets to report; by default every name found in the
            ``rule_sets`` column, in order of first appearance.
        source : file name for error messages.
        """
        df = normalise_table(table, source=source)
        if rule_set_names is None:
            seen: dict[str, None] = {}
            for value in df["rule_sets"]:
                for name in split_rule_sets(value):
                    seen.setdefault(name, None)
            rule_set_names = tuple(seen)
        return cls(df, tuple(rule_set_names), dict(sensors or {}), tuple(notes))


def merge_rule_set_rows(per_rule_set: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """Join the per-rule-set event tables into one table with ``rule_sets`` lists.

    Rows are the same event when kind, onset and duration agree to 0.01 s; the first
    rule set's row supplies the other columns.
    """
    frames = []
    for name, df in per_rule_set.items():
        if len(df):
            frames.append(df.assign(rule_sets=name))
    if not frames:
        return empty_table()
    allrows = pd.concat(frames, ignore_index=True)
    key = (
        allrows["event"].astype(str) + "|"
        + allrows["onset_s"].round(2).map("{:.2f}".format) + "|"
        + allrows["duration_s"].round(2).map("{:.2f}".format)
    )
    allrows["_key"] = key
    order = list(per_rule_set)
    names = allrows.groupby("_key", sort=False)["rule_sets"].agg(
        lambda s: ";".join(sorted(set(s), key=order.index))
    )
    first = allrows.drop_duplicates("_key", keep="first").set_index("_key")
    first["rule_sets"] = names
    merged = first.reset_index(drop=True).sort_values(["onset_s", "event"], kind="stable")
    merged = merged.reset_index(drop=True)
    merged["event_id"] = np.arange(1, len(merged) + 1)
    return merged
