"""Effort belts (thorax, abdomen): band-limiting, flat-belt detection, movement bursts.

Band-limits: RIP effort 0.1-15 Hz (AASM technical specifications, standards.md §1.2,
from memory), zero-phase (``scipy.signal.sosfiltfilt``); the 0.1 Hz high-pass removes
baseline drift of the belt.

Flat belt (common practice; thresholds are hsat's own choice): the 10-s rolling standard
deviation stays below 5 % of the belt's own typical breathing level for >= 180 s. A
central apnea also stops belt motion, but lasts seconds to about a minute; a belt that
slipped or came unplugged stays flat for minutes. A weak belt is judged against its own
typical level, so a belt that is weak all night is not flat.

Movement burst (used for the wake judgement): body movement is broadband while RIP
breathing motion lies below about 1-2 Hz (common practice), so the 4-s rolling standard
deviation of the belt above 2 Hz rising over 8x its night-long median (the sensor's
noise floor) marks movement. Unlike an amplitude test, this does not fire on large
recovery breaths, sighs or a belt whose gain changed.
"""

from __future__ import annotations

import numpy as np

from hsat.condition._common import (
    band_limit,
    fill_invalid,
    finite_and,
    intervals,
    mask_of,
    rolling_std,
    runs,
    typical_level,
)
from hsat.condition._flow import NO_VALUE, ChannelResult
from hsat.recording import Interval, Signal

FLAT_BELT_FRACTION = 0.05
FLAT_BELT_MIN_S = 180
MOVEMENT_FACTOR = 8.0
MOVEMENT_WINDOW_S = 4
MOVEMENT_HIGHPASS_HZ = 2.0
BREATHING_FRACTION = 0.40
WINDOW_S = 10
FLAT_BELT = "flat belt"


def condition_belt(sig: Signal, *, gaps: list[Interval], n_sec: int) -> ChannelResult:
    """Condition one effort belt; see the module docstring."""
    fs = sig.fs
    valid0 = finite_and(sig.mask, sig.data)
    notes: list[str] = []
    if not valid0.any():
        notes.append(f"{sig.role} belt {sig.label!r} holds no valid data")
    x = fill_invalid(sig.data, valid0)
    clean = band_limit(x, fs, 0.1, 15.0, order=1)
    level = rolling_std(clean, valid0, fs, n_sec, WINDOW_S)
    typical = typical_level(level)
    gap_mask = mask_of(gaps, len(x), fs)
    exclusions = intervals(~valid0 & ~gap_mask, fs, NO_VALUE, sig.role)
    invalid = ~valid0
    if typical > 0:
        lead, tail = WINDOW_S // 2, WINDOW_S - WINDOW_S // 2 - 1
        lvl = np.where(np.isfinite(level), level, np.inf)
        for a, b in runs(lvl < FLAT_BELT_FRACTION * typical).tolist():
            start, end = max(a - lead, 0), min(b + tail, n_sec)
            if end - start >= FLAT_BELT_MIN_S:
                exclusions.append(Interval(float(start), float(end), FLAT_BELT, sig.role))
                invalid |= mask_of([(float(start), float(end))], len(x), fs)
    elif valid0.any():
        notes.append(f"{sig.role} belt {sig.label!r} is flat for the whole recording")
        exclusions.append(Interval(0.0, len(x) / fs, FLAT_BELT, sig.role))
        invalid[:] = True
    moving = _movement(x, valid0, fs, n_sec)
    if np.may_share_memory(clean, sig.data):
        clean = clean.copy()
    np.copyto(clean, np.nan, where=invalid)  # a new array of this function's: in place
    out = sig.replace(data=clean, valid=~invalid, prefilter="BP 0.1-15 Hz")
    return ChannelResult(out, sorted(exclusions, key=lambda i: i.start_s), level, typical, notes,
                         moving=moving)


def _movement(x: np.ndarray, valid: np.ndarray, fs: float, n_sec: int) -> np.ndarray:
    """Per second: broadband movement on the belt (see the module docstring).

    ``x`` is used up: the high-pass runs in its memory.
    """
    if 0.45 * fs <= MOVEMENT_HIGHPASS_HZ or not valid.any():
        return np.zeros(n_sec, dtype=bool)
    high = band_limit(x, fs, MOVEMENT_HIGHPASS_HZ, None, order=2, overwrite=True)
    level = rolling_std(high, valid, fs, n_sec, MOVEMENT_WINDOW_S)
    floor = np.nanmedian(level) if np.isfinite(level).any() else 0.0
    if not floor > 0:
        return np.zeros(n_sec, dtype=bool)
    return np.nan_to_num(level, nan=0.0) > MOVEMENT_FACTOR * floor


def belts_breathing(results: list[ChannelResult], n_sec: int) -> np.ndarray | None:
    """Per second: every available belt moves at >= 40 % of its typical level."""
    usable = [r for r in results if r.typical > 0]
    if not usable:
        return None
    ok = np.ones(n_sec, dtype=bool)
    for r in usable:
        ok &= np.nan_to_num(r.level[:n_sec], nan=0.0) >= BREATHING_FRACTION * r.typical
    return ok


def movement_seconds(results: list[ChannelResult], n_sec: int) -> np.ndarray:
    """Per second: a movement burst on any belt."""
    moving = np.zeros(n_sec, dtype=bool)
    for r in results:
        if r.moving is not None:
            moving |= r.moving[:n_sec]
    return moving
