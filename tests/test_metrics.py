"""Indices of a scored night, checked against values worked out by hand.

Published definitions used (../shared/reference/standards.md): REI = (apneas +
hypopneas) x 60 / monitoring time in minutes (§1.6, §9 row 5); severity none < 5,
mild 5-<15, moderate 15-<30, severe >= 30 with 30 = severe (§3.1, §9 row 6);
positional OSA after Cartwright, supine REI >= 2 x non-supine (§4, §9 row 10); T90 =
time with SpO2 < 90 % (§2, §9 row 12); hypoxic burden in %min/h with the baseline = max
SpO2 in the 100 s before event end (§5.1, §9 row 11; details from memory there).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from _scoring_nights import make_night, normal, spo2_trace
from hsat.events import Scoring
from hsat.metrics import severity, summarize, summarize_events
from hsat.recording import POSITION_CODES
from hsat.rulesets import load_rule_sets

RULES = load_rule_sets(None)
BOTH, ONLY3 = "aasm-3pct;aasm-4pct", "aasm-3pct"


# --- severity: half-open intervals, 30 = severe ------------------------------------------

@pytest.mark.parametrize(("rei", "category"), [
    (4.9, "none"), (5.0, "mild"), (14.9, "mild"), (15.0, "moderate"),
    (29.9, "moderate"), (30.0, "severe"),
])
def test_severity_boundaries(rei, category):
    # standards.md §3.1 (Nikkonen et al., Sci Rep 2019 convention): 30 is severe
    assert severity(rei) == category


@pytest.fixture(scope="module")
def ten_hour_night():
    """10 h of monitoring time and regular breathing (nothing else)."""
    return make_night(36000.0, {"flow": [normal(36000.0)]})


@pytest.mark.parametrize(("events", "rei", "category"), [
    (49, 4.9, "none"), (50, 5.0, "mild"), (149, 14.9, "mild"), (150, 15.0, "moderate"),
    (299, 29.9, "moderate"), (300, 30.0, "severe"),
])
def test_severity_from_event_counts(ten_hour_night, events, rei, category):
    # N events in 600 min of monitoring time: REI = N x 60 / 600 (AASM HSAT, §9 row 5)
    cond, breaths = ten_hour_night
    table = pd.DataFrame({
        "onset_s": 60.0 + np.arange(events) * 100.0, "duration_s": 15.0,
        "event": "obstructive_apnea", "rule_sets": BOTH,
    })
    summary = summarize_events(cond, breaths, table, RULES)
    for name in ("aasm-3pct", "aasm-4pct"):
        ix = summary["indices"][name]
        assert ix["rei"] == pytest.approx(rei)
        assert ix["severity"] == category
        assert ix["counts"]["obstructive_apnea"] == events


# --- a hand-worked night -----------------------------------------------------------------
#
# 3 h recorded, lights off at 0 and on at 10800 s. Judged awake [0, 1440); oximetry and
# flow invalid [9000, 9360). Monitoring time = 10800 - 1440 - 360 = 9000 s = 2.5 h.
# Supine [0, 5400): 66 min of monitoring; left [5400, 10800): 84 min.
# Supine events every 200 s from 1500 s: 6 obstructive (30 s), 1 central, 1 mixed,
# 4 hypopneas under both rule sets, 2 under aasm-3pct only (20 s each).
# Left events every 200 s from 5600 s: 2 obstructive (30 s), 2 hypopneas (both), 1
# hypopnea (3 % only). One more apnea at 600 s lies in wake and must not count.
# Each event has a SpO2 triangle dip of 4 points from end + 5 s to end + 35 s (area 60
# %s = 1 %min) and a pulse step of +10 bpm from end + 5 s to end + 10 s.
# 20 desaturation rows (15 under both rule sets, 5 under aasm-3pct) at 7000 + 60 k s.
# SpO2 88.5 % over [8300, 8390) and 85 % over [8390, 8408): 108 s below 90 %, 18 s below 88.

DUR = 10800.0
WAKE = (0.0, 1440.0)
INVALID = (9000, 9360)
SUPINE_TYPES = (["obstructive_apnea"] * 6 + ["central_apnea", "mixed_apnea"]
                + ["hypopnea"] * 6)
SUPINE_RULES = [BOTH] * 12 + [ONLY3] * 2
LEFT_TYPES = ["obstructive_apnea"] * 2 + ["hypopnea"] * 3
LEFT_RULES = [BOTH] * 4 + [ONLY3]


def _hand_events() -> pd.DataFrame:
    rows = []
    for k, (ev, rs) in enumerate(zip(SUPINE_TYPES, SUPINE_RULES, strict=True)):
        rows.append((1500.0 + 200 * k, ev, rs))
    for k, (ev, rs) in enumerate(zip(LEFT_TYPES, LEFT_RULES, strict=True)):
        rows.append((5600.0 + 200 * k, ev, rs))
    rows.append((600.0, "obstructive_apnea", BOTH))  # in wake: not counted
    table = pd.DataFrame(rows, columns=["onset_s", "event", "rule_sets"])
    table["duration_s"] = np.where(table["event"] == "obstructive_apnea", 30.0, 20.0)
    desats = pd.DataFrame({
        "onset_s": 7000.0 + 60.0 * np.arange(20), "duration_s": 30.0,
        "event": "desaturation", "rule_sets": [BOTH] * 15 + [ONLY3] * 5,
        "desat_pct": [5.0] * 15 + [3.5] * 5,
    })
    return pd.concat([table, desats], ignore_index=True)


@pytest.fixture(scope="module")
def hand_night():
    table = _hand_events()
    n = int(DUR)
    t = np.arange(n, dtype=float)
    spo2 = np.full(n, 96.0)
    pulse = np.full(n, 60.0)
    resp = table[table["event"] != "desaturation"]
    for end in (resp["onset_s"] + resp["duration_s"]).to_numpy():
        dip = 4.0 * np.clip(1.0 - np.abs(t - (end + 20.0)) / 15.0, 0.0, None)
        spo2 = np.minimum(spo2, 96.0 - dip)
        pulse[int(end) + 5:int(end) + 10] = 70.0
    spo2[8300:8390] = 88.5
    spo2[8390:8408] = 85.0
    analysed = np.ones(n, dtype=bool)
    analysed[: int(WAKE[1])] = False
    analysed[INVALID[0]:INVALID[1]] = False
    spo2_valid = np.ones(n, dtype=bool)
    spo2_valid[INVALID[0]:INVALID[1]] = False
    positions = np.where(t < 5400, POSITION_CODES["supine"], POSITION_CODES["left"])
    cond, breaths = make_night(DUR, {"flow": [normal(DUR)]}, spo2, positions=positions,
                               pulse=pulse, analysed=analysed, spo2_valid=spo2_valid,
                               wake=[WAKE])
    return cond, breaths, table, summarize_events(cond, breaths, table, RULES)


def test_hand_night_indices(hand_night):
    _, _, _, s = hand_night
    assert s["monitoring_time_h"] == 2.5
    assert s["recording_time_h"] == 3.0
    i3, i4 = s["indices"]["aasm-3pct"], s["indices"]["aasm-4pct"]
    # 19 events (3 %) and 16 (4 %) in 150 min
    assert (i3["rei"], i4["rei"]) == (7.6, 6.4)
    assert i3["severity"] == i4["severity"] == "mild"
    assert (i3["oai"], i3["cai"], i3["mai"], i3["uai"], i3["ai"]) == (3.2, 0.4, 0.4, 0.0, 4.0)
    assert (i3["hi"], i4["hi"]) == (3.6, 2.4)
    assert i3["counts"]["respiratory_events"] == 19 and i4["counts"]["hypopnea"] == 6
    # ODI: 20 and 15 desaturations per 2.5 h of valid oximetry
    assert (i3["odi"], i4["odi"]) == (8.0, 6.0)
    # durations: 8 apneas of 30 s and 11 events of 20 s
    assert i3["event_durations"]["mean_event_s"] == round((8 * 30 + 11 * 20) / 19, 1)
    assert i3["event_durations"]["longest_event_s"] == 30.0
    assert i3["event_durations"]["mean_hypopnea_s"] == 20.0
    assert any("outside monitoring time" in n for n in s["notes"])


def test_hand_night_positional_table(hand_night):
    _, _, _, s = hand_night
    assert s["position"]["minutes"]["supine"] == 66.0
    assert s["position"]["minutes"]["left"] == 84.0
    pos3 = s["indices"]["aasm-3pct"]["positional"]
    assert pos3["supine"] == {"monitoring_min": 66.0, "events": 14, "rei": 12.7}  # 14/1.1 h
    assert pos3["non_supine"] == {"monitoring_min": 84.0, "events": 5, "rei": 3.6}  # 5/1.4 h
    assert pos3["ratio_supine_to_non_supine"] == round(12.7 / 3.6, 2)
    assert pos3["positional_osa"] is True  # Cartwright: 12.7 >= 2 x 3.6
    assert "Cartwright" in pos3["definition"]
    pos4 = s["indices"]["aasm-4pct"]["positional"]
    assert (pos4["supine"]["rei"], pos4["non_supine"]["rei"]) == (10.9, 2.9)  # 12/1.1, 4/1.4


def test_hand_night_hourly_table(hand_night):
    _, _, _, s = hand_night
    hours = s["indices"]["aasm-3pct"]["hourly"]
    assert [h["monitoring_min"] for h in hours] == [36.0, 60.0, 54.0]
    assert [h["events"] for h in hours] == [11, 8, 0]
    assert [h["rei"] for h in hours] == [round(11 / 0.6, 1), 8.0, 0.0]
    assert [h["desaturations"] for h in hours] == [0, 4, 16]  # 7000-7180 s, 7240-8140 s


def test_hand_night_oximetry_and_pulse(hand_night):
    _, _, _, s = hand_night
    ox = s["spo2"]
    assert ox["valid_h"] == 2.5
    assert ox["t90_pct"] == round(100 * 108 / 9000, 2)   # 1.2 %
    assert ox["t88_pct"] == round(100 * 18 / 9000, 2)    # 0.2 %, strict "< 88"
    assert ox["t90_min"] == 1.8 and ox["t88_min"] == 0.3
    assert ox["nadir_pct"] == 85.0
    assert ox["baseline_pct"] == 96.0
    # hypoxic burden: 19 events x 1 %min over 2.5 h of monitoring time
    assert ox["hypoxic_burden"] == pytest.approx(19 / 2.5, abs=0.05)
    assert ox["hypoxic_burden_rule_set"] == "aasm-3pct"
    start, end = ox["hypoxic_burden_window_s"]
    assert start <= 5.0 and end >= 35.0
    assert s["indices"]["aasm-4pct"]["hypoxic_burden"] == pytest.approx(16 / 2.5, abs=0.05)
    bins = {b["label"]: b["count"] for b in ox["desaturation_depth"]["bins"]}
    assert bins["3-<4"] == 5 and bins["4-<6"] == 15
    pulse = s["pulse"]
    assert (pulse["min_bpm"], pulse["max_bpm"]) == (60.0, 70.0)
    assert pulse["event_rise_bpm"] == 10.0


def test_scoring_round_trip_through_table(hand_night):
    # the review developer edits events.csv and recomputes: same table -> same indices,
    # one deleted hypopnea -> one event fewer (REI 18 x 60 / 150 min = 7.2)
    cond, breaths, table, s = hand_night
    again = summarize(cond, breaths, Scoring.from_table(table), RULES)
    assert again["indices"] == s["indices"]
    edited = table.drop(index=table.index[table["event"] == "hypopnea"][0])
    fewer = summarize_events(cond, breaths, edited, RULES)
    assert fewer["indices"]["aasm-3pct"]["rei"] == 7.2
    assert fewer["indices"]["aasm-3pct"]["hi"] == 3.2


def test_summary_without_spo2_events_or_position():
    # a short night with no events: indices are zero, nothing is NaN
    cond, breaths = make_night(3600.0, {"flow": [normal(3600.0)]}, spo2_trace(3600.0))
    s = summarize_events(cond, breaths, pd.DataFrame(
        {"onset_s": [], "duration_s": [], "event": [], "rule_sets": []}), RULES)
    ix = s["indices"]["aasm-3pct"]
    assert (ix["rei"], ix["odi"], ix["severity"]) == (0.0, 0.0, "none")
    assert ix["event_durations"]["mean_event_s"] is None
    assert ix["cheyne_stokes"]["present"] is False
    assert s["spo2"]["hypoxic_burden"] == 0.0


@pytest.mark.parametrize(("change", "message"), [
    (lambda t: t.drop(columns=["rule_sets"]), "lacks column(s): rule_sets"),
    (lambda t: t.assign(event=t["event"].where(t.index != 2, "snore_event")),
     "unknown event name(s) 'snore_event'"),
    (lambda t: t.assign(duration_s=t["duration_s"].where(t.index != 4, -3.0)),
     "row 5: duration_s must not be negative"),
    (lambda t: t.assign(onset_s=t["onset_s"].astype(object).where(t.index != 1, "late")),
     "row 2: onset_s and duration_s must be numbers"),
])
def test_bad_edited_events_csv_names_file_and_problem(tmp_path, hand_night, change, message):
    # the review developer's edited events.csv is user input: clear error, no traceback
    from hsat.errors import UnreadableInput
    from hsat.outputs import read_events_csv

    _, _, table, _ = hand_night
    path = tmp_path / "events.csv"
    change(table.copy()).to_csv(path, index=False)
    with pytest.raises(UnreadableInput) as err:
        read_events_csv(path)
    assert str(path) in str(err.value) and message in str(err.value)


def test_patient_fields_from_intake_mapping_model_or_header(hand_night, tmp_path):
    # intake (hsat.intake) first, EDF+ header otherwise; a mapping, a dataclass or the
    # intake model are all accepted
    from hsat.intake import load_intake

    cond, breaths, table, s = hand_night
    assert s["patient"] == {"code": "", "name": "", "sex": "", "birthdate": None,
                            "age_years": None}
    mapping = {"patient": {"name": "Test, Invented", "id": "INV-1", "sex": "female",
                           "birthdate": "1960-03-01"}, "study": {"kit": "birch"}}
    a = summarize_events(cond, breaths, table, RULES, intake=mapping)
    assert a["patient"] == {"code": "INV-1", "name": "Test, Invented", "sex": "female",
                            "birthdate": "1960-03-01", "age_years": 66.0}
    assert a["kit"] == {"kit": "birch"}
    path = tmp_path / "night.intake.toml"
    path.write_text('[patient]\nname = "Test, Invented"\nid = "INV-1"\n'
                    'birthdate = 1960-03-01\nsex = "F"\n[study]\nkit = "birch"\n')
    b = summarize_events(cond, breaths, table, RULES, intake=load_intake(path))
    assert b["patient"] == a["patient"] and b["kit"]["kit"] == "birch"
