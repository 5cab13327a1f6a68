"""The review's signal cache: the lanes of one night, read and conditioned once.

``build_lanes`` takes the reader's ``Recording`` and the conditioned ``Conditioned`` and
lays out the lanes the page draws (raw and linearised flow, thermal, belts, SpO2, pulse,
position, snore). Nothing is resampled: each lane keeps its channel's native rate, and
``window_payload`` slices and min/max-reduces the requested span on demand.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from hsat.recording import POSITION_CODES, POSITIONS, Conditioned, Recording, Signal
from hsat.review._decimate import (
    STRIP_STEP_S,
    strip_mean_min,
    strip_mode,
    window_envelope,
)

#: Lanes in page order: (key, caption, where the samples come from, role).
LANE_ORDER: tuple[tuple[str, str, str, str], ...] = (
    ("flow_raw", "Nasal pressure (as recorded)", "recording", "flow"),
    ("flow", "Nasal pressure (linearised)", "conditioned", "flow"),
    ("thermal", "Oronasal thermal", "conditioned", "thermal"),
    ("thorax", "Thorax belt", "conditioned", "thorax"),
    ("abdomen", "Abdomen belt", "conditioned", "abdomen"),
    ("spo2", "SpO2", "conditioned", "spo2"),
    ("pulse", "Pulse rate", "conditioned", "pulse"),
    ("position", "Body position", "conditioned", "position"),
    ("snore", "Snore", "conditioned", "snore"),
)


@dataclass(frozen=True, eq=False)
class Lane:
    """One drawable channel: samples (NaN in gaps), its rate, and its invalid spans."""

    key: str
    caption: str
    label: str
    unit: str
    fs: float
    t0_s: float
    data: np.ndarray
    valid: np.ndarray
    invalid_start_s: np.ndarray
    invalid_end_s: np.ndarray

    def describe(self) -> dict[str, Any]:
        return {"key": self.key, "caption": self.caption, "label": self.label,
                "unit": self.unit, "fs_hz": self.fs}


def _invalid_spans(sig: Signal) -> tuple[np.ndarray, np.ndarray]:
    """Start and end times of each run of invalid samples."""
    bad = ~np.asarray(sig.mask, dtype=bool)
    if not bad.any():
        empty = np.zeros(0)
        return empty, empty.copy()
    edges = np.diff(np.concatenate(([0], bad.view(np.int8), [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1)
    return sig.t0_s + starts / sig.fs, sig.t0_s + ends / sig.fs


def _lane(key: str, caption: str, sig: Signal) -> Lane:
    data = np.asarray(sig.data, dtype=np.float64)
    starts, ends = _invalid_spans(sig)
    valid = np.asarray(sig.mask, dtype=bool)
    return Lane(key, caption, sig.label, sig.unit, float(sig.fs), float(sig.t0_s), data,
                valid, starts, ends)


def build_lanes(recording: Recording, conditioned: Conditioned) -> dict[str, Lane]:
    """The lanes present in this night, in page order (absent channels are left out)."""
    lanes: dict[str, Lane] = {}
    sources: Mapping[str, Mapping[str, Signal]] = {
        "recording": recording.signals, "conditioned": conditioned.signals,
    }
    for key, caption, source, role in LANE_ORDER:
        sig = sources[source].get(role)
        if sig is None and source == "conditioned":
            sig = recording.signals.get(role) if role == "snore" else None
        if sig is not None and len(sig.data):
            lanes[key] = _lane(key, caption, sig)
    return lanes


def _json_floats(values: np.ndarray, decimals: int) -> list[float | None]:
    """Rounded floats with NaN as None (JSON has no NaN)."""
    rounded = np.round(np.asarray(values, dtype=np.float64), decimals).astype(object)
    rounded[~np.isfinite(np.asarray(values, dtype=np.float64))] = None
    return rounded.tolist()


def _decimals_for(lane: Lane) -> int:
    """Enough digits for the lane's scale: a 0.02 cmH2O wiggle must survive rounding."""
    finite = lane.data[np.isfinite(lane.data)]
    if finite.size == 0:
        return 3
    span = float(np.percentile(np.abs(finite[:: max(1, finite.size // 10_000)]), 99)) or 1.0
    return int(np.clip(4 - np.floor(np.log10(span)), 1, 8))


def window_payload(
    lanes: Mapping[str, Lane], t0_s: float, t1_s: float, columns: int,
    decimals: Mapping[str, int] | None = None,
) -> dict[str, Any]:
    """Every lane's samples in [t0_s, t1_s), reduced to at most ``columns`` columns.

    Returns a JSON-ready dict: ``{"t0_s", "t1_s", "lanes": {key: {"raw", "t", "lo",
    "hi", "invalid": [[start, end], ...]}}}``; ``lo``/``hi`` are omitted for raw lanes
    in favour of ``v`` (the samples).
    """
    out: dict[str, Any] = {}
    for key, lane in lanes.items():
        dec = (decimals or {}).get(key, 4)
        env = window_envelope(lane.data, lane.fs, lane.t0_s, t0_s, t1_s, columns)
        item: dict[str, Any] = {"raw": env.raw, "t": np.round(env.t_s, 3).tolist()}
        if env.raw:
            item["v"] = _json_floats(env.lo, dec)
        else:
            item["lo"] = _json_floats(env.lo, dec)
            item["hi"] = _json_floats(env.hi, dec)
        first = int(np.searchsorted(lane.invalid_end_s, t0_s, side="right"))
        last = int(np.searchsorted(lane.invalid_start_s, t1_s, side="left"))
        item["invalid"] = [
            [round(float(a), 2), round(float(b), 2)]
            for a, b in zip(lane.invalid_start_s[first:last], lane.invalid_end_s[first:last],
                            strict=True)
        ]
        out[key] = item
    return {"t0_s": t0_s, "t1_s": t1_s, "lanes": out}


def lane_decimals(lanes: Mapping[str, Lane]) -> dict[str, int]:
    """Digits to keep per lane when sending samples (computed once per night)."""
    return {key: _decimals_for(lane) for key, lane in lanes.items()}


def strip_payload(lanes: Mapping[str, Lane], night_s: float, conditioned: Conditioned,
                  step_s: float = STRIP_STEP_S) -> dict[str, Any]:
    """The night overview at one point per ``step_s`` (30 s).

    SpO2: mean and lowest value per step; pulse: mean per step; position: the position
    held longest in the step; ``analysed``: the fraction of the step inside monitoring
    time (``Conditioned.analysis_mask``).
    """
    strip: dict[str, Any] = {"step_s": step_s, "night_s": night_s}
    for key in ("spo2", "pulse"):
        lane = lanes.get(key)
        if lane is None:
            continue
        valid = np.where(lane.valid, lane.data, np.nan)  # the strip shows gaps as gaps
        t, mean, low = strip_mean_min(valid, lane.fs, lane.t0_s, night_s, step_s)
        strip["t"] = np.round(t, 1).tolist()
        strip[f"{key}_mean"] = _json_floats(mean, 1)
        if key == "spo2":
            strip["spo2_low"] = _json_floats(low, 1)
    pos = lanes.get("position")
    if pos is not None:
        mode = strip_mode(pos.data, pos.fs, pos.t0_s, night_s, len(POSITIONS), step_s)
        strip["position"] = mode.tolist()
    mask = conditioned.analysis_mask.astype(np.float64)
    mask_lane = strip_mean_min(mask, conditioned.mask_fs, 0.0, night_s, step_s)[1]
    strip["analysed"] = _json_floats(mask_lane, 2)
    strip["position_names"] = list(POSITIONS)
    strip["position_codes"] = dict(POSITION_CODES)
    return strip
