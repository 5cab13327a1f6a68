"""Oximetry: SpO2 and pulse-rate artefact rules, short-gap bridging.

Artefact conventions for SpO2 (standards.md §2 "Artifact conventions", common practice,
from memory; none is an AASM rule):

* **probe off**: no reading (the kit's probe-off code, or the EDF digital minimum);
* **out of range**: below the physiological floor of 50 % or above 100 %;
* **implausible jump**: a change of more than 4 points within 1 s; the artefact lasts
  from the jump until the trace comes back within 2 points of the level before it
  (at most 60 s; if it never comes back, the new level is taken as real and only the
  jump second is dropped).

Pulse rate: below 25 or above 250 bpm, or probe off (standards.md §2, common practice).

Short gaps of at most 10 s between valid samples are bridged by linear interpolation
(common practice: an oximeter's own averaging spans several seconds, standards.md §1.2);
longer ones stay excluded. EDF+D gaps are never bridged.
"""

from __future__ import annotations

import numpy as np

from hsat.condition._common import intervals, mask_of, runs, to_grid
from hsat.condition._flow import ChannelResult
from hsat.errors import ChannelError
from hsat.recording import Interval, Signal

SPO2_FLOOR = 50.0
SPO2_CEILING = 100.0
MAX_JUMP_PER_S = 4.0
RETURN_WITHIN = 2.0
MAX_ARTEFACT_S = 60.0
BRIDGE_MAX_S = 10.0
PULSE_FLOOR = 25.0
PULSE_CEILING = 250.0

PROBE_OFF = "probe off"
OUT_OF_RANGE = "out of range"
JUMP = "implausible jump"
_REASONS = {1: PROBE_OFF, 2: OUT_OF_RANGE, 3: JUMP}


def _jump_artefacts(x: np.ndarray, ok: np.ndarray, fs: float) -> np.ndarray:
    """Samples inside implausible-jump artefacts (see the module docstring)."""
    out = np.zeros(len(x), dtype=bool)
    v = np.flatnonzero(ok)
    k = max(int(round(fs)), 1)
    if len(v) <= k:
        return out
    dt = (v[k:] - v[:-k]) / fs
    step = x[v[k:]] - x[v[:-k]]
    flagged = np.flatnonzero((np.abs(step) > MAX_JUMP_PER_S) & (dt <= 1.5))
    until = -1
    for j in flagged.tolist():
        before, after = v[j], v[j + k]
        if after <= until:
            continue
        ref = x[before]
        horizon = min(len(x), after + int(MAX_ARTEFACT_S * fs))
        seg_idx = np.arange(after, horizon)
        back = seg_idx[ok[after:horizon] & (np.abs(x[after:horizon] - ref) <= RETURN_WITHIN)]
        end = int(back[0]) if back.size else min(before + k + 1, len(x))
        out[before + 1 : end] = True
        until = end
    return out


def _bridge(
    x: np.ndarray, bad: np.ndarray, gap_mask: np.ndarray, fs: float
) -> tuple[np.ndarray, np.ndarray]:
    """Interpolate invalid runs of <= 10 s that have valid samples on both sides."""
    out = x.copy()
    fixed = np.zeros(len(x), dtype=bool)
    limit = int(BRIDGE_MAX_S * fs)
    for a, b in runs(bad).tolist():
        if a == 0 or b >= len(x) or b - a > limit or gap_mask[a:b].any():
            continue
        out[a:b] = np.interp(np.arange(a, b), [a - 1, b], [x[a - 1], x[b]])
        fixed[a:b] = True
    return np.where(fixed, out, x), fixed


def _finish(
    sig: Signal, x: np.ndarray, code: np.ndarray, gap_mask: np.ndarray, role: str
) -> tuple[Signal, list[Interval], np.ndarray]:
    bad = code > 0
    data, bridged = _bridge(np.where(bad, np.nan, x), bad, gap_mask, sig.fs)
    still = bad & ~bridged
    exclusions: list[Interval] = []
    for value, reason in _REASONS.items():
        exclusions += intervals(still & (code == value) & ~gap_mask, sig.fs, reason, role)
    out = sig.replace(data=np.where(still, np.nan, data), valid=~still)
    return out, sorted(exclusions, key=lambda i: i.start_s), still


def condition_spo2(
    sig: Signal, *, gaps: list[Interval], n_sec: int, path: str
) -> tuple[ChannelResult, np.ndarray]:
    """Clean SpO2; return the result and its per-second mean (NaN where invalid).

    Raises
    ------
    ChannelError
        No reading at all, or no value within 50-100 %.
    """
    x = np.asarray(sig.data, dtype=float)
    gap_mask = mask_of(gaps, len(x), sig.fs)
    code = np.zeros(len(x), dtype=np.int8)
    reading = sig.mask & np.isfinite(x)
    code[~reading] = 1
    in_range = (x >= SPO2_FLOOR) & (x <= SPO2_CEILING + 1e-6)
    code[reading & ~in_range] = 2
    if not reading.any():
        raise ChannelError(
            path, f"SpO2 channel {sig.label!r} holds no reading (probe off throughout)"
        )
    if not (reading & in_range).any():
        lo, hi = np.nanmin(x[reading]), np.nanmax(x[reading])
        raise ChannelError(
            path,
            (
                f"SpO2 channel {sig.label!r} holds no value within 50-100 % (values "
                f"{lo:g} to {hi:g} {sig.unit or '(no unit)'}): wrong unit or profile?"
            ),
        )
    jump = _jump_artefacts(x, code == 0, sig.fs)
    code[jump & (code == 0)] = 3
    out, exclusions, still = _finish(sig, x, code, gap_mask, sig.role)
    share = to_grid(~still, sig.fs, n_sec)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = to_grid(np.where(still, 0.0, out.data), sig.fs, n_sec) / share
    grid = np.where(share >= 0.5, mean, np.nan)
    level = np.zeros(n_sec)
    return ChannelResult(out, exclusions, level, 0.0), grid


def condition_pulse(sig: Signal, *, gaps: list[Interval], n_sec: int) -> ChannelResult:
    """Clean the pulse rate (see the module docstring)."""
    x = np.asarray(sig.data, dtype=float)
    gap_mask = mask_of(gaps, len(x), sig.fs)
    code = np.zeros(len(x), dtype=np.int8)
    reading = sig.mask & np.isfinite(x)
    code[~reading] = 1
    code[reading & ((x < PULSE_FLOOR) | (x > PULSE_CEILING))] = 2
    out, exclusions, _ = _finish(sig, x, code, gap_mask, sig.role)
    notes = [] if out.mask.any() else [f"pulse channel {sig.label!r} holds no valid value"]
    return ChannelResult(out, exclusions, np.zeros(n_sec), 0.0, notes)
