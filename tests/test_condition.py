"""Conditioning: filters, artefact rules, flat-line detection, wake, monitoring time.

Each check names its source: the AASM technical specifications and HSAT rules and the
artefact conventions collected in standards.md (§1.2, §1.6, §2, §3.3), scipy as the
reference for zero-phase filtering, or "common practice".
"""

from __future__ import annotations

import json
from datetime import datetime

import numpy as np
import pytest

from hsat.condition import condition_recording, describe
from hsat.condition._flow import linearise
from hsat.errors import ChannelError
from hsat.io import read_recording, write_edf
from hsat.recording import POSITION_CODES, Interval, Recording, Signal

START = datetime(2025, 9, 1, 22, 0, 0)
BREATH_HZ = 0.25  # 15 breaths/min, adult resting rate (common practice)


def _flow(n_s: float, fs: float) -> np.ndarray:
    t = np.arange(int(n_s * fs)) / fs
    return np.sin(2 * np.pi * BREATH_HZ * t)


def build(hours: float = 0.5, *, fs_flow: float = 25.0, fs_belt: float = 10.0, seed: int = 0,
          flow_scale: list[tuple[float, float, float]] = (),
          cannula_off: list[tuple[float, float]] = (),
          belt_flat: list[tuple[float, float]] = (),
          spo2_edit=None, pulse_edit=None, position=None,
          lights: tuple[float | None, float | None] = (None, None),
          belt_bursts: list[float] = ()) -> Recording:
    """A recording in memory: regular breathing, steady SpO2, supine, plus edits.

    ``flow_scale`` multiplies the flow in [a, b) by f (0.02 = an apnea, 0.08 = mouth
    breathing); ``cannula_off`` replaces nasal pressure by sensor noise.
    """
    rng = np.random.default_rng(seed)
    dur = hours * 3600
    q = _flow(dur, fs_flow)
    t_flow = np.arange(q.size) / fs_flow
    for a, b, f in flow_scale:
        q[(t_flow >= a) & (t_flow < b)] *= f
    pressure = -q * np.abs(q) + rng.normal(0, 0.01, q.size)  # inspiration negative
    for a, b in cannula_off:
        sl = (t_flow >= a) & (t_flow < b)
        pressure[sl] = rng.normal(0, 0.005, sl.sum())
    belt = _flow(dur, fs_belt) + rng.normal(0, 0.01, int(dur * fs_belt))
    t_belt = np.arange(belt.size) / fs_belt
    thorax, abdomen = belt.copy(), belt.copy()
    for a, b in belt_flat:
        sl = (t_belt >= a) & (t_belt < b)
        thorax[sl] = rng.normal(0, 0.002, sl.sum())
    for t0 in belt_bursts:  # broadband body movement for 4 s
        sl = (t_belt >= t0) & (t_belt < t0 + 4)
        thorax[sl] += rng.normal(0, 2.0, sl.sum())
        abdomen[sl] += rng.normal(0, 2.0, sl.sum())
    n1 = int(dur)
    spo2 = np.full(n1, 96.0)
    spo2_valid = np.ones(n1, dtype=bool)
    if spo2_edit is not None:
        spo2_edit(spo2, spo2_valid)
    pulse = np.full(n1, 62.0)
    if pulse_edit is not None:
        pulse_edit(pulse)
    pos = np.full(n1, float(POSITION_CODES["supine"])) if position is None else position
    signals = {
        "flow": Signal("flow", "Nasal Pressure", fs_flow, pressure, "cmH2O"),
        "thorax": Signal("thorax", "Thorax", fs_belt, thorax, "uV"),
        "abdomen": Signal("abdomen", "Abdomen", fs_belt, abdomen, "uV"),
        "spo2": Signal("spo2", "SpO2", 1.0, spo2, "%", valid=spo2_valid),
        "pulse": Signal("pulse", "Pulse", 1.0, pulse, "bpm"),
        "position": Signal("position", "Position", 1.0, pos),
    }
    return Recording(path="mem.edf", start=START, duration_s=dur, signals=signals,
                     file_type="EDF+C", lights_off_s=lights[0], lights_on_s=lights[1])


def _excl(cond, role: str) -> list[Interval]:
    return [e for e in cond.exclusions if e.role == role]


# --- nasal pressure: linearisation and band-limiting -------------------------------------

def test_square_root_linearisation_undoes_a_quadratic_transducer():
    """Nasal pressure ~ flow * |flow| (AASM: nasal pressure with or without square-root
    transformation, standards.md §1.2); the sign-preserving root returns the flow."""
    q = np.linspace(-2, 2, 401)
    assert np.allclose(linearise(q * np.abs(q)), q)
    assert np.allclose(linearise(-q), -linearise(q))


def test_polarity_does_not_matter():
    rec = build(0.25)
    flipped_flow = rec.signals["flow"].replace(data=-rec.signals["flow"].data)
    flipped = Recording(**{**rec.__dict__, "signals": {**rec.signals, "flow": flipped_flow}})
    a = condition_recording(rec).signals["flow"]
    b = condition_recording(flipped).signals["flow"]
    ok = a.mask & b.mask
    assert ok.mean() > 0.99 and np.allclose(a.data[ok], -b.data[ok])


def test_flow_filtering_is_zero_phase_and_removes_drift():
    """Zero-phase (scipy.signal.sosfiltfilt): breaths do not shift in time; the 0.03 Hz
    high-pass (AASM nasal pressure LFF <= 0.03 Hz, standards.md §1.2, from memory) removes
    slow transducer drift."""
    rec = build(0.25)
    flow = rec.signals["flow"]
    t = np.arange(flow.data.size) / flow.fs
    drifting = flow.replace(data=flow.data + 0.8 * np.sin(2 * np.pi * 0.002 * t))
    clean = condition_recording(rec).signals["flow"].data
    drift = condition_recording(Recording(**{**rec.__dict__, "signals": {
        **rec.signals, "flow": drifting}})).signals["flow"].data
    core = slice(int(120 * flow.fs), int(-120 * flow.fs))
    assert np.corrcoef(clean[core], drift[core])[0, 1] > 0.98
    # zero phase: the conditioned trace lines up with the true flow (-q: inspiration is
    # negative pressure here) at lag 0
    true = -_flow(900, flow.fs)[core]
    lags = range(-5, 6)
    xc = [np.dot(np.roll(clean[core], k), true) for k in lags]
    assert list(lags)[int(np.argmax(xc))] == 0


# --- flat flow / cannula off -------------------------------------------------------------

def test_apnea_is_not_a_flat_line_but_a_long_cannula_off_is():
    """A 10-60 s apnea drops flow >= 90 % (AASM, standards.md §1.2) but is an event, not
    a disconnection; a 5-min flat stretch is a cannula off (common practice)."""
    rec = build(0.75, flow_scale=[(600, 640, 0.02), (900, 955, 0.02)],
                cannula_off=[(1500, 1800)],
                spo2_edit=lambda s, v: (s.__setitem__(slice(625, 680), 91.0)))
    cond = condition_recording(rec)
    flow_excl = _excl(cond, "flow")
    assert len(flow_excl) == 1
    (off,) = flow_excl
    assert off.reason == "cannula off / flat flow"
    assert off.start_s == pytest.approx(1500, abs=2) and off.end_s == pytest.approx(1800, abs=2)
    flow = cond.signals["flow"]
    assert flow.mask[int(610 * flow.fs):int(630 * flow.fs)].all()  # the apnea stays valid
    assert not flow.mask[int(1510 * flow.fs):int(1790 * flow.fs)].any()


def test_nearly_flat_flow_while_belts_breathe_and_spo2_holds_is_mouth_breathing():
    """Nasal flow at 25 % (pressure ~6 %) for 150 s while both belts breathe normally and
    SpO2 holds: air goes elsewhere (mouth), so the sensor, not the patient, has stopped
    (common practice); 2 % flow for 150 s under the same conditions reads as a cannula off."""
    cond = condition_recording(build(0.5, flow_scale=[(700, 850, 0.25), (1200, 1350, 0.02)]))
    got = [(round(e.start_s), round(e.end_s), e.reason) for e in _excl(cond, "flow")]
    assert len(got) == 2
    (a0, a1, reason_a), (b0, b1, reason_b) = got
    assert reason_a == "nearly flat flow (mouth breathing or cannula shift)"
    assert abs(a0 - 700) <= 3 and abs(a1 - 850) <= 3
    assert reason_b == "cannula off / flat flow"
    assert abs(b0 - 1200) <= 3 and abs(b1 - 1350) <= 3


def test_a_long_reduction_with_desaturation_is_left_to_event_scoring():
    """150 s of 8 % flow with SpO2 falling 6 points: the patient is not breathing enough,
    so it is not an artefact; shorter than the unconditional 180 s rule."""
    def desat(s, v):
        s[720:880] = np.linspace(96, 90, 160)
    cond = condition_recording(build(0.5, flow_scale=[(700, 850, 0.08)], spo2_edit=desat))
    assert _excl(cond, "flow") == []


def test_flat_belt_for_minutes_but_not_for_a_central_apnea():
    cond = condition_recording(build(0.5, belt_flat=[(300, 330), (900, 1200)]))
    (e,) = _excl(cond, "thorax")
    assert e.reason == "flat belt"
    assert e.start_s == pytest.approx(900, abs=2) and e.end_s == pytest.approx(1200, abs=2)
    assert _excl(cond, "abdomen") == []


def test_flow_that_never_breathes_is_a_channel_error():
    rec = build(0.25, cannula_off=[(0, 900)])
    with pytest.raises(ChannelError, match="no breathing rhythm"):
        condition_recording(rec)


# --- oximetry ----------------------------------------------------------------------------

def test_spo2_artefact_rules():
    """standards.md §2 (common practice, from memory): values below 50 % or above 100 %
    are artefact; a jump > 4 points/s is artefact; probe-off is missing data; gaps of
    <= 10 s are bridged, longer ones excluded; a physiological desaturation stays."""
    def edit(s, v):
        s[100:130] = 45.0                      # out of range
        s[300:320] = 84.0                      # implausible jump, 20 s
        s[500:506] = 83.0                      # implausible jump, 6 s: bridged
        v[700:760] = False                     # probe off (no reading)
        v[900:905] = False                     # short dropout: bridged
        s[1100:1140] = np.linspace(96, 86, 40)  # desaturation at 0.25 points/s
        s[1140:1160] = np.linspace(86, 96, 20)
    cond = condition_recording(build(0.5, spo2_edit=edit))
    got = {(round(e.start_s), round(e.end_s), e.reason) for e in _excl(cond, "spo2")}
    assert got == {(100, 130, "out of range"), (300, 320, "implausible jump"),
                   (700, 760, "probe off")}
    spo2 = cond.signals["spo2"]
    assert spo2.mask[500:506].all() and np.allclose(spo2.data[500:506], 96.0)
    assert spo2.mask[900:905].all()
    assert spo2.mask[1100:1160].all() and spo2.data[1140] == pytest.approx(86.0)


def test_pulse_rate_outside_25_to_250_bpm_is_artefact():
    """standards.md §2: pulse rate < 25 or > 250 bpm is artefact (common practice)."""
    def edit(p):
        p[200:230] = 20.0
        p[400:430] = 300.0
    cond = condition_recording(build(0.25, pulse_edit=edit))
    got = [(round(e.start_s), round(e.end_s), e.reason) for e in _excl(cond, "pulse")]
    assert got == [(200, 230, "out of range"), (400, 430, "out of range")]


def test_spo2_entirely_out_of_range_is_a_channel_error():
    def edit(s, v):
        s[:] = 0.96  # a fraction labelled as %
    with pytest.raises(ChannelError, match="no value within 50-100 %"):
        condition_recording(build(0.25, spo2_edit=edit))


# --- wake, lights, monitoring time, adequacy ---------------------------------------------

def test_monitoring_time_is_recording_time_minus_invalid_minus_wake_minus_excluded():
    """AASM HSAT: MT = recording time - invalid flow/oximetry - wake - excluded
    (standards.md §1.6 and §9 row 5, from memory)."""
    hours = 5.0
    pos = np.full(int(hours * 3600), float(POSITION_CODES["left"]))
    pos[12000:12300] = POSITION_CODES["upright"]

    def probe_off(s, v):
        v[7000:7400] = False
    rec = build(hours, cannula_off=[(3600, 3900)], spo2_edit=probe_off, position=pos,
                lights=(600.0, hours * 3600 - 600))
    cond = condition_recording(rec, excluded=[(10000, 10600)])
    assert cond.lights_off_s == 600 and cond.recording_time_s == pytest.approx(16800)
    assert [(w.start_s, w.end_s, w.reason) for w in cond.wake] == [
        (12000, 12300, "judged awake: upright")]
    expected = 16800 - 300 - 400 - 600 - 300
    assert cond.monitoring_time_s == pytest.approx(expected, abs=6)
    reasons = {e.reason for e in cond.exclusions}
    assert {"before lights off", "after lights on", "excluded by user", "probe off",
            "cannula off / flat flow"} <= reasons
    assert cond.in_analysis(np.array([5000.0]))[0] and not cond.in_analysis(np.array([7100.0]))[0]


@pytest.mark.parametrize(("valid_h", "adequate"), [(2.7, False), (3.95, False), (4.05, True)])
def test_adequacy_needs_four_hours_of_valid_oximetry_and_flow(valid_h, adequate):
    """Kapur et al. JCSM 2017 (standards.md §3.3, from memory): a technically adequate
    HSAT has >= 4 h of technically adequate oximetry and flow."""
    def lose(s, v):
        v[int(valid_h * 3600):] = False
    cond = condition_recording(build(5.0, fs_flow=10.0, fs_belt=5.0, spo2_edit=lose))
    assert cond.adequacy.adequate is adequate
    assert cond.adequacy.valid_spo2_h == pytest.approx(valid_h, abs=0.01)
    if not adequate:
        assert cond.adequacy.reasons[0] == (
            f"oximetry valid for {valid_h:.1f} h; at least 4 h needed (Kapur 2017)")


def test_restless_start_of_night_is_judged_awake():
    """Movement at the start of the night is wake (AASM HSAT: wake may be judged from
    movement, standards.md §1.6, from memory); a lone mid-night movement is not."""
    bursts = [60 + 90 * k for k in range(10)] + [2400]
    cond = condition_recording(build(1.0, belt_bursts=bursts))
    (w,) = cond.wake
    assert w.start_s == 0 and 870 <= w.end_s <= 1000
    assert w.reason == "judged awake: restless at the start of the night"


def test_edfplus_d_gap_is_excluded_not_closed_up(tmp_path):
    rec = build(0.5)
    path = write_edf(tmp_path / "gap.edf", [s.replace(role="") for s in rec.signals.values()],
                     start=START, file_type="EDF+D", gaps=[Interval(600.0, 700.0)])
    cond = condition_recording(read_recording(path))
    gaps = [e for e in cond.exclusions if e.reason == "EDF+D gap"]
    assert [(g.start_s, g.end_s, g.role) for g in gaps] == [(600.0, 700.0, "")]
    assert not any(e.reason == "no value recorded" for e in cond.exclusions)
    flow = cond.signals["flow"]
    assert len(flow.data) == int(1800 * flow.fs)
    assert not flow.mask[int(600 * flow.fs):int(700 * flow.fs)].any()
    assert cond.monitoring_time_s == pytest.approx(1700, abs=2)


def test_describe_is_json_ready_and_complete():
    cond = condition_recording(build(0.25, cannula_off=[(300, 600)]))
    d = json.loads(json.dumps(describe(cond)))
    for key in ("file", "file_type", "start", "duration_h", "roles", "unused_labels",
                "exclusions", "wake", "wake_judged_by", "monitoring_time_h",
                "recording_time_h", "adequate", "adequacy", "warnings"):
        assert key in d
    assert d["roles"]["flow"]["fs"] == 25.0
    assert d["roles"]["flow"]["valid_h"] == pytest.approx(600 / 3600, abs=0.002)
    assert d["adequate"] is False
