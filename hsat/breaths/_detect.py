"""Breath-by-breath detection on one respiratory channel.

The method (hsat's own design, built on scipy; every constant is below, with its reason):

1. Invalid samples are bridged by linear interpolation, so filters do not ring; breaths
   touching them are marked invalid afterwards.
2. The signal is thinned to about ``WORK_RATE_HZ`` by block means, then a zero-phase
   4th-order Butterworth low-pass at ``LOWPASS_HZ`` removes snore and other
   high-frequency content (adult breathing lies below ~1 Hz, common practice);
   amplitudes are measured on it. Breaths are found on a second low-pass at
   ``DETECT_LOWPASS_HZ``.
3. The polarity of inspiration is decided from the data (``_polarity.py``) unless the
   caller knows it, so kits that record inspiration downward give the same breaths.
4. A local amplitude scale is the ``SCALE_PERCENTILE`` percentile, over a
   ``SCALE_WINDOW_S`` window *of time*, of the running peak-to-trough envelope. Being a
   percentile over time, it is not lowered by an apnea (or any flat stretch) shorter than
   a fifth of the window, so noise inside an apnea does not become breaths; a floor tied
   to the whole record's scale covers longer flat stretches.
5. Inspiratory extremes are ``scipy.signal.find_peaks`` peaks whose prominence is at least
   ``PROMINENCE_FRACTION`` of the local scale: breaths at 30 % of the surrounding
   amplitude (hypopneas) are kept, residual wiggles inside an apnea are not. Minor bumps
   between two larger breaths (expiratory shoulders, cardiac oscillations) are dropped
   (``_drop_minor_between``).
6. Onset: for flow, the last upward crossing of the zero-flow level before the peak; for
   volume-like signals, the start of the inspiratory rise. End: the next onset, or the
   end of expiration when a long pause (an apnea) follows.
7. Amplitude is the peak-to-trough excursion of the breath (max - min of the filtered
   signal over the breath): the AASM "peak signal excursion" (standards.md §1.2),
   independent of polarity.

On BIDMC (tests/test_breaths_bidmc.py) this reaches the F1 of a second human annotator;
neurokit2's rsp_clean + rsp_peaks is as fast but less accurate there and assumes upward
inspiration, so hsat does not use it at run time (bench/bench_breaths.py).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage, signal

from hsat.breaths._polarity import inspiration_polarity
from hsat.breaths._segments import block_means, segment_argmin, segment_last_at_most
from hsat.breaths._series import BreathSeries, empty_series
from hsat.condition._common import fill_invalid, runs, zero_phase

#: Low-pass corner (Hz) of the signal amplitudes are measured on: breathing fundamentals
#: stay below ~1 Hz in adults (common practice), snore energy lies far above.
LOWPASS_HZ = 2.0
#: Low-pass corner (Hz) of the signal breaths are found on (cardiac oscillations and
#: expiratory shoulders smoothed away; tuned on BIDMC, tests/test_breaths_bidmc.py).
DETECT_LOWPASS_HZ = 1.0
#: Rate (Hz) the filtered signal is thinned to for detection (speed; timing error <= 20 ms).
WORK_RATE_HZ = 25.0
#: Window (s) of the running peak-to-trough envelope: longer than one slow breath.
ENVELOPE_S = 8.0
#: Window (s) and percentile of the local amplitude scale: a flat stretch shorter than
#: (100 - percentile) % of the window (192 s; the rule sets cap events at 180 s) cannot
#: lower it.
SCALE_WINDOW_S = 240.0
SCALE_PERCENTILE = 80.0
#: Minimum prominence of a breath as a fraction of the local scale.
PROMINENCE_FRACTION = 0.15
#: The local scale never drops below this fraction of the record's median scale.
SCALE_FLOOR_FRACTION = 0.3
#: A peak less prominent than NEIGHBOUR_FRACTION of both its neighbours, and closer to one
#: of them than SPLIT_FRACTION of the local period, is not a breath; below MINOR_FRACTION
#: it is not a breath whatever its timing (see _drop_minor_between).
NEIGHBOUR_FRACTION = 0.4
SPLIT_FRACTION = 0.6
MINOR_FRACTION = 0.2
#: Shortest breath period accepted (s): 60 breaths/min.
MIN_PERIOD_S = 1.0
#: Window (s) over which a peak's prominence is measured.
PROMINENCE_WINDOW_S = 20.0
#: A breath followed by a pause longer than this (s), or than GAP_FACTOR x the local median
#: period, ends at the end of its expiration instead of at the next onset.
GAP_ABSOLUTE_S = 10.0
GAP_FACTOR = 2.0
#: Volume-like onset: the last crossing, before the peak, of this fraction of the rise from
#: the preceding trough (the start of the inspiratory rise, also after a flat apnea).
#: Flow onset: the last crossing of the zero-flow level, a running median over
#: ZERO_FLOW_WINDOW_S seconds.
ONSET_VOLUME_FRACTION = 0.1
ZERO_FLOW_WINDOW_S = 30.0
#: Fraction of the expiratory excursion still left when expiration is taken as ended.
EXPIRATION_END_FRACTION = 0.1
#: Expiration before a pause ends at most this many local breath periods after the peak
#: (adult expiration takes about 60 % of a breath, common practice), so a slowly drifting
#: trace does not stretch the last breath over an apnea.
EXPIRATION_MAX_PERIODS = 1.0
#: The onset and the preceding trough are looked for at most this far before the peak
#: (s): longer than any adult inspiration plus the previous expiration's end.
ONSET_SEARCH_S = 6.0
#: A volume-like breath's excursion starts from the lowest point this long (s) before its
#: onset: the end-expiratory trough, not a lower point a drifting trace passed earlier.
TROUGH_SEARCH_S = 1.0

#: Roles whose signal is flow-like (inspiration is one lobe, expiration the other; an
#: oronasal thermal sensor is read as a qualitative airflow signal, AASM);
#: all others are volume-like (inspiration is the rise, expiration the fall).
FLOW_ROLES = frozenset({"flow", "thermal"})


def find_breaths(
    x: np.ndarray,
    fs: float,
    *,
    valid: np.ndarray | None = None,
    role: str = "flow",
    t0_s: float = 0.0,
    polarity: int | None = None,
) -> BreathSeries:
    """Find every breath in one respiratory signal.

    Parameters
    ----------
    x : samples in physical units (any gain, either polarity).
    fs : sample rate in Hz (10 to 200 Hz tested).
    valid : boolean mask of usable samples; non-finite samples are invalid too.
    role : channel role; 'flow' and 'thermal' are read as airflow signals, 'thorax',
        'abdomen' and 'effort_sum' as volume-like (belt) signals.
    t0_s : time of sample 0 on the recording axis.
    polarity : +1 when inspiration is known to be upward in ``x``, -1 when downward (e.g.
        from a channel profile); None (the default) decides it from the data.

    Returns
    -------
    BreathSeries
        One entry per breath, in time order. For a flow signal the onset is the last
        upward crossing of the zero-flow level before the inspiratory peak; for a
        volume-like signal it is the start of the inspiratory rise (10 % of the way up
        from the end-expiratory trough) and the peak is end-inspiration. See the module
        docstring for the method.
    """
    data = np.asarray(x, dtype=float)
    if data.ndim != 1:
        raise ValueError(f"find_breaths: expected a 1-D signal, got shape {data.shape}")
    if fs <= 0:
        raise ValueError(f"find_breaths: sample rate must be > 0, got {fs}")
    mask = np.isfinite(data)
    if valid is not None:
        if len(valid) != len(data):
            raise ValueError(
                f"find_breaths: validity mask has {len(valid)} samples, signal has {len(data)}"
            )
        mask &= np.asarray(valid, dtype=bool)
    if np.count_nonzero(mask) < max(4, int(4 * fs)):
        return empty_series(role)

    step = max(1, int(fs // WORK_RATE_HZ))
    fw = fs / step
    thinned = _thin(_bridge_invalid(data, mask), step)
    smooth = _lowpass(thinned, fw, LOWPASS_HZ, overwrite=thinned is not data)
    work_mask = mask[::step]
    flow_like = role in FLOW_ROLES

    if polarity is None:
        polarity = inspiration_polarity(smooth, fw, work_mask, flow_like=flow_like)
    elif polarity not in (1, -1):
        raise ValueError(f"find_breaths: polarity must be +1, -1 or None, got {polarity}")
    s = smooth if polarity == 1 else -smooth
    detect = _lowpass(s, fw, DETECT_LOWPASS_HZ)
    scale = _local_scale(detect, fw, work_mask)
    peaks = _inspiratory_peaks(detect, fw, scale, work_mask)
    if len(peaks) == 0:
        return empty_series(role, polarity)
    onset, end, span_start = _delimit(detect, fw, peaks, flow_like)
    amplitude = _excursion(s, onset, end, span_start)

    onset_orig = onset * step
    end_orig = np.minimum(end * step, len(data) - 1)
    breath_valid = _clear_of(runs(~mask), onset_orig, end_orig)
    return BreathSeries(
        role=role,
        onset_s=t0_s + onset_orig / fs,
        peak_s=t0_s + peaks * step / fs,
        end_s=t0_s + end_orig / fs,
        amplitude=amplitude,
        valid=breath_valid,
        polarity=polarity,
    )


def _bridge_invalid(data: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Replace invalid samples by a straight line between their valid neighbours."""
    if mask.all():
        return data
    return fill_invalid(data, mask)


def _thin(data: np.ndarray, step: int) -> np.ndarray:
    """Means of ``step`` samples centred on samples 0, step, 2 * step, ... (half a
    sample late for an even step; the ends are held).

    Thinning before the low-pass instead of after it saves filtering every sample; the
    block mean is the anti-alias filter (zeros at multiples of the work rate) and the
    low-pass that follows removes what is left above LOWPASS_HZ.
    """
    if step == 1:
        return data
    lead = (step - 1) // 2  # block i covers samples i * step - lead ... + step - 1
    n, n_out = len(data), -(-len(data) // step)
    first = 1 if lead else 0  # blocks first .. last - 1 lie wholly inside the data
    last = n_out if n_out * step - lead <= n else n_out - 1
    parts = []
    if first:  # the first block holds the first sample over the samples before 0
        parts.append(block_means(np.concatenate((np.full(lead, data[0]),
                                                 data[: step - lead])), step))
    parts.append(block_means(data[first * step - lead : last * step - lead], step))
    if last < n_out:  # ... and the last one the last sample past the end
        rest = data[last * step - lead :]
        parts.append(block_means(np.concatenate((rest, np.full(step - len(rest), data[-1]))),
                                 step))
    return np.concatenate(parts)


def _clear_of(invalid_runs: np.ndarray, first: np.ndarray, last: np.ndarray) -> np.ndarray:
    """True where the inclusive sample span [first_i, last_i] meets no invalid run.

    ``invalid_runs`` holds the sorted, disjoint half-open runs (start, end) of invalid
    samples; the first run ending after ``first_i`` must start after ``last_i``.
    """
    if len(invalid_runs) == 0:
        return np.ones(len(first), dtype=bool)
    j = np.searchsorted(invalid_runs[:, 1], first, side="right")
    next_start = np.append(invalid_runs[:, 0], np.iinfo(np.int64).max)[j]
    return next_start > last


def _lowpass(data: np.ndarray, fs: float, corner: float, *, overwrite: bool = False) -> np.ndarray:
    """Zero-phase 4th-order Butterworth low-pass at ``corner`` Hz (skipped at low rates).

    With ``overwrite`` the filter may run in ``data``'s own memory.
    """
    if corner >= 0.45 * fs:
        return data
    sos = signal.butter(4, corner, btype="lowpass", fs=fs, output="sos")
    if len(data) <= 3 * (2 * len(sos) + 1):
        return data
    return zero_phase(sos, data, overwrite=overwrite)


def _local_scale(s: np.ndarray, fw: float, mask: np.ndarray) -> np.ndarray:
    """Local breath amplitude scale per sample (see the module docstring, step 4)."""
    width = max(3, int(round(ENVELOPE_S * fw)))
    envelope = ndimage.maximum_filter1d(s, width) - ndimage.minimum_filter1d(s, width)
    block = max(1, int(round(fw)))  # one value per second
    coarse = envelope[::block].copy()
    coarse_valid = mask[::block]
    typical = float(np.median(coarse[coarse_valid])) if coarse_valid.any() else 0.0
    coarse[~coarse_valid] = typical
    size = max(3, int(round(SCALE_WINDOW_S * fw / block)) | 1)
    coarse = ndimage.percentile_filter(coarse, SCALE_PERCENTILE, size=size, mode="nearest")
    floor = SCALE_FLOOR_FRACTION * float(np.median(coarse[coarse_valid])) if typical else 0.0
    coarse = np.maximum(coarse, floor)
    return np.repeat(coarse, block)[: len(s)]


def _inspiratory_peaks(
    s: np.ndarray, fw: float, scale: np.ndarray, mask: np.ndarray
) -> np.ndarray:
    """Indices of inspiratory extremes prominent against the local scale."""
    wlen = max(3, int(round(PROMINENCE_WINDOW_S * fw)) | 1)
    required = np.maximum(PROMINENCE_FRACTION * scale, np.finfo(float).tiny)
    peaks, props = signal.find_peaks(
        s, prominence=required, distance=max(1, int(MIN_PERIOD_S * fw)), wlen=wlen
    )
    keep = mask[peaks]
    peaks, prominence = peaks[keep], props["prominences"][keep]
    return peaks[_drop_minor_between(peaks, prominence)]


def _drop_minor_between(peaks: np.ndarray, prominence: np.ndarray) -> np.ndarray:
    """Mask of peaks kept after dropping minor bumps sitting between two larger breaths.

    A peak is minor when its prominence is below ``NEIGHBOUR_FRACTION`` of the smaller of
    its two neighbours'. A minor peak is dropped when it also splits a breath period (it
    lies closer than ``SPLIT_FRACTION`` of the local median period to a neighbour: a
    shoulder on expiration, a cardiac oscillation in the pause), or when it is below
    ``MINOR_FRACTION`` of both neighbours whatever its timing. A breath of a hypopnea has a
    reduced neighbour on at least one side, and a lone small breath keeps a whole period.
    """
    keep = np.ones(len(prominence), dtype=bool)
    for _ in range(4):
        idx = np.flatnonzero(keep)
        if len(idx) < 3:
            break
        prom = prominence[idx]
        ratio = prom[1:-1] / np.minimum(prom[:-2], prom[2:])
        gaps = np.diff(peaks[idx]).astype(float)
        local = ndimage.median_filter(gaps, size=9, mode="nearest")
        split = np.minimum(gaps[:-1], gaps[1:]) < SPLIT_FRACTION * local[1:]
        minor = np.zeros(len(idx), dtype=bool)
        minor[1:-1] = (ratio < MINOR_FRACTION) | ((ratio < NEIGHBOUR_FRACTION) & split)
        if not minor.any():
            break
        keep[idx[minor]] = False
    return keep


def _delimit(
    s: np.ndarray, fw: float, peaks: np.ndarray, flow_like: bool
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Onset, end and trough (work-rate indices) of the breath around each peak.

    The trough is the end-expiratory trough before a volume-like breath's onset (it
    counts towards the breath's excursion); for a flow breath it is the onset itself.
    """
    n = len(s)
    look_back = int(round(PROMINENCE_WINDOW_S * fw))
    zero = _zero_flow_level(s, fw) if flow_like else None
    search = int(round(ONSET_SEARCH_S * fw))
    previous = np.concatenate(([0], peaks[:-1]))
    lo = np.maximum(previous, peaks - search)
    trough = segment_argmin(s, lo, peaks)
    span = s[peaks] - s[trough]
    if zero is None:
        level = s[trough] + ONSET_VOLUME_FRACTION * span
    else:
        level = np.clip(zero[peaks], s[trough] + 0.05 * span, s[trough] + 0.6 * span)
    onset = segment_last_at_most(s, trough, peaks, level)
    if zero is None:  # the trough just before the rise (not a drifted low far back)
        near = np.maximum(lo, onset - max(1, int(round(TROUGH_SEARCH_S * fw))))
        span_start = segment_argmin(s, near, onset)
    else:
        span_start = onset

    period = np.diff(onset) / fw
    local = ndimage.median_filter(period, size=9, mode="nearest") if len(period) else period
    long_gap = period > np.minimum(GAP_ABSOLUTE_S, GAP_FACTOR * local)
    typical = float(np.median(period)) if len(period) else look_back / fw
    end = np.empty(len(peaks), dtype=np.int64)
    end[:-1] = onset[1:]
    for i in np.flatnonzero(np.append(long_gap, True)):
        p = peaks[i]
        longest = EXPIRATION_MAX_PERIODS * (local[i] if i < len(local) else typical)
        hi = min(onset[i + 1] if i + 1 < len(peaks) else n - 1, p + int(longest * fw))
        if zero is None:
            end[i] = _expiration_end(s, p, hi, None, float(s[span_start[i]]))
        else:
            end[i] = _expiration_end(s, p, hi, float(zero[p]), None)
    return onset, end, span_start


def _zero_flow_level(s: np.ndarray, fw: float) -> np.ndarray:
    """Running median of a flow signal: its zero-flow level (pauses and apneas sit there)."""
    block = max(1, int(round(fw / 4)))
    coarse = s[::block]
    size = max(3, int(round(ZERO_FLOW_WINDOW_S * fw / block)) | 1)
    level = ndimage.median_filter(coarse, size=size, mode="nearest")
    return np.repeat(level, block)[: len(s)]


def _expiration_end(
    s: np.ndarray, peak: int, hi: int, zero: float | None, start_level: float | None
) -> int:
    """Index where the expiration after ``peak`` has (nearly) finished, at most ``hi``.

    Flow: back to the zero-flow level ``zero``. Volume: back down to the level the breath
    started from (``start_level``), or to the lowest level reached if that is higher (a
    trace drifting up during the pause).
    """
    if hi <= peak + 1:
        return hi
    seg = s[peak : hi + 1]
    extreme = int(np.argmin(seg))
    if zero is not None:
        # expiratory flow has returned (nearly) to the zero-flow level
        zero = min(zero, float(seg[0]))
        target = zero - EXPIRATION_END_FRACTION * (zero - seg[extreme])
        after = np.flatnonzero(seg[extreme:] >= target)
        return peak + extreme + (int(after[0]) if len(after) else len(seg) - 1 - extreme)
    # volume has fallen (nearly) to its end-expiratory level
    bottom = max(float(seg[extreme]), start_level if start_level is not None else -np.inf)
    target = bottom + EXPIRATION_END_FRACTION * (seg[0] - bottom)
    reached = np.flatnonzero(seg <= target)
    return peak + int(reached[0]) if len(reached) else hi


def _excursion(
    s: np.ndarray, onset: np.ndarray, end: np.ndarray, trough: np.ndarray
) -> np.ndarray:
    """Peak-to-trough excursion of ``s`` over each [onset, end], with the sample at
    ``trough`` (the preceding end-expiratory trough of a volume-like breath) included."""
    # breaths follow one another (onset_i < end_i <= onset_i+1), so [onset_i, end_i) are
    # reduceat segments; the end sample and the trough sample are added separately
    bounds = np.column_stack((onset, end)).ravel()
    high = np.maximum(np.maximum.reduceat(s, bounds)[::2], s[end])
    low = np.minimum(np.minimum.reduceat(s, bounds)[::2], np.minimum(s[end], s[trough]))
    return high - low
