"""Respiratory and oximetry events (pipeline stage 4), driven by rule sets.

``score_events(cond, breaths, rule_sets) -> Scoring`` runs, for each rule set:

* apneas and hypopnea candidates: amplitude drops against the AASM pre-event baseline
  (``_respiratory``), apnea precedence over hypopnea;
* apnea typing from the effort belts (``_typing``), optional hypopnea typing;
* desaturations and their link to events (``_desaturation``); a hypopnea is scored
  only with a linked desaturation of the rule's depth (AASM rule 1A 3 %, 1B 4 %);

and ``find_cheyne_stokes`` (``_cheyne_stokes``) finds Cheyne-Stokes breathing among
scored central events (called by ``hsat.metrics.summarize`` so that edited events are
re-assessed). Each module's docstring names the rules and sources it implements.

``Scoring.from_table(df)`` rebuilds a scoring from an (edited) events table.
"""

from hsat.events._cheyne_stokes import CheyneStokes, find_cheyne_stokes
from hsat.events._desaturation import (
    Oximetry,
    detect_desaturations,
    link_desaturations,
    oximetry_of,
)
from hsat.events._score import position_at, score_events
from hsat.events._scoring import (
    APNEA_TYPES,
    EVENT_COLUMNS,
    EVENT_TYPES,
    RESPIRATORY_TYPES,
    EventTableError,
    Scoring,
    empty_table,
    normalise_table,
    split_rule_sets,
)

__all__ = [
    "APNEA_TYPES", "EVENT_COLUMNS", "EVENT_TYPES", "RESPIRATORY_TYPES", "CheyneStokes",
    "EventTableError", "Oximetry", "Scoring", "detect_desaturations", "empty_table",
    "find_cheyne_stokes", "link_desaturations", "normalise_table", "oximetry_of",
    "position_at", "score_events", "split_rule_sets",
]
