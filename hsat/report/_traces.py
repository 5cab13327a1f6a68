"""Compact overnight traces for the report's graphs, computed from a conditioned night.

A 10-hour night holds millions of samples; a printed lane is about 750 points wide. Each
trace is thinned by min/max decimation: per time bin the lowest and the highest valid
sample are kept, in the order they occurred, so no dip or spike disappears (about 2000
points per trace). Drawing 2000 points costs tens of milliseconds where 36 000 cost about
half a second in ReportLab.

The traces are a plain JSON-ready dict so that the study folder can keep them
(``report-context.json``) and a signed version can be rendered without the EDF::

    {"version": 1, "duration_s": ..., "input_sha256": ...,
     "spo2": {"t": [...], "v": [...]}, "pulse": {...}, "flow_amplitude": {...},
     "position": [{"start_s": ..., "end_s": ..., "position": "supine"}, ...]}

``v`` holds None where a bin had no valid sample (drawn as a gap, never bridged).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from hsat.recording import POSITIONS, Conditioned, Signal

TRACE_VERSION = 1
#: Bins per trace; two points (min, max) per bin.
BINS = 1000
#: Flow amplitude: peak-to-trough range of the flow in blocks of this length. Longer
#: than one breath (adult breaths last about 3-6 s, common practice) and shorter than
#: the 10 s minimum event (AASM), so every scored event holds at least one low block.
FLOW_BLOCK_S = 5.0
#: Position is sampled once per this many seconds before run-length encoding.
POSITION_STEP_S = 30.0


def minmax_decimate(
    data: np.ndarray, valid: np.ndarray, fs: float, t0_s: float = 0.0, bins: int = BINS
) -> tuple[np.ndarray, np.ndarray]:
    """Thin a series to the min and max of each of ``bins`` equal bins, in time order.

    Returns
    -------
    (t_s, values)
        At most ``2 * bins`` points; ``values`` is NaN for bins without a valid sample.
        A series shorter than ``2 * bins`` is returned as it is (invalid samples NaN).
    """
    x = np.where(valid, data, np.nan).astype(float)
    n = len(x)
    if n <= 2 * bins:
        return t0_s + np.arange(n) / fs, x
    per_bin = int(np.ceil(n / bins))
    padded = np.full(per_bin * bins, np.nan)
    padded[:n] = x
    block = padded.reshape(bins, per_bin)
    empty = np.all(np.isnan(block), axis=1)
    lo_idx = np.argmin(np.where(np.isnan(block), np.inf, block), axis=1)
    hi_idx = np.argmax(np.where(np.isnan(block), -np.inf, block), axis=1)
    first = np.minimum(lo_idx, hi_idx)
    second = np.maximum(lo_idx, hi_idx)
    rows = np.arange(bins)
    idx = np.stack([rows * per_bin + first, rows * per_bin + second], axis=1).ravel()
    values = padded[idx]
    values[np.repeat(empty, 2)] = np.nan
    keep = idx < n
    return t0_s + idx[keep] / fs, values[keep]


def flow_amplitude(flow: Signal, block_s: float = FLOW_BLOCK_S) -> tuple[np.ndarray, np.ndarray]:
    """Peak-to-trough flow range per block, as % of the night's median block range.

    The range is taken on whatever sign and gain the kit records, so inverted or
    uncalibrated flow gives the same curve. Blocks that are less than half valid are NaN.
    """
    per = max(1, int(round(block_s * flow.fs)))
    n_blocks = len(flow.data) // per
    if n_blocks == 0:
        return np.zeros(0), np.zeros(0)
    x = np.where(flow.mask, flow.data, np.nan)[: n_blocks * per].reshape(n_blocks, per)
    valid_share = np.mean(np.isfinite(x), axis=1)
    rng = np.fmax.reduce(x, axis=1) - np.fmin.reduce(x, axis=1)  # NaN-ignoring, no warning
    rng[valid_share < 0.5] = np.nan
    median = np.nanmedian(rng) if np.any(np.isfinite(rng)) else np.nan
    scaled = 100.0 * rng / median if np.isfinite(median) and median > 0 else rng * np.nan
    t = flow.t0_s + (np.arange(n_blocks) + 0.5) * per / flow.fs
    return t, scaled


def position_runs(position: Signal, step_s: float = POSITION_STEP_S) -> list[dict[str, Any]]:
    """Runs of one decoded body position (``POSITION_CODES``), sampled every ``step_s``."""
    step = max(1, int(round(step_s * position.fs)))
    codes = np.where(position.mask, position.data, POSITIONS.index("unknown"))[::step]
    codes = np.clip(np.nan_to_num(codes, nan=POSITIONS.index("unknown")), 0,
                    len(POSITIONS) - 1).astype(int)
    if len(codes) == 0:
        return []
    change = np.flatnonzero(np.diff(codes)) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [len(codes)]])
    t0 = position.t0_s
    end_of_signal = t0 + position.duration_s
    return [
        {
            "start_s": round(float(t0 + s * step / position.fs), 1),
            "end_s": round(float(min(t0 + e * step / position.fs, end_of_signal)), 1),
            "position": POSITIONS[codes[s]],
        }
        for s, e in zip(starts, ends, strict=True)
    ]


def _pack(t: np.ndarray, v: np.ndarray, decimals: int) -> dict[str, list[float | None]]:
    t_list = np.round(t, 1).tolist()
    v_round = np.round(v, decimals)
    v_list: list[float | None] = [
        None if not np.isfinite(x) else float(x) for x in v_round.tolist()
    ]
    return {"t": t_list, "v": v_list}


def _decimated(sig: Signal | None, decimals: int) -> dict[str, list[float | None]] | None:
    if sig is None or len(sig.data) == 0:
        return None
    t, v = minmax_decimate(sig.data, sig.mask, sig.fs, sig.t0_s)
    return _pack(t, v, decimals)


def overnight_traces(cond: Conditioned) -> dict[str, Any]:
    """The decimated SpO2, pulse, flow amplitude and position runs of a conditioned night."""
    sigs = cond.signals
    flow = sigs.get("flow")
    amplitude = None
    if flow is not None:
        t, a = flow_amplitude(flow)
        if len(t):
            valid = np.isfinite(a)
            td, ad = minmax_decimate(a, valid, 1.0 / FLOW_BLOCK_S, float(t[0]))
            amplitude = _pack(td, ad, 1)
    position = sigs.get("position")
    return {
        "version": TRACE_VERSION,
        "duration_s": float(cond.recording.duration_s),
        "input_sha256": cond.recording.sha256,
        "spo2": _decimated(sigs.get("spo2"), 1),
        "pulse": _decimated(sigs.get("pulse"), 0),
        "flow_amplitude": amplitude,
        "position": position_runs(position) if position is not None else None,
    }


def as_arrays(trace: dict[str, list[float | None]] | None) -> tuple[np.ndarray, np.ndarray]:
    """A packed trace back as float arrays (None -> NaN)."""
    if not trace:
        return np.zeros(0), np.zeros(0)
    t = np.asarray(trace["t"], dtype=float)
    v = np.asarray([np.nan if x is None else x for x in trace["v"]], dtype=float)
    return t, v
