"""Indices of a scored night (pipeline stage 5): the content of summary.json.

``summarize(cond, breaths, scoring, rule_sets, intake=None) -> dict`` computes, per rule
set, REI, apnea indices by type, HI, ODI and severity (``_indices``), positional and
hourly tables (``_tables``), Cheyne-Stokes breathing, hypoxic burden and pulse-rate rise;
and for the night SpO2, pulse and position summaries (``_oximetry``). The dict follows
``hsat/schemas/summary.schema.json``.

Recomputing after review edits
------------------------------
The indices depend only on the events table and the conditioned night, so edited events
give new indices without re-running detection::

    from hsat.outputs import read_events_csv
    from hsat.metrics import summarize
    scoring = read_events_csv("STUDY/events.csv")          # a Scoring
    summary = summarize(cond, breaths, scoring, rule_sets)

or, from a pandas table, ``summarize_events(cond, breaths, table, rule_sets)``. Events
whose onset lies outside monitoring time are not counted (a note says how many);
Cheyne-Stokes breathing is re-assessed from the edited central events.
"""

from hsat.metrics._indices import SEVERITY_NAMES, basic_indices, per_hour, severity
from hsat.metrics._oximetry import hypoxic_burden, spo2_summary
from hsat.metrics._summary import CAUTIONS, SCHEMA_VERSION, summarize, summarize_events
from hsat.metrics._tables import MIN_POSITION_MIN, POSITIONAL_DEFINITION, positional_table

__all__ = [
    "CAUTIONS", "MIN_POSITION_MIN", "POSITIONAL_DEFINITION", "SCHEMA_VERSION",
    "SEVERITY_NAMES", "basic_indices", "hypoxic_burden", "per_hour", "positional_table",
    "severity", "spo2_summary", "summarize", "summarize_events",
]
