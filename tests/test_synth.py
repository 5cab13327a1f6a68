"""The synthetic night generator (hsat.synth) against outside references.

References: pyedflib (the reference EDF reader) for the written files; neurokit2
(rsp_clean, rsp_rate) for the breathing rate; the AASM adult respiratory rules for the
event definitions the truth claims (apnea <= 10 % of baseline flow for >= 10 s; hypopnea
>= 30 % drop with >= 3 % (1A) or >= 4 % (1B) desaturation; central = absent effort;
standards.md §1.2, §9 rows 1-3); AASM severity classes (standards.md §3.1, §9 row 6);
Cartwright's positional criterion (standards.md §4); the Kapur 2017 minimum of 4 h of
technically adequate oximetry (standards.md §3.3, from memory); AASM Cheyne-Stokes
criteria (standards.md §1.4, from memory). Nights are short and cached per module.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyedflib
import pytest

from hsat.synth import (
    KITS,
    NightSpec,
    generate_night,
    get_kit,
    measured_drop,
    preset,
    write_night,
)


@pytest.fixture(scope="module")
def moderate():
    return generate_night(preset("moderate", seed=7, kit="generic", duration_h=3.0))


@pytest.fixture(scope="module")
def alder_night():
    return generate_night(preset("moderate", seed=8, kit="alder", duration_h=2.0,
                                 central_apnea_rate=4.0))


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """One short night per kit, written to EDF and read back with pyedflib."""
    folder = tmp_path_factory.mktemp("synth")
    out = {}
    for i, kit in enumerate(KITS):
        night = generate_night(preset("mild", seed=20 + i, kit=kit, duration_h=1.5))
        edf, truth = write_night(night, folder / f"night-{kit}")
        out[kit] = (night, edf, truth)
    return out


def _read_all(edf: Path) -> dict[str, tuple[float, str, np.ndarray]]:
    reader = pyedflib.EdfReader(str(edf))
    try:
        return {reader.getLabel(i): (reader.getSampleFrequency(i),
                                     reader.getPhysicalDimension(i), reader.readSignal(i))
                for i in range(reader.signals_in_file)}
    finally:
        reader.close()


# --- determinism -----------------------------------------------------------------------

def test_same_seed_same_night_other_seed_other_night():
    spec = preset("mild", seed=3, kit="birch", duration_h=1.0)
    a, b = generate_night(spec), generate_night(spec)
    c = generate_night(spec.with_changes(seed=4))
    for label in a.signals:
        np.testing.assert_array_equal(a.signals[label].data, b.signals[label].data)
    assert json.dumps(a.truth) == json.dumps(b.truth)
    assert [e["onset_s"] for e in a.truth["events"]] != [e["onset_s"] for e in c.truth["events"]]
    assert not np.array_equal(a.signal("flow").data, c.signal("flow").data)


def test_bad_spec_is_refused():
    with pytest.raises(ValueError, match="unknown kit"):
        NightSpec(kit="oak")
    with pytest.raises(ValueError, match="exceeds"):
        NightSpec(apnea_duration_s=(40.0, 12.0))
    with pytest.raises(ValueError, match="unknown preset"):
        preset("extreme")


# --- event counts, rates and types -----------------------------------------------------

def test_event_counts_follow_the_spec_rates(moderate):
    truth, spec = moderate.truth, moderate.spec
    hours = truth["monitoring_time_s"] / 3600
    assert truth["shortfall"] == {}
    spec_events = [e for e in truth["events"] if e["context"] == ""]
    for kind, rate in (("obstructive_apnea", spec.obstructive_apnea_rate),
                       ("central_apnea", spec.central_apnea_rate),
                       ("mixed_apnea", spec.mixed_apnea_rate),
                       ("hypopnea", spec.hypopnea_rate)):
        count = sum(1 for e in spec_events if e["event"] == kind)
        assert count == round(rate * hours), kind
        assert abs(count / hours - rate) <= 0.5 / hours + 1e-9
    # AASM: scored events last >= 10 s (standards.md §9 row 1)
    assert all(e["duration_s"] >= 10 for e in spec_events)


def test_events_lie_in_valid_sleep_and_do_not_overlap(moderate):
    truth = moderate.truth
    spans = sorted((e["onset_s"], e["onset_s"] + e["duration_s"]) for e in truth["events"])
    assert all(b0 <= a1 for (_, b0), (a1, _) in zip(spans[:-1], spans[1:], strict=True))
    bad = [(w["start_s"], w["end_s"]) for w in truth["wake"]]
    bad += [(i["start_s"], i["end_s"]) for i in truth["invalid"] if i["role"] in ("flow", "spo2")]
    for a, b in spans:
        assert all(b <= lo or a >= hi for lo, hi in bad)
    assert truth["lights_off_s"] < truth["sleep_onset_s"] < truth["final_wake_s"] \
        < truth["lights_on_s"] < truth["duration_s"]


def _amplitude(x: np.ndarray) -> float:
    """Peak-to-trough excursion, robust to a stray sample (common practice)."""
    return float(np.percentile(x, 98) - np.percentile(x, 2))


def _typical_amplitude(x: np.ndarray, fs: float, t0: float, t1: float) -> float:
    """Median of the one-minute excursions between t0 and t1."""
    step = int(60 * fs)
    seg = x[int(t0 * fs):int(t1 * fs)]
    return float(np.median([_amplitude(seg[i:i + step])
                            for i in range(0, len(seg) - step, step)]))


def test_apneas_and_hypopneas_meet_the_aasm_flow_definitions(alder_night):
    # AASM: apnea = >= 90 % drop of the (thermal) flow excursion; hypopnea = >= 30 % drop
    # of the nasal-pressure excursion (standards.md §1.2). Thermal flow is linear in flow.
    therm = alder_night.signal("thermal")
    thorax, abdomen = alder_night.signal("thorax"), alder_night.signal("abdomen")
    checked = {"obstructive_apnea": 0, "central_apnea": 0, "hypopnea": 0}
    for ev in alder_night.truth["events"]:
        if ev["event"] not in checked or ev["context"]:
            continue
        a, b = ev["onset_s"], ev["onset_s"] + ev["duration_s"]
        inner = slice(*therm.index_of([a + 2.0, b - 1.0]))
        before = slice(*therm.index_of([a - 40.0, a - 1.0]))
        ratio = _amplitude(therm.data[inner]) / _amplitude(therm.data[before])
        if ev["event"] == "hypopnea":
            assert ratio <= 0.70 + 0.08, ev  # >= 30 % drop, some leak from filtering
        else:
            assert ratio <= 0.10, ev
        belt = slice(*thorax.index_of([a + 3.0, b - 1.0]))
        belt_before = slice(*thorax.index_of([a - 40.0, a - 1.0]))
        effort = _amplitude(abdomen.data[belt]) / _amplitude(abdomen.data[belt_before])
        if ev["event"] == "central_apnea":
            assert effort < 0.2, ev  # effort absent (rule sets: effort_absent_pct = 20)
        elif ev["event"] == "obstructive_apnea":
            assert effort > 0.2, ev  # effort continues (effort_absent_pct = 20)
            r = np.corrcoef(thorax.data[belt], abdomen.data[belt])[0, 1]
            r0 = np.corrcoef(thorax.data[belt_before], abdomen.data[belt_before])[0, 1]
            assert r < r0 - 0.3, ev  # thoraco-abdominal paradox during obstruction
        checked[ev["event"]] += 1
    assert all(n >= 2 for n in checked.values()), checked


# --- breathing rate (neurokit2) --------------------------------------------------------

def test_breathing_rate_in_adult_range_by_neurokit2(moderate):
    import neurokit2 as nk

    truth = moderate.truth
    busy = [(e["onset_s"] - 60, e["onset_s"] + e["duration_s"] + 30) for e in truth["events"]]
    busy += [(w["start_s"], w["end_s"]) for w in truth["wake"]]
    busy += [(p["start_s"] - 30, p["end_s"] + 30) for p in truth["periods"]
             if p["kind"] in ("rem_like", "sigh")]
    busy += [(m["start_s"] - 10, m["end_s"] + 10) for m in truth["movements"]]
    busy += [(i["start_s"], i["end_s"]) for i in truth["invalid"]]
    therm = moderate.signal("thermal")
    start = next(t for t in np.arange(truth["sleep_onset_s"], truth["final_wake_s"], 10.0)
                 if all(t + 180 <= a or t >= b for a, b in busy))
    seg = therm.data[slice(*therm.index_of([start, start + 180]))]
    cleaned = nk.rsp_clean(seg, sampling_rate=int(therm.fs))
    rate = float(np.nanmean(nk.rsp_rate(cleaned, sampling_rate=int(therm.fs))))
    # adult resting breathing 12-20 /min (common practice)
    assert 12.0 <= rate <= 20.0
    assert abs(rate - truth["physiology"]["breaths_per_min"]) < 2.0


# --- oximetry --------------------------------------------------------------------------

def test_desaturation_nadir_lags_event_end_by_the_circulatory_delay(alder_night):
    spo2 = alder_night.signal("spo2")
    lo, hi = alder_night.spec.circulatory_delay_s
    events = alder_night.truth["events"]
    lags = []
    for i, ev in enumerate(events):
        end = ev["onset_s"] + ev["duration_s"]
        isolated = all(o["onset_s"] > end + 60 or o["onset_s"] + o["duration_s"] + 45 < end
                       for j, o in enumerate(events) if j != i)
        if ev["desat_pct"] < 3 or not isolated:
            continue
        window = spo2.data[slice(*spo2.index_of([end, end + 50]))]
        low = np.flatnonzero(window <= window.min() + 1e-9)
        lags.append((low[0] + low[-1]) / 2 / spo2.fs)  # centre of the nadir plateau
    assert len(lags) >= 5
    # the oximeter's 4 s averaging delays the nadir by about half its window
    assert lo - 1.0 <= min(lags) and max(lags) <= hi + 3.5


def test_three_point_hypopneas_score_under_3pct_only(moderate):
    # AASM 1A (>= 3 %) vs 1B (>= 4 %): an exactly-3-point drop is scored by 1A only.
    spo2 = moderate.signal("spo2")
    seen = 0
    for ev in moderate.truth["events"]:
        if ev["event"] != "hypopnea" or ev["ambiguous"]:
            continue
        drop, _ = measured_drop(spo2.data, spo2.fs, ev["onset_s"], ev["onset_s"] + ev["duration_s"])
        want = [r for r, th in (("aasm-3pct", 3), ("aasm-4pct", 4)) if drop >= th]
        assert ev["scored_under"] == want, ev
        if ev["desat_band"] == "three":
            assert ev["scored_under"] == ["aasm-3pct"]
            seen += 1
    assert seen >= 3


def test_probe_off_and_cannula_off_are_where_the_truth_says(written):
    for kit_name, (night, edf, _) in written.items():
        kit = get_kit(kit_name)
        data = _read_all(edf)
        spo2_label = kit.channel("spo2").label
        fs, _, spo2 = data[spo2_label]
        probe = [i for i in night.truth["invalid"] if i["reason"] == "probe off"]
        for iv in probe:
            inside = spo2[int(np.ceil(iv["start_s"] * fs)) + 1:int(iv["end_s"] * fs) - 1]
            np.testing.assert_allclose(inside, kit.spo2_probe_off, atol=1e-6)
        outside = spo2[int(night.truth["lights_off_s"] * fs):int((probe[0]["start_s"] - 5) * fs)]
        assert np.all(outside / kit.spo2_scale > 80)
        flow_fs, _, flow = data[kit.channel("flow").label]
        belt_fs, _, belt = data[kit.channel("abdomen").label]
        for iv in night.truth["invalid"]:
            if iv["reason"] not in ("cannula off", "mouth breathing"):
                continue
            mid = (iv["start_s"] + iv["end_s"]) / 2
            f_in = flow[int((mid - 30) * flow_fs):int((mid + 30) * flow_fs)]
            b_in = belt[int((mid - 30) * belt_fs):int((mid + 30) * belt_fs)]
            sleep = (night.truth["sleep_onset_s"], night.truth["final_wake_s"])
            f_typ = _typical_amplitude(flow, flow_fs, *sleep)
            b_typ = _typical_amplitude(belt, belt_fs, *sleep)
            assert _amplitude(f_in) < 0.1 * f_typ, (kit_name, iv)  # nearly flat
            assert _amplitude(b_in) > 0.5 * b_typ, (kit_name, iv)  # still breathing
    assert probe, "each night has a probe-off episode"


# --- EDF written through hsat.io.write_edf, read back by pyedflib ----------------------

def test_edf_reads_back_with_pyedflib_labels_rates_units(written):
    for kit_name, (night, edf, truth_path) in written.items():
        kit = get_kit(kit_name)
        data = _read_all(edf)
        assert list(data) == [ch.label for ch in kit.channels]
        for ch in kit.channels:
            fs, unit, x = data[ch.label]
            assert fs == ch.fs and unit == ch.unit, ch.label
            sig = night.signals[ch.label]
            assert len(x) == len(sig.data)
            # one digital step (the writer keeps the lowest code for "no value", so a
            # sample clipped at the physical minimum reads back one step higher)
            step = (ch.physical_range[1] - ch.physical_range[0]) / 65535
            assert np.max(np.abs(x - sig.data)) <= step * 1.0001, ch.label
        pos = data[kit.channel("position").label][2]
        assert set(np.unique(pos)) <= set(float(c) for c in kit.position_codes.values())
        truth = json.loads(truth_path.read_text())
        assert truth["kit"] == kit_name and truth["seed"] == night.spec.seed
        reader = pyedflib.EdfReader(str(edf))
        texts = list(reader.readAnnotations()[2])
        reader.close()
        if kit.lights_texts is None:
            assert texts == []
        elif truth["lights_annotated"]:
            assert texts == list(kit.lights_texts)


def test_spo2_resolution_per_kit(written):
    for kit_name, (_, edf, _) in written.items():
        kit = get_kit(kit_name)
        x = _read_all(edf)[kit.channel("spo2").label][2] / kit.spo2_scale
        frac = np.abs(x - np.round(x))
        if kit.spo2_integer:
            assert frac.max() < 1e-6, kit_name  # whole-percent steps
        else:
            assert frac.max() > 0.05, kit_name


def test_gaps_make_an_edf_plus_d_file(tmp_path):
    night = generate_night(preset("normal", seed=5, kit="generic", duration_h=1.0,
                                  gaps=((1800.0, 120.0),)))
    edf, _ = write_night(night, tmp_path / "gappy.edf")
    header = edf.read_bytes()[:256]
    assert header[192:197] == b"EDF+D"  # EDF+ reserved field (standards.md §7)
    n_records = int(header[236:244])
    assert n_records == int(night.spec.duration_s) - 120
    assert {"start_s": 1800.0, "end_s": 1920.0, "role": "", "reason": "recording gap"} \
        in night.truth["invalid"]
    with pytest.raises(OSError):  # pyedflib refuses EDF+D (a measured fact, see issue 2)
        pyedflib.EdfReader(str(edf))


# --- presets ---------------------------------------------------------------------------

@pytest.mark.parametrize("name, lo, hi", [
    ("normal", 0, 5), ("mild", 5, 15), ("moderate", 15, 30), ("severe", 30, 200),
])
def test_presets_land_in_their_aasm_severity_class(name, lo, hi):
    truth = generate_night(preset(name, seed=11, kit="birch", duration_h=3.0)).truth
    for rule_set in ("aasm-3pct", "aasm-4pct"):
        assert lo <= truth["expected"][rule_set]["rei"] < hi, rule_set


def test_positional_preset_meets_cartwright():
    truth = generate_night(preset("positional", seed=2, kit="birch", duration_h=5.0)).truth
    supine = sum(p["end_s"] - p["start_s"] for p in truth["positions"]
                 if p["position"] == "supine")
    lying = sum(p["end_s"] - p["start_s"] for p in truth["positions"]
                if p["position"] in ("left", "right", "prone"))
    ev = [e for e in truth["events"] if "aasm-4pct" in e["scored_under"]]
    rate_sup = sum(e["position"] == "supine" for e in ev) / supine
    rate_non = sum(e["position"] != "supine" for e in ev) / lying
    assert rate_sup >= 2 * rate_non  # supine index >= 2x non-supine


def test_inadequate_preset_has_under_four_hours_of_oximetry():
    truth = generate_night(preset("inadequate", seed=1, kit="birch", duration_h=5.0)).truth
    lost = sum(min(i["end_s"], truth["lights_on_s"]) - max(i["start_s"], truth["lights_off_s"])
               for i in truth["invalid"] if i["role"] == "spo2")
    valid_h = (truth["lights_on_s"] - truth["lights_off_s"] - lost) / 3600
    assert valid_h < 4.0
    assert truth["monitoring_time_s"] / 3600 < 4.0


def test_cheyne_stokes_preset_cycles():
    night = generate_night(preset("central_csb", seed=4, kit="birch", duration_h=4.0))
    csb = [e for e in night.truth["events"] if e["context"] == "csb"]
    assert len(csb) >= 3
    onsets = np.array([e["onset_s"] for e in csb])
    cycles = np.diff(onsets)
    cycles = cycles[cycles < 120]  # within one Cheyne-Stokes period
    # cycle length >= 40 s, typically 45-90 s (standards.md §1.4)
    assert cycles.size >= 3 and cycles.min() >= 40 and np.median(cycles) <= 90
    assert all(e["event"] == "central_apnea" or e["subtype"] == "central" for e in csb)


# --- the demo scenario -----------------------------------------------------------------

def _run_demo_module():
    import importlib.util
    import sys

    if "run_demo" in sys.modules:
        return sys.modules["run_demo"]
    path = Path(__file__).resolve().parents[1] / "demo" / "run_demo.py"
    spec = importlib.util.spec_from_file_location("run_demo", path)
    module = importlib.util.module_from_spec(spec)
    sys.modules["run_demo"] = module  # dataclasses look their module up by name
    spec.loader.exec_module(module)
    return module


def test_demo_patients_cover_the_severities_and_kits(tmp_path):
    from hsat.intake import load_intake

    demo = _run_demo_module()
    scenario = demo.load_scenario()
    presets = {n.entry["preset"] for n in scenario.nights}
    assert {"normal", "mild", "moderate", "severe", "positional"} <= presets
    assert {n.entry["study"]["kit"] for n in scenario.nights} == set(KITS)
    ids = [n.entry["patient"]["id"] for n in scenario.nights]
    assert len(set(ids)) == len(ids)
    for night in scenario.nights:
        path = tmp_path / f"{night.stem}.intake.toml"
        path.write_text(demo.intake_toml(night.entry), encoding="utf-8")
        intake = load_intake(path)  # the sidecar format hsat reads
        assert intake.patient.id == night.entry["patient"]["id"]
        spec = demo.night_spec(night.entry)
        assert spec.kit == night.entry["study"]["kit"] and spec.patient.code == intake.patient.id
