"""summary.json against its JSON Schema (hsat/schemas/summary.schema.json).

The schema is checked with the jsonschema reference implementation (a general-purpose
library): it must itself be a valid Draft 2020-12 schema, every summary hsat writes
must validate, and the contract names other tools read (DEVELOPERS.md, issue 3) must be
required by it.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import jsonschema
import numpy as np
import pandas as pd
import pytest

from _scoring_nights import make_night, normal, pause, spo2_trace
from hsat.events import score_events
from hsat.metrics import summarize, summarize_events
from hsat.outputs import summary_json
from hsat.rulesets import load_rule_sets

SCHEMA_PATH = Path(__file__).resolve().parents[1] / "hsat" / "schemas" / "summary.schema.json"
RULES = load_rule_sets(None)


@pytest.fixture(scope="module")
def schema() -> dict:
    return json.loads(SCHEMA_PATH.read_text())


@pytest.fixture(scope="module")
def summary() -> dict:
    flow = [normal(300), (12.0, 0.5, 3), normal(120), pause(20.0), normal(300)]
    dur = sum(s[0] for s in flow)
    cond, breaths = make_night(dur, {"flow": flow, "thermal": flow,
                                     "thorax": [normal(dur)], "abdomen": [normal(dur)]},
                               spo2_trace(dur, dips=[(332.0, 4.5), (472.0, 6.0)]))
    scoring = score_events(cond, breaths, RULES)
    # through JSON text, as written to disk
    return json.loads(summary_json(summarize(cond, breaths, scoring, RULES)))


def test_schema_is_valid_draft_2020_12(schema):
    jsonschema.Draft202012Validator.check_schema(schema)


def test_summary_validates(schema, summary):
    jsonschema.Draft202012Validator(schema).validate(summary)
    assert set(summary["indices"]) == {"aasm-3pct", "aasm-4pct"}
    assert summary["indices"]["aasm-3pct"]["counts"]["apnea"] == 1


def test_empty_night_summary_validates(schema):
    cond, breaths = make_night(1800.0, {"flow": [normal(1800.0)]})
    empty = pd.DataFrame({"onset_s": [], "duration_s": [], "event": [], "rule_sets": []})
    s = json.loads(summary_json(summarize_events(cond, breaths, empty, RULES)))
    jsonschema.Draft202012Validator(schema).validate(s)


def test_contract_keys_are_required(schema):
    # DEVELOPERS.md "Contracts other tools read" and issue 3
    assert {"schema_version", "software", "study", "patient", "recording_time_h",
            "monitoring_time_h", "channels", "exclusions", "wake", "adequacy", "rule_sets",
            "indices", "spo2", "pulse", "position", "hourly", "notes"} <= set(
                schema["required"])
    index = schema["properties"]["indices"]["additionalProperties"]
    assert {"rei", "oai", "cai", "mai", "uai", "hi", "odi", "severity"} <= set(
        index["required"])
    assert {"t90_pct", "t88_pct", "nadir_pct", "mean_pct", "baseline_pct",
            "hypoxic_burden"} <= set(schema["properties"]["spo2"]["required"])


@pytest.mark.parametrize("breakage", [
    lambda s: s.pop("indices"),
    lambda s: s["indices"]["aasm-3pct"].pop("rei"),
    lambda s: s["indices"]["aasm-3pct"].__setitem__("severity", "very severe"),
    lambda s: s["spo2"].__setitem__("t90_pct", -1.0),
    lambda s: s.__setitem__("unexpected_top_level_key", 1),
])
def test_schema_rejects_broken_summaries(schema, summary, breakage):
    broken = copy.deepcopy(summary)
    breakage(broken)
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.Draft202012Validator(schema).validate(broken)


def test_summary_has_no_nan(summary):
    text = json.dumps(summary)
    assert "NaN" not in text and "Infinity" not in text
    assert np.isfinite(summary["indices"]["aasm-3pct"]["rei"])


def test_night_with_flow_and_oximetry_only_validates(schema):
    # a minimal kit: nasal pressure and SpO2 only (no thermal, belts, pulse, position)
    import dataclasses

    flow = [normal(300), pause(20.0), normal(300)]
    dur = sum(s[0] for s in flow)
    cond, breaths = make_night(dur, {"flow": flow}, spo2_trace(dur, dips=[(340.0, 5.0)]))
    signals = {k: v for k, v in cond.signals.items() if k in ("flow", "spo2")}
    cond = dataclasses.replace(cond, signals=signals)
    scoring = score_events(cond, breaths, RULES)
    s = json.loads(summary_json(summarize(cond, breaths, scoring, RULES)))
    jsonschema.Draft202012Validator(schema).validate(s)
    assert s["indices"]["aasm-3pct"]["counts"]["unclassified_apnea"] == 1
    assert s["position"]["available"] is False
    assert s["pulse"]["mean_bpm"] is None
    assert any("No usable effort belts" in n for n in s["notes"])
    assert any("No oronasal thermal sensor" in n for n in s["notes"])
