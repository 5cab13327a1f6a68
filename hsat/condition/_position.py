"""Body position: the decoded position channel and the time spent upright.

The reader already turned the kit's codes into hsat's ``POSITION_CODES`` with the
channel profile. Here samples without a valid reading become ``unknown``, and the
seconds spent upright are found for the wake judgement (upright = awake: the AASM HSAT
rules allow judging wake from the body-position sensor, standards.md §1.6, from memory).
"""

from __future__ import annotations

import numpy as np

from hsat.condition._common import to_grid
from hsat.recording import POSITION_CODES, Signal

UNKNOWN = float(POSITION_CODES["unknown"])
UPRIGHT = float(POSITION_CODES["upright"])


def condition_position(sig: Signal, n_sec: int) -> tuple[Signal, np.ndarray]:
    """Position codes with invalid samples set to unknown, and per-second 'upright'."""
    codes = np.where(sig.mask & np.isfinite(sig.data), np.rint(sig.data), UNKNOWN)
    known = np.isin(codes, list(POSITION_CODES.values()))
    codes = np.where(known, codes, UNKNOWN)
    upright = to_grid(codes == UPRIGHT, sig.fs, n_sec) >= 0.5
    out = sig.replace(data=codes, valid=codes != UNKNOWN, unit="")
    return out, upright
