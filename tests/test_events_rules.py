"""Rule boundaries of the event detectors, each side of each line, on hand-made breaths.

Published rules checked (AASM Scoring Manual v2.6/v3 adult respiratory and HSAT rules,
paraphrased in ../shared/reference/standards.md §1.2 and the check values of §9):
apnea = drop >= 90 % of the pre-event baseline for >= 10 s (§9 rows 1 and 4); hypopnea
= drop >= 30 % for >= 10 s with a >= 3 % (rule 1A, aasm-3pct) or >= 4 % (rule 1B,
aasm-4pct) desaturation (§9 rows 2-3); "percent" of a desaturation means SpO2 points
(§1.2). Apnea type from effort (§1.2, from memory there). Rule files are validated.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from _scoring_nights import make_night, normal, pause, spo2_trace
from hsat.errors import ConfigError
from hsat.events import score_events
from hsat.rulesets import load_rule_set, load_rule_sets

RULES = load_rule_sets(None)  # aasm-3pct, aasm-4pct
LEAD = 300.0  # seconds of normal breathing before the event
DELAY = 20.0  # event end to SpO2 nadir (s): inside the 30 s link window of both rule sets


def _night(event_flow, event_belts=None, desat=0.0, *, thermal=True, belts=True,
           event_thermal=None, lead_amplitude=1.0, extra_dips=(), **kw):
    """Normal breathing, the event, normal breathing; a dip ``DELAY`` s after the event."""
    dur_event = sum(s[0] for s in event_flow)
    flow = [normal(LEAD, lead_amplitude), *event_flow, normal(LEAD, lead_amplitude)]
    total = sum(s[0] for s in flow)
    parts = {"flow": flow}
    if thermal:
        parts["thermal"] = ([normal(LEAD), *event_thermal, normal(LEAD)]
                            if event_thermal is not None else flow)
    if belts:
        effort = event_belts if event_belts is not None else [normal(dur_event)]
        parts["thorax"] = parts["abdomen"] = [normal(LEAD), *effort, normal(LEAD)]
    dips = [(LEAD + dur_event + DELAY, desat)] if desat else []
    dips += [(LEAD + t, depth) for t, depth in extra_dips]
    return make_night(total, parts, spo2_trace(total, dips=dips), **kw)


def _respiratory(cond, breaths, rules=RULES) -> pd.DataFrame:
    ev = score_events(cond, breaths, rules).events
    return ev[ev["event"] != "desaturation"].reset_index(drop=True)


# --- apnea: >= 90 % for >= 10 s --------------------------------------------------------

@pytest.mark.parametrize(("seconds", "scored"), [(9.5, False), (10.5, True)])
def test_apnea_minimum_duration(seconds, scored):
    # AASM: the >= 90 % drop lasts >= 10 s (standards.md §9 rows 1 and 4)
    ev = _respiratory(*_night([pause(seconds)], desat=4.5))
    apneas = ev[ev["event"].str.endswith("apnea")]
    assert (len(apneas) == 1) is scored
    if scored:
        assert apneas["duration_s"].iat[0] == pytest.approx(seconds, abs=0.11)
        assert apneas["onset_s"].iat[0] == pytest.approx(LEAD, abs=0.11)
        assert apneas["rule_sets"].iat[0] == "aasm-3pct;aasm-4pct"
    assert not (ev["event"] == "hypopnea").any()  # 9.5 s is too short for a hypopnea too


@pytest.mark.parametrize(("amplitude", "expected"), [(0.09, "obstructive_apnea"),
                                                      (0.11, "hypopnea")])
def test_apnea_drop_boundary(amplitude, expected):
    # 91 % drop -> apnea; 89 % drop is not an apnea but, with a 4.5 % desaturation, a
    # hypopnea (standards.md §9 row 4: "89 % drop -> not an apnea (it may be a hypopnea)")
    ev = _respiratory(*_night([(12.0, amplitude, 3)], desat=4.5))
    assert list(ev["event"]) == [expected]
    assert ev["min_amplitude_ratio"].iat[0] == pytest.approx(amplitude)
    assert ev["rule_sets"].iat[0] == "aasm-3pct;aasm-4pct"


# --- hypopnea: >= 30 % for >= 10 s with the rule's desaturation --------------------------

@pytest.mark.parametrize(("amplitude", "scored"), [(0.71, False), (0.69, True)])
def test_hypopnea_drop_boundary(amplitude, scored):
    # 29 % drop is no event; 31 % drop with a 4.5 % desaturation is a hypopnea (rule 1A/1B)
    ev = _respiratory(*_night([(12.0, amplitude, 3)], desat=4.5))
    assert (list(ev["event"]) == ["hypopnea"]) is scored
    assert len(ev) == int(scored)


@pytest.mark.parametrize(("seconds", "scored"), [(9.5, False), (10.5, True)])
def test_hypopnea_minimum_duration(seconds, scored):
    # three breaths at half amplitude lasting 9.5 s vs 10.5 s (AASM >= 10 s)
    ev = _respiratory(*_night([(seconds, 0.5, 3)], desat=4.5))
    assert (len(ev) == 1) is scored
    if scored:
        assert ev["event"].iat[0] == "hypopnea"
        assert ev["duration_s"].iat[0] == pytest.approx(seconds, abs=0.11)


@pytest.mark.parametrize(("desat", "under"), [
    (2.9, ""), (3.1, "aasm-3pct"), (3.9, "aasm-3pct"), (4.1, "aasm-3pct;aasm-4pct"),
])
def test_hypopnea_desaturation_boundaries(desat, under):
    # rule 1A needs >= 3 points, rule 1B >= 4 points (standards.md §1.2, §9 rows 2-3)
    cond, breaths = _night([(12.0, 0.5, 3)], desat=desat)
    ev = score_events(cond, breaths, RULES).events
    hyp = ev[ev["event"] == "hypopnea"]
    if not under:
        assert hyp.empty
    else:
        assert list(hyp["rule_sets"]) == [under]
        assert hyp["desat_pct"].iat[0] == pytest.approx(desat, abs=1e-6)
    # the desaturation itself is a row under the rule sets whose drop it meets (ODI)
    des = ev[ev["event"] == "desaturation"]
    assert list(des["rule_sets"]) == ([under] if under else [])
    if under:
        assert des["linked_event_id"].iat[0] == hyp["event_id"].iat[0]


def test_each_rule_set_alone_gives_its_own_hypopneas():
    cond, breaths = _night([(12.0, 0.5, 3)], desat=3.5)
    only4 = _respiratory(cond, breaths, [load_rule_set("aasm-4pct")])
    only3 = _respiratory(cond, breaths, [load_rule_set("aasm-3pct")])
    assert only4.empty
    assert list(only3["rule_sets"]) == ["aasm-3pct"]


# --- precedence, typing, invalid data ---------------------------------------------------

def test_apnea_takes_precedence_over_hypopnea():
    # 12 s at 50 % then 12 s of apnea with no breath between: one event, an apnea
    # (AASM, standards.md §1.2 "Apnea vs hypopnea precedence"), its duration measured on
    # the apnea sensor's >= 90 % drop (standards.md §1.3: thermal signal for apneas)
    ev = _respiratory(*_night([(12.0, 0.5, 3), pause(12.0)], desat=6.0))
    assert list(ev["event"]) == ["obstructive_apnea"]
    assert ev["onset_s"].iat[0] == pytest.approx(LEAD + 12.0, abs=0.11)
    assert ev["duration_s"].iat[0] == pytest.approx(12.0, abs=0.11)


@pytest.mark.parametrize(("belts", "expected"), [
    ([normal(20.0)], "obstructive_apnea"),           # effort continues throughout
    ([pause(20.0)], "central_apnea"),                # effort absent throughout
    ([pause(10.0), normal(10.0, 1.2)], "mixed_apnea"),  # absent first, then resumes
])
def test_apnea_type_from_effort(belts, expected):
    ev = _respiratory(*_night([pause(20.0)], belts, desat=4.0))
    assert list(ev["event"]) == [expected]


def test_apnea_without_belts_is_unclassified():
    ev = _respiratory(*_night([pause(20.0)], desat=4.0, belts=False))
    assert list(ev["event"]) == ["unclassified_apnea"]


def test_apnea_scored_on_thermal_sensor_when_nasal_pressure_is_flat():
    # mouth breathing: nasal pressure nearly flat, the oronasal thermal sensor breathes;
    # the AASM apnea sensor is the thermal one, so no apnea (standards.md §1.2)
    ev = _respiratory(*_night([(20.0, 0.05, 5)], event_thermal=[normal(20.0)], desat=0.0))
    assert not ev["event"].str.endswith("apnea").any()
    # and a true apnea on the thermal sensor is scored even if nasal pressure shows some
    # residual signal (hypopnea-level on the flow channel)
    ev = _respiratory(*_night([(20.0, 0.5, 5)], event_thermal=[pause(20.0)], desat=4.0))
    assert list(ev["event"]) == ["obstructive_apnea"]


def test_events_straddling_invalid_data_are_not_scored():
    # stated rule (rules/aasm-*.toml, invalid_data.max_invalid_fraction = 0): an event
    # touching time outside monitoring time is not scored
    n = int(2 * LEAD + 20)
    analysed = np.ones(n, dtype=bool)
    analysed[int(LEAD) + 10 : int(LEAD) + 40] = False  # the apnea's second half is invalid
    ev = _respiratory(*_night([pause(20.0)], desat=4.0, analysed=analysed))
    assert ev.empty
    analysed = np.ones(n, dtype=bool)
    analysed[int(LEAD) + 60 : int(LEAD) + 120] = False  # invalid after the event only
    ev = _respiratory(*_night([pause(20.0)], desat=4.0, analysed=analysed))
    assert list(ev["event"]) == ["obstructive_apnea"]


def test_back_to_back_events_keep_their_baseline():
    # a severe cluster: apnea, 3 large recovery breaths, hypopnea, 3 recovery breaths,
    # repeated; recovery breaths (hyperpnoea) must not become the baseline that makes
    # the next normal breathing look reduced, and the reduced breaths of earlier events
    # must not lower it (standards.md §1.3, AASM: baseline = stable breathing)
    cycle = [pause(20.0), (12.0, 1.8, 3), (12.0, 0.5, 3), (12.0, 1.8, 3)]
    flow = [normal(LEAD)] + cycle * 6 + [normal(LEAD)]
    total = sum(s[0] for s in flow)
    t_cycle = 56.0
    dips = []
    for k in range(6):
        start = LEAD + k * t_cycle
        dips += [(start + 20 + DELAY, 5.0), (start + 44 + DELAY, 5.0)]
    effort = [normal(total)]  # effort continues: obstructive apneas
    cond, breaths = make_night(total, {"flow": flow, "thermal": flow, "thorax": effort,
                                       "abdomen": effort}, spo2_trace(total, dips=dips))
    ev = _respiratory(cond, breaths)
    assert list(ev["event"]) == ["obstructive_apnea", "hypopnea"] * 6
    # and the normal breathing after the cluster is not an event
    assert ev["onset_s"].max() < LEAD + 6 * t_cycle


def test_gain_does_not_change_events():
    # nothing may assume a kit's gain (issue 3): every amplitude x 1000 (signals and
    # breaths) gives the same events
    event = [(12.0, 0.5, 3), normal(40.0), pause(14.0)]
    big = [(d, a * 1000.0, n) for d, a, n in event]
    a = _respiratory(*_night(event, desat=5.0, extra_dips=[(12.0 + DELAY, 5.0)]))
    b = _respiratory(*_night(big, desat=5.0, lead_amplitude=1000.0,
                             extra_dips=[(12.0 + DELAY, 5.0)]))
    assert list(a["event"]) == ["hypopnea", "obstructive_apnea"]
    pd.testing.assert_frame_equal(a[["onset_s", "duration_s", "event"]],
                                  b[["onset_s", "duration_s", "event"]])


# --- rule files --------------------------------------------------------------------------

def test_builtin_rule_sets_load_and_differ_in_the_desaturation_only():
    r3, r4 = RULES
    assert (r3.name, r4.name) == ("aasm-3pct", "aasm-4pct")
    assert (r3.hypopnea.desaturation_pct, r4.hypopnea.desaturation_pct) == (3.0, 4.0)
    assert (r3.apnea.drop_pct, r3.hypopnea.drop_pct) == (90.0, 30.0)  # AASM §9 rows 1-2
    assert r3.apnea.min_duration_s == r3.hypopnea.min_duration_s == 10.0
    assert r3.severity_thresholds == (5.0, 15.0, 30.0)  # standards.md §3.1
    assert len(r3.content_sha256) == 64 and r3.content_sha256 != r4.content_sha256


def _write_variant(tmp_path, old: str, new: str):
    text = (load_rule_set.__globals__["_rules_dir"]() / "aasm-4pct.toml").read_text()
    assert old in text
    path = tmp_path / "my-rules.toml"
    path.write_text(text.replace(old, new, 1))
    return path


@pytest.mark.parametrize(("old", "new", "key"), [
    ("drop_pct = 30", "drop_pct = 30\nthreshold = 3", "hypopnea.threshold"),      # unknown
    ("min_duration_s = 10\nmax_duration_s = 180\nsensor",
     "min_duration_s = 'ten'\nmax_duration_s = 180\nsensor", "apnea.min_duration_s"),  # type
    ("drop_pct = 90", "drop_pct = 130", "apnea.drop_pct"),                        # 130 %
    ("link_window_s = 30", "link_window_s = -5", "desaturation.link_window_s"),   # negative
    ("min_duration_s = 10\nmax_duration_s = 180\ndesaturation_pct",
     "min_duration_s = -10\nmax_duration_s = 180\ndesaturation_pct",
     "hypopnea.min_duration_s"),                                                   # negative
])
def test_bad_rule_file_names_file_and_key(tmp_path, old, new, key):
    path = _write_variant(tmp_path, old, new)
    with pytest.raises(ConfigError) as err:
        load_rule_set(path)
    assert str(path) in str(err.value)
    assert key in str(err.value)


def test_copied_rule_file_with_a_changed_number_runs(tmp_path):
    # "a user can copy one, change a number and run it with no code change" (issue 3)
    path = _write_variant(tmp_path, 'name = "aasm-4pct"', 'name = "lab-5pct"')
    text = path.read_text().replace("desaturation_pct = 4", "desaturation_pct = 5")
    path.write_text(text)
    rule = load_rule_set(path)
    cond, breaths = _night([(12.0, 0.5, 3)], desat=4.5)
    ev = _respiratory(cond, breaths, [rule, RULES[1]])
    assert list(ev["rule_sets"]) == ["aasm-4pct"]  # 4.5 points: not enough for 5 %


@pytest.mark.parametrize(("amplitude", "under"), [
    (0.6, "aasm-3pct"), (0.45, "aasm-3pct;aasm-2007-alt"),
])
def test_research_variant_2007_alternative_rule(amplitude, under):
    # rules/aasm-2007-alt.toml: the 2007 alternative hypopnea rule needs a >= 50 % drop
    # (standards.md §1.1, from memory there); a 40 % drop counts only under aasm-3pct
    rules = [RULES[0], load_rule_set("aasm-2007-alt")]
    ev = _respiratory(*_night([(12.0, amplitude, 3)], desat=3.5), rules)
    assert list(ev["event"]) == ["hypopnea"]
    assert ev["rule_sets"].iat[0] == under


@pytest.mark.parametrize(("belts", "expected"), [
    ([normal(12.0)], "obstructive"),          # effort kept while airflow falls
    ([(12.0, 0.5, 3)], "central"),            # effort falls with airflow, no snoring
])
def test_optional_hypopnea_type(belts, expected):
    # AASM optional rule (standards.md §1.2): central when none of snoring, flattening or
    # paradox; hsat also requires effort to fall with airflow (hsat/events/_typing.py)
    cond, breaths = _night([(12.0, 0.5, 3)], belts, desat=4.5)
    ev = _respiratory(cond, breaths)
    assert list(ev["event"]) == ["hypopnea"]
    assert ev["hypopnea_type"].iat[0] == expected


def _csb_night(cycle_s: float, swell: bool, cycles: int, tail_s: float = 300.0):
    """Central apneas of 15 s every ``cycle_s`` with breathing between that waxes and
    wanes (``swell``) or stays flat."""
    between = cycle_s - 15.0
    n = max(3, int(round(between / 4.0)))
    shape = (np.sin(np.pi * (np.arange(n) + 0.5) / n) if swell else np.ones(n)) * 1.2 + 0.2
    cycle = [pause(15.0)] + [(between / n, float(a), 1) for a in shape]
    flow = [normal(LEAD)] + cycle * cycles + [normal(tail_s)]
    total = sum(s[0] for s in flow)
    cond, breaths = make_night(total, {"flow": flow, "thermal": flow, "thorax": flow,
                                       "abdomen": flow})
    return cond, breaths


@pytest.mark.parametrize(("cycle_s", "swell", "present"), [
    (60.0, True, True),     # AASM: >= 3 central events, crescendo-decrescendo, >= 40 s
    (30.0, True, False),    # cycle shorter than 40 s
    (60.0, False, False),   # no waxing and waning between the events
])
def test_cheyne_stokes_criteria(cycle_s, swell, present):
    # AASM 2012 adult Cheyne-Stokes rule (standards.md §1.4 and §9 row 9, from memory
    # there): >= 3 consecutive central apneas separated by crescendo-decrescendo breathing
    # with a cycle >= 40 s, and >= 5 such events per hour over >= 2 h of monitoring
    from hsat.events import find_cheyne_stokes

    cycles = int(2.5 * 3600 / cycle_s)
    cond, breaths = _csb_night(cycle_s, swell, cycles)
    ev = _respiratory(cond, breaths, RULES[:1])
    central = (ev["event"] == "central_apnea").to_numpy()
    assert central.sum() >= cycles - 2  # the detector finds the central apneas
    csb = find_cheyne_stokes(ev["onset_s"].to_numpy(), ev["end_s"].to_numpy(), central,
                             breaths.get("flow"), cond.monitoring_time_s / 3600.0,
                             RULES[0].cheyne_stokes)
    assert csb.present is present
    if present:
        assert csb.central_index >= 5.0
        assert csb.duration_min > 120.0


def test_cheyne_stokes_needs_two_hours_of_monitoring():
    from hsat.events import find_cheyne_stokes

    cond, breaths = _csb_night(60.0, True, 40, tail_s=60.0)  # about 50 min in all
    ev = _respiratory(cond, breaths, RULES[:1])
    central = (ev["event"] == "central_apnea").to_numpy()
    csb = find_cheyne_stokes(ev["onset_s"].to_numpy(), ev["end_s"].to_numpy(), central,
                             breaths.get("flow"), cond.monitoring_time_s / 3600.0,
                             RULES[0].cheyne_stokes)
    assert csb.periods and csb.central_index >= 5.0  # the pattern is there ...
    assert csb.present is False  # ... but monitoring time is under 2 h


@pytest.mark.parametrize(("sign", "gain", "fs"), [(1.0, 1.0, 25.0), (-1.0, 40.0, 100.0),
                                                  (-1.0, 0.02, 32.0)])
def test_sign_gain_and_rate_of_the_kit_do_not_matter(sign, gain, fs):
    # issue 3: the sign of inspiration, the gain and the sampling rates vary between
    # kits; the same breathing recorded any way gives the same events (breaths found by
    # hsat.breaths.detect_breaths on the signals, not hand-made)
    from _scoring_nights import breath_series, waveform
    from hsat.breaths import detect_breaths

    event = [(15.0, 0.45, 4), normal(60.0), pause(18.0)]
    cond, _ = _night(event, desat=5.0, extra_dips=[(15.0 + DELAY, 5.0)])
    signals = dict(cond.signals)
    for role in ("flow", "thermal", "thorax", "abdomen"):
        segs = [normal(LEAD), *event, normal(LEAD)] if role in ("flow", "thermal") else [
            normal(2 * LEAD + 93.0)]
        x = sign * gain * waveform(breath_series(role, segs), 2 * LEAD + 93.0, fs)
        signals[role] = signals[role].replace(fs=fs, data=x, valid=None)
    cond = type(cond)(**{**cond.__dict__, "signals": signals})
    ev = _respiratory(cond, detect_breaths(cond))
    assert list(ev["event"]) == ["hypopnea", "obstructive_apnea"]
    # inverting the signal makes the other half of each cycle the inspiration, so breath
    # edges (and event edges) may move by up to half a 4 s breath
    assert ev["onset_s"].to_numpy() == pytest.approx([LEAD, LEAD + 75.0], abs=2.5)
    assert ev["duration_s"].to_numpy() == pytest.approx([15.0, 18.0], abs=2.5)
