"""Breath detection, breath amplitude and the pre-event baseline (hsat.breaths).

References: neurokit2 (rsp_simulate, rsp_clean, rsp_peaks, rsp_rate) as the outside
breath detector; the handbook definition of a periodic waveform's peak-to-trough
amplitude (2 A for A sin wt, common practice); the AASM 2007 pre-event baseline wording
(standards.md §1.3); the AASM apnea and hypopnea amplitude bands (standards.md §1.2, §9).
The breathing test signals are built here from a stated waveform (half-sine inspiration,
early-peaking expiratory pulse, end-expiratory pause: common practice, not a source).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pytest

from hsat.breaths import (
    Breaths,
    BreathSeries,
    agreement,
    amplitude_at,
    detect_breaths,
    find_breaths,
    match_times,
    pre_event_baseline,
)


@dataclass
class Truth:
    """Breaths as generated: onsets, inspiratory peaks, ends and peak-to-trough amplitudes."""

    onset_s: np.ndarray
    peak_s: np.ndarray
    end_s: np.ndarray
    amplitude: np.ndarray
    expiration_end_s: np.ndarray
    pauses: list[tuple[float, float]] = field(default_factory=list)


def breathing(
    fs: float,
    duration_s: float,
    *,
    rate_bpm: float = 15.0,
    cv: float = 0.08,
    amplitude: float = 1.0,
    scale: tuple[tuple[float, float, float], ...] = (),
    pauses: tuple[tuple[float, float], ...] = (),
    noise: float = 0.01,
    cardiac: float = 0.0,
    seed: int = 0,
) -> tuple[np.ndarray, Truth]:
    """A flow signal with known breaths.

    ``scale`` holds (start_s, end_s, factor) spans where breath size is multiplied (a
    hypopnea at 0.3-0.7, a sigh at 2-3); ``pauses`` holds (start_s, end_s) spans with no
    breath onset (an apnea: flow stays at zero until ``end_s``). ``noise`` is white noise
    and ``cardiac`` a cardiogenic oscillation at 1.1-1.3 Hz (peak-to-trough), both as
    fractions of the peak inspiratory flow.
    """
    rng = np.random.default_rng(seed)
    onsets, periods, amps = [], [], []
    t = 0.5
    base_period = 60.0 / rate_bpm
    while t < duration_s - 2 * base_period:
        inside = [p for p in pauses if p[0] <= t < p[1]]
        if inside:
            t = inside[0][1]
            continue
        period = base_period * float(np.clip(1 + cv * rng.standard_normal(), 0.6, 1.5))
        factor = float(np.prod([f for a, b, f in scale if a <= t < b] or [1.0]))
        onsets.append(t)
        periods.append(period)
        amps.append(amplitude * factor * float(np.clip(1 + 0.05 * rng.standard_normal(), 0.8, 1.2)))
        t += period
    onset, period, peak_flow = np.array(onsets), np.array(periods), np.array(amps)
    ti, te = 0.38 * period, 0.45 * period
    # expired volume equals inspired volume: E * te * 27/48 = A * ti * 2/pi
    exp_peak = peak_flow * ti * (2 / np.pi) / (te * 27 / 48)
    times = np.arange(int(duration_s * fs)) / fs
    k = np.clip(np.searchsorted(onset, times, side="right") - 1, 0, len(onset) - 1)
    u = times - onset[k]
    xi = np.clip(u / ti[k], 0, 1)
    xe = np.clip((u - ti[k]) / te[k], 0, 1)
    flow = np.where(
        (u >= 0) & (u < ti[k]), peak_flow[k] * np.sin(np.pi * xi),
        np.where((u >= ti[k]) & (u < ti[k] + te[k]),
                 -exp_peak[k] * 27 / 4 * xe * (1 - xe) ** 2, 0.0),
    )
    flow = flow + noise * amplitude * rng.standard_normal(len(times))
    heart_hz = 1.2 + 0.1 * np.sin(2 * np.pi * times / 97.0)
    size = np.ones(len(times))
    for a, b, f in scale:  # the oscillation scales with the breaths around it
        size[(times >= a) & (times < b)] *= f
    flow = flow + cardiac / 2 * amplitude * size * np.sin(2 * np.pi * np.cumsum(heart_hz) / fs)
    truth = Truth(onset, onset + ti / 2, onset + period, peak_flow + exp_peak, onset + ti + te,
                  list(pauses))
    return flow, truth


def volume_of(flow: np.ndarray, fs: float) -> np.ndarray:
    """Belt-like volume signal: the running integral of flow."""
    return np.cumsum(flow) / fs


def f1(reference: np.ndarray, detected: np.ndarray, tolerance_s: float = 1.0) -> float:
    return agreement(reference, detected, tolerance_s).f1


# --- outside references -------------------------------------------------------------


@pytest.mark.parametrize("rate_bpm", [8, 12, 15, 20, 30])
def test_rate_matches_neurokit2_on_simulated_breathing(rate_bpm: float) -> None:
    # Reference: neurokit2 rsp_simulate (breathmetrics model) and rsp_rate on rsp_clean +
    # rsp_peaks; hsat's breath rate must agree within 1 breath/min.
    nk = pytest.importorskip("neurokit2")
    fs = 50
    x = nk.rsp_simulate(duration=180, sampling_rate=fs, respiratory_rate=rate_bpm,
                        method="breathmetrics", random_state=3)
    cleaned = nk.rsp_clean(x, sampling_rate=fs)
    _, info = nk.rsp_peaks(cleaned, sampling_rate=fs)
    nk_rate = float(np.mean(nk.rsp_rate(cleaned, troughs=info["RSP_Troughs"], sampling_rate=fs)))
    for role in ("flow", "thorax"):
        b = find_breaths(x, fs, role=role)
        hsat_rate = 60.0 / float(np.mean(np.diff(b.onset_s)))
        assert abs(hsat_rate - nk_rate) <= 1.0, (role, hsat_rate, nk_rate)
        # and breath by breath against neurokit2's inspiratory peaks, away from the ends
        nk_peaks = np.asarray(info["RSP_Peaks"]) / fs
        inner = (nk_peaks > 8) & (nk_peaks < 172), (b.peak_s > 8) & (b.peak_s < 172)
        assert f1(nk_peaks[inner[0]], b.peak_s[inner[1]]) >= 0.97


@pytest.mark.parametrize("role", ["flow", "thorax"])
def test_sinusoid_amplitude_is_peak_to_trough(role: str) -> None:
    # Handbook definition: A sin(wt) + c has peak-to-trough amplitude 2A (common practice).
    fs, a = 100.0, 3.7
    t = np.arange(0, 120, 1 / fs)
    x = a * np.sin(2 * np.pi * 0.25 * t) + 40.0
    b = find_breaths(x, fs, role=role)
    inner = b.amplitude[1:-1]
    assert len(inner) >= 25
    np.testing.assert_allclose(inner, 2 * a, rtol=2e-3)
    # one breath per 4 s cycle; the inspiratory extreme is the crest at t = 1 + 4k
    def off_grid(times: np.ndarray, first: float) -> np.ndarray:
        return np.abs((times - first + 2.0) % 4.0 - 2.0)

    assert np.all(off_grid(b.peak_s, 1.0) <= 0.05)
    # flow: onset at the upward zero crossing (t = 4k); volume: at the trough (t = 3 + 4k)
    # plus 10 % of the rise (0.41 s); the zero-flow level is a running median: 0.2 s
    assert np.all(off_grid(b.onset_s[2:-3], 0.0 if role == "flow" else 3.41) <= 0.2)


def test_asymmetric_waveform_amplitude_is_max_minus_min() -> None:
    # The peak-to-trough excursion of a breath is its max minus its min (AASM "peak signal
    # excursion", standards.md §1.2): the generated breaths have it in closed form.
    fs = 100.0
    flow, truth = breathing(fs, 300, noise=0.0, seed=4)
    b = find_breaths(flow, fs, role="flow")
    pairs = match_times(truth.peak_s, b.peak_s, 1.0)
    assert len(pairs) >= len(truth.peak_s) - 1
    ref = np.array([truth.amplitude[i] for i, _ in pairs])
    got = np.array([b.amplitude[j] for _, j in pairs])
    # the 2 Hz low-pass rounds the sharp expiratory peak slightly: within 6 %
    np.testing.assert_allclose(got[1:-1], ref[1:-1], rtol=0.06)


# --- robustness --------------------------------------------------------------------


@pytest.mark.parametrize("fs", [10.0, 25.0, 32.0, 100.0, 128.0, 200.0])
def test_sample_rates(fs: float) -> None:
    flow, truth = breathing(fs, 600, seed=int(fs))
    for role, x in (("flow", flow), ("thorax", volume_of(flow, fs))):
        b = find_breaths(x, fs, role=role)
        assert f1(truth.peak_s, b.peak_s) >= 0.99, (fs, role)
        assert f1(truth.onset_s, b.onset_s) >= 0.99, (fs, role)


@pytest.mark.parametrize("gain", [1e-4, 1.0, 3e3])
def test_gain_and_inverted_polarity_give_the_same_breaths(gain: float) -> None:
    fs = 50.0
    flow, truth = breathing(fs, 900, seed=7, cv=0.15)
    reference = find_breaths(flow, fs, role="flow")
    assert reference.polarity == 1
    for sign in (1, -1):
        b = find_breaths(sign * gain * flow, fs, role="flow")
        assert b.polarity == sign
        assert len(b) == len(reference)
        np.testing.assert_allclose(b.onset_s, reference.onset_s, atol=0.05)
        np.testing.assert_allclose(b.amplitude, gain * reference.amplitude, rtol=1e-6)
    belt = volume_of(flow, fs)
    for sign in (1, -1):
        b = find_breaths(sign * gain * belt, fs, role="abdomen")
        assert b.polarity == sign
        assert f1(truth.onset_s, b.onset_s) >= 0.99


def test_snore_bursts_do_not_change_breaths() -> None:
    # Snore: 80-150 Hz bursts during inspiration, as large as the breath itself.
    fs = 400.0
    flow, truth = breathing(fs, 600, seed=11)
    t = np.arange(len(flow)) / fs
    inspiring = flow > 0.2
    snore = inspiring * np.sin(2 * np.pi * 95 * t) * (0.8 + 0.4 * np.sin(2 * np.pi * 7 * t))
    clean = find_breaths(flow, fs, role="flow")
    snoring = find_breaths(flow + snore, fs, role="flow")
    assert len(snoring) == len(clean)
    assert f1(truth.peak_s, snoring.peak_s) >= 0.99
    np.testing.assert_allclose(snoring.amplitude, clean.amplitude, rtol=0.05)


def test_baseline_drift_does_not_change_breaths() -> None:
    fs = 25.0
    flow, truth = breathing(fs, 1200, seed=5)
    t = np.arange(len(flow)) / fs
    drift = 5.0 * np.sin(2 * np.pi * t / 300.0) + 0.004 * t  # 5x the breath size, slow
    for role, x in (("flow", flow), ("thorax", volume_of(flow, fs))):
        b = find_breaths(x + drift, fs, role=role)
        assert f1(truth.peak_s, b.peak_s) >= 0.99, role


def test_apnea_has_no_breaths_and_zero_amplitude() -> None:
    # AASM apnea: >= 90 % drop for >= 10 s (standards.md §1.2). Inside a 10-60 s pause with
    # sensor noise at 3 % of the breath size, no breath may be found (it would hide the
    # apnea) and the amplitude step function must read 0.
    # A cardiogenic oscillation at 12 % of the breath rides on the flow (common practice:
    # it is what a flat nasal-pressure trace shows during a central apnea). The apneas lie
    # in a stretch of breathing 2.5 x larger than the rest of the record.
    fs = 32.0
    pauses = ((600.0, 612.0), (750.0, 780.0), (900.0, 960.0))
    flow, truth = breathing(fs, 1800, pauses=pauses, scale=((500.0, 1100.0, 2.5),),
                            noise=0.03, cardiac=0.12, seed=2)
    for role, x in (("flow", flow), ("thorax", volume_of(flow, fs))):
        b = find_breaths(x, fs, role=role)
        assert f1(truth.peak_s, b.peak_s) >= 0.99, role
        for start, stop in pauses:
            # the breath before the pause ends with its expiration (within 1 s before the
            # expiration's true end: its slow tail counts as ended at 10 % left)
            last = np.flatnonzero(truth.onset_s < start)[-1]
            before = int(np.argmin(np.abs(b.peak_s - truth.peak_s[last])))
            true_end = truth.expiration_end_s[last]
            assert true_end - 1.0 <= b.end_s[before] <= true_end + 0.3, (role, start)
            last_end = truth.end_s[truth.onset_s < start][-1]
            quiet = (last_end + 1.0, stop - 1.0)
            assert not np.any((b.peak_s > quiet[0]) & (b.peak_s < quiet[1])), (role, start)
            grid = np.arange(*quiet, 0.5)
            assert np.all(amplitude_at(b, grid) == 0.0), (role, start)


@pytest.mark.parametrize("flat_s", [170.0, 600.0])
def test_long_flat_stretch_stays_empty(flat_s: float) -> None:
    # The built-in rule sets accept events up to 180 s; a 170 s flat stretch (a long
    # central apnea), or a 10 min one (a sensor gone flat before conditioning flags it),
    # with white noise at 3 % and a cardiogenic oscillation at 8 % of the breath size,
    # must stay free of breaths.
    fs = 25.0
    flow, truth = breathing(fs, 900 + flat_s, pauses=((400.0, 400.0 + flat_s),),
                            noise=0.03, cardiac=0.08, seed=17)
    b = find_breaths(flow, fs, role="flow")
    last_end = truth.end_s[truth.onset_s < 400.0][-1]
    assert not np.any((b.peak_s > last_end + 1.0) & (b.peak_s < 399.0 + flat_s))
    assert f1(truth.peak_s, b.peak_s) >= 0.99


def test_belt_amplitude_is_the_inspired_volume_also_next_to_apneas() -> None:
    # A volume trace's peak-to-trough excursion is the breath's tidal volume: the integral
    # of inspiratory flow, A * ti * 2 / pi for a half-sine (handbook calculus). Breaths
    # before and after an apnea must not be cut short.
    fs = 25.0
    pauses = ((200.0, 220.0), (400.0, 440.0))
    flow, truth = breathing(fs, 700, pauses=pauses, noise=0.0, seed=12)
    ti = 0.38 * (truth.end_s - truth.onset_s)
    peak_flow = truth.amplitude / (1 + ti * (2 / np.pi) / (ti / 0.38 * 0.45 * 27 / 48))
    tidal = peak_flow * ti * 2 / np.pi
    b = find_breaths(volume_of(flow, fs), fs, role="thorax")
    pairs = match_times(truth.peak_s, b.peak_s, 1.0)
    assert len(pairs) >= len(truth.peak_s) - 1
    ref = np.array([tidal[i] for i, _ in pairs])[1:-1]
    got = np.array([b.amplitude[j] for _, j in pairs])[1:-1]
    np.testing.assert_allclose(got, ref, rtol=0.05)


@pytest.mark.parametrize("drift", [-0.6, 0.6])
def test_belt_drifting_during_an_apnea(drift: float) -> None:
    # A belt trace that creeps (by 60 % of a tidal volume, either way) during 20-40 s
    # apneas: the breaths around the apnea must neither cover it nor grow by the creep.
    fs = 25.0
    pauses = ((200.0, 225.0), (400.0, 440.0), (600.0, 620.0))
    flow, truth = breathing(fs, 800, pauses=pauses, noise=0.0, seed=23)
    volume = volume_of(flow, fs)
    tidal = np.median(np.ptp(volume[: int(60 * fs)].reshape(-1, int(4 * fs)), axis=1))
    t = np.arange(len(volume)) / fs
    for start, stop in pauses:
        last = np.flatnonzero(truth.onset_s < start)[-1]
        a, b_ = truth.expiration_end_s[last], stop
        ramp = np.clip((t - a) / (b_ - a), 0, 1)
        volume += drift * tidal * ramp  # the creep stays after the apnea
    b = find_breaths(volume, fs, role="thorax")
    assert f1(truth.peak_s + 0.19 * (truth.end_s - truth.onset_s), b.peak_s) >= 0.99
    typical = np.median(b.amplitude)
    for start, stop in pauses:
        last = np.flatnonzero(truth.onset_s < start)[-1]
        grid = np.arange(truth.expiration_end_s[last] + 1.5, stop - 1.5, 0.5)
        assert np.all(amplitude_at(b, grid) == 0.0), start
        after = int(np.argmin(np.abs(b.onset_s - stop)))
        before = int(np.argmin(np.abs(b.peak_s - truth.peak_s[last] - 0.6)))
        for k in (before, after):
            assert b.amplitude[k] == pytest.approx(typical, rel=0.15), (start, k)


@pytest.mark.parametrize("factor", [0.3, 0.5, 0.7])
def test_hypopnea_breaths_are_found_at_their_reduced_size(factor: float) -> None:
    # AASM hypopnea band: amplitude at 30-70 % of baseline (standards.md §1.2).
    fs = 25.0
    spans = ((300.0, 330.0, factor), (600.0, 660.0, factor), (900.0, 1020.0, factor))
    flow, truth = breathing(fs, 1200, scale=spans, seed=9)
    b = find_breaths(flow, fs, role="flow")
    assert f1(truth.peak_s, b.peak_s) >= 0.99
    for start, stop, _ in spans:
        inside = (b.peak_s > start + 5) & (b.peak_s < stop - 5)
        before = (b.peak_s > start - 60) & (b.peak_s < start - 5)
        ratio = np.median(b.amplitude[inside]) / np.median(b.amplitude[before])
        assert ratio == pytest.approx(factor, abs=0.05)


def test_sighs_and_irregular_breathing() -> None:
    fs = 25.0
    sighs = tuple((t, t + 4.0, 3.0) for t in (100.0, 250.0, 251.0, 480.0))
    flow, truth = breathing(fs, 700, cv=0.3, scale=sighs, seed=13)
    b = find_breaths(flow, fs, role="flow")
    assert f1(truth.peak_s, b.peak_s) >= 0.98


def test_expiratory_shoulders_are_not_breaths_but_lone_small_breaths_are() -> None:
    # A bump in the end-expiratory pause of a belt trace (30 % of the tidal volume, about
    # 1 s wide: a cardiac or movement artefact) is not a breath; a lone breath at 35 % of
    # its neighbours is one (it takes a whole period).
    fs = 25.0
    lone = tuple((t, t + 3.0, 0.35) for t in (100.0, 200.0, 300.0, 400.0, 500.0))
    flow, truth = breathing(fs, 600, scale=lone, seed=19)
    volume = volume_of(flow, fs)
    tidal = np.median(np.ptp(volume[: int(60 * fs)].reshape(-1, int(4 * fs)), axis=1))
    t = np.arange(len(volume)) / fs
    small = np.flatnonzero(truth.amplitude < 0.5 * np.median(truth.amplitude))
    bumped = np.setdiff1d(np.arange(0, len(truth.onset_s), 3), small)
    in_pause = truth.onset_s + 0.9 * (truth.end_s - truth.onset_s)
    for centre in in_pause[bumped]:
        volume += 0.3 * tidal * np.exp(-0.5 * ((t - centre) / 0.25) ** 2)
    b = find_breaths(volume, fs, role="thorax")
    assert f1(truth.peak_s + 0.19 * (truth.end_s - truth.onset_s), b.peak_s) >= 0.99
    assert len(small) >= 3
    for i in small:
        k = int(np.argmin(np.abs(b.onset_s - truth.onset_s[i])))
        assert abs(b.onset_s[k] - truth.onset_s[i]) < 0.8
        neighbours = np.median(np.r_[b.amplitude[k - 3 : k], b.amplitude[k + 1 : k + 4]])
        assert b.amplitude[k] / neighbours == pytest.approx(0.35, abs=0.08)


def test_back_to_back_apneas_keep_noise_out() -> None:
    # Severe obstructive pattern: 30 s apneas separated by 4 recovery breaths, for 20 min.
    fs = 25.0
    pauses = tuple((120.0 + 45.0 * k, 150.0 + 45.0 * k) for k in range(26))
    flow, truth = breathing(fs, 1400, pauses=pauses, scale=((120.0, 1400.0, 1.6),),
                            noise=0.03, seed=21)
    b = find_breaths(flow, fs, role="flow")
    assert f1(truth.peak_s, b.peak_s) >= 0.98


def test_invalid_data_marks_breaths_invalid() -> None:
    fs = 25.0
    flow, truth = breathing(fs, 600, seed=3)
    valid = np.ones(len(flow), dtype=bool)
    valid[int(200 * fs):int(260 * fs)] = False
    flow[~valid] = np.nan
    b = find_breaths(flow, fs, valid=valid, role="flow")
    touching = (b.end_s >= 200) & (b.onset_s < 260)
    assert not b.valid[touching].any()
    assert b.valid[~touching].all()
    assert not np.any((b.peak_s > 201) & (b.peak_s < 259))
    outside = (truth.peak_s < 195) | (truth.peak_s > 265)
    assert f1(truth.peak_s[outside], b.peak_s[b.valid]) >= 0.99


def test_flat_or_short_signal_gives_no_breaths() -> None:
    assert len(find_breaths(np.zeros(5000), 25.0)) == 0
    assert len(find_breaths(np.ones(10), 25.0)) == 0
    with pytest.raises(ValueError, match="1-D"):
        find_breaths(np.zeros((3, 3)), 25.0)
    with pytest.raises(ValueError, match="mask"):
        find_breaths(np.zeros(100), 25.0, valid=np.ones(50, dtype=bool))


def test_breath_series_is_consistent() -> None:
    fs = 25.0
    flow, _ = breathing(fs, 300, pauses=((100.0, 130.0),), seed=1)
    b = find_breaths(flow, fs, role="flow", t0_s=1000.0)
    assert np.all(b.onset_s >= 1000.0)
    assert np.all(b.onset_s < b.peak_s) and np.all(b.peak_s < b.end_s)
    assert np.all(b.end_s[:-1] <= b.onset_s[1:] + 1e-9)
    assert np.all(b.amplitude >= 0)
    consecutive = np.isclose(b.end_s[:-1], b.onset_s[1:])
    assert consecutive.mean() > 0.9 and not consecutive.all()  # the apnea breaks the chain


def test_segment_reductions_match_a_plain_loop() -> None:
    from hsat.breaths._segments import segment_argmin, segment_last_at_most

    rng = np.random.default_rng(0)
    s = rng.standard_normal(2000).round(1)  # ties: the first minimum must win
    start = np.sort(rng.integers(0, 1900, 300))
    stop = start + rng.integers(0, 100, 300)
    expected = [a + int(np.argmin(s[a : b + 1])) for a, b in zip(start, stop, strict=True)]
    np.testing.assert_array_equal(segment_argmin(s, start, stop), expected)
    level = s[start] + 0.5
    last = [a + int(np.flatnonzero(s[a : b + 1] <= lv)[-1])
            for a, b, lv in zip(start, stop, level, strict=True)]
    np.testing.assert_array_equal(segment_last_at_most(s, start, stop, level), last)


# --- amplitude_at ------------------------------------------------------------------


def test_amplitude_at_is_a_step_function() -> None:
    s = BreathSeries(
        role="flow",
        onset_s=np.array([0.0, 4.0, 20.0]),
        peak_s=np.array([1.0, 5.0, 21.0]),
        end_s=np.array([4.0, 8.0, 24.0]),
        amplitude=np.array([1.0, 2.0, 0.5]),
        valid=np.array([True, True, True]),
    )
    t = np.array([-1.0, 0.0, 3.99, 4.0, 7.9, 8.0, 15.0, 20.0, 23.9, 24.0, 99.0])
    expected = np.array([0, 1, 1, 2, 2, 0, 0, 0.5, 0.5, 0, 0])
    np.testing.assert_array_equal(amplitude_at(s, t), expected)


# --- pre-event baseline (AASM 2007 wording, standards.md §1.3) ---------------------


def _series(peaks: list[float], amps: list[float], valid: list[bool] | None = None
            ) -> BreathSeries:
    p = np.array(peaks, dtype=float)
    return BreathSeries("flow", p - 1.0, p, p + 3.0, np.array(amps, dtype=float),
                        np.array(valid if valid is not None else [True] * len(p)))


def test_baseline_stable_breathing_is_the_mean() -> None:
    # Hand-worked: amplitudes 1.0, 1.1, 0.9, 1.0 in the 120 s before onset 200 s.
    # mean = 1.0; sample SD = sqrt((0 + .01 + .01 + 0) / 3) = 0.0816; CV = 0.082 <= 0.2,
    # so the breathing is stable and the baseline is the mean amplitude (AASM 2007).
    s = _series([90, 100, 150, 199.9], [1.0, 1.1, 0.9, 1.0])
    got = pre_event_baseline(s, np.array([200.0]), window_s=120, statistic="stable_mean",
                             largest_n=3, stable_cv=0.2, min_breaths=3)
    assert got[0] == pytest.approx(1.0)


def test_baseline_unstable_breathing_is_the_three_largest() -> None:
    # Hand-worked: amplitudes 1, 3, 0.5, 2, 1.5: mean 1.6, sample SD 0.962, CV 0.60 > 0.2,
    # so unstable: the mean of the 3 largest = (3 + 2 + 1.5) / 3 = 2.1667 (AASM 2007).
    s = _series([90, 100, 110, 120, 130], [1.0, 3.0, 0.5, 2.0, 1.5])
    kwargs = dict(window_s=120.0, largest_n=3, stable_cv=0.2, min_breaths=3)
    got = pre_event_baseline(s, np.array([140.0]), statistic="stable_mean", **kwargs)
    assert got[0] == pytest.approx(6.5 / 3)
    # 'largest' takes the 3 largest even for stable breathing: 1.1, 1.0, 1.0 of the
    # stable example -> 3.1 / 3
    stable = _series([90, 100, 150, 199.9], [1.0, 1.1, 0.9, 1.0])
    got = pre_event_baseline(stable, np.array([200.0]), statistic="largest", **kwargs)
    assert got[0] == pytest.approx(3.1 / 3)


def test_baseline_window_exclusions_and_minimum() -> None:
    # Window [onset - 120, onset): a breath peaking exactly 120 s before counts, one at the
    # onset does not; excluded and invalid breaths never count; too few breaths -> NaN.
    s = _series([80, 100, 150, 190, 200], [9.0, 1.0, 2.0, 3.0, 50.0],
                valid=[True, True, True, False, True])
    onsets = np.array([200.0, 200.0 + 1e-9, 60.0])
    kwargs = dict(window_s=120.0, statistic="largest", largest_n=3, stable_cv=0.2)
    got = pre_event_baseline(s, onsets, min_breaths=2, **kwargs)
    assert got[0] == pytest.approx((9 + 1 + 2) / 3)          # 80 in, 190 invalid, 200 out
    assert got[1] == pytest.approx((50 + 2 + 1) / 3)         # 200 in, 80 now out
    assert np.isnan(got[2])                                  # nothing before 60 s
    exclude = np.array([True, False, False, False, False])   # 80 s lies in an earlier event
    got = pre_event_baseline(s, onsets[:1], min_breaths=2, exclude=exclude, **kwargs)
    assert got[0] == pytest.approx(1.5)                      # fewer than 3: all of them
    got = pre_event_baseline(s, onsets[:1], min_breaths=3, exclude=exclude, **kwargs)
    assert np.isnan(got[0])


def test_baseline_on_detected_breaths_sees_a_hypopnea() -> None:
    # End to end: a 30 s span at 50 % amplitude reads about 0.5 of its pre-event baseline.
    fs = 25.0
    flow, _ = breathing(fs, 600, scale=((300.0, 330.0, 0.5),), seed=8)
    b = find_breaths(flow, fs, role="flow")
    base = pre_event_baseline(b, np.array([300.0]), window_s=120, statistic="stable_mean",
                              largest_n=3, stable_cv=0.25, min_breaths=5)
    during = amplitude_at(b, np.arange(305.0, 325.0, 0.5))
    assert np.median(during) / base[0] == pytest.approx(0.5, abs=0.05)


# --- the stage on a conditioned recording ------------------------------------------


def _conditioned(signals: dict[str, tuple[np.ndarray, float]]):  # type: ignore[no-untyped-def]
    from datetime import datetime

    from hsat.recording import Adequacy, Conditioned, Recording, Signal

    sig = {role: Signal(role=role, label=role, fs=fs, data=x) for role, (x, fs) in signals.items()}
    duration = max(len(x) / fs for x, fs in signals.values())
    rec = Recording(path="test.edf", start=datetime(2024, 1, 1, 22, 0), duration_s=duration,
                    signals=sig)
    return Conditioned(
        recording=rec, signals=sig, exclusions=(), wake=(), lights_off_s=0.0,
        lights_on_s=duration, mask_fs=1.0, analysis_mask=np.ones(int(duration), dtype=bool),
        monitoring_time_s=duration,
        adequacy=Adequacy(True, (), duration / 3600, duration / 3600, duration / 3600, 4.0),
    )


def test_detect_breaths_on_every_channel_and_the_belt_sum() -> None:
    flow, truth = breathing(32.0, 600, pauses=((300.0, 330.0),), seed=6)
    belt10 = volume_of(breathing(10.0, 600, pauses=((300.0, 330.0),), seed=6)[0], 10.0)
    belt25 = volume_of(breathing(25.0, 600, pauses=((300.0, 330.0),), seed=6)[0], 25.0)
    cond = _conditioned({
        "flow": (flow, 32.0),
        "thorax": (0.3 * belt10, 10.0),
        "abdomen": (-2.0 * belt25, 25.0),   # another rate, sign and gain
        "spo2": (np.full(600, 96.0), 1.0),
    })
    breaths = detect_breaths(cond)
    assert isinstance(breaths, Breaths)
    assert set(breaths.series) == {"flow", "thorax", "abdomen", "effort_sum"}
    assert breaths.get("thermal") is None
    for role in ("flow", "thorax", "abdomen", "effort_sum"):
        assert f1(truth.peak_s, breaths.get(role).peak_s, 1.0) >= 0.98, role  # type: ignore[union-attr]
    total = breaths.get("effort_sum")
    assert total is not None
    # in thorax units: the abdomen is brought to the thorax's size, so the sum doubles it
    ratio = np.median(total.amplitude) / np.median(breaths.series["thorax"].amplitude)
    assert ratio == pytest.approx(2.0, rel=0.05)
