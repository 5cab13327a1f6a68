"""Breaths and their amplitude; the pre-event baseline (pipeline stage 3).

``detect_breaths(cond)`` finds the breaths of every respiratory channel of a conditioned
recording; ``find_breaths`` does it for one array. ``amplitude_at`` turns a breath series
into a step function of time and ``pre_event_baseline`` gives the AASM pre-event baseline
for candidate event onsets.
"""

from hsat.breaths._agreement import (
    BIDMC_FS,
    Agreement,
    BidmcRecord,
    agreement,
    match_times,
    read_bidmc,
)
from hsat.breaths._baseline import STATISTICS, pre_event_baseline
from hsat.breaths._detect import find_breaths
from hsat.breaths._segments import block_means
from hsat.breaths._series import (
    BREATH_ROLES,
    Breaths,
    BreathSeries,
    amplitude_at,
    empty_series,
)
from hsat.breaths._stage import CHANNEL_ROLES, belt_sum, detect_breaths

__all__ = [
    "BIDMC_FS", "Agreement", "BidmcRecord", "agreement", "match_times", "read_bidmc",
    "BREATH_ROLES", "CHANNEL_ROLES", "STATISTICS", "Breaths", "BreathSeries", "amplitude_at",
    "belt_sum", "block_means", "detect_breaths", "empty_series", "find_breaths",
    "pre_event_baseline",
]
