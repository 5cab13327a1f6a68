"""The breath stage: breaths of every respiratory channel of a conditioned recording."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np

from hsat.breaths._detect import find_breaths
from hsat.breaths._series import Breaths, BreathSeries
from hsat.recording import Conditioned, Signal

#: Channels breaths are found on, in this order.
CHANNEL_ROLES: tuple[str, ...] = ("flow", "thermal", "thorax", "abdomen")
#: Threads the channels are shared out to (the machine this runs on has two cores).
BREATH_WORKERS = 2


def detect_breaths(cond: Conditioned) -> Breaths:
    """Find the breaths of each respiratory channel and of the belt sum.

    Parameters
    ----------
    cond : the conditioned recording; ``cond.signals`` may hold any of 'flow', 'thermal',
        'thorax' and 'abdomen'.

    Returns
    -------
    Breaths
        One series per available channel, plus 'effort_sum' when both belts exist: the
        thorax plus the abdomen, the abdomen brought to the thorax's sign and typical
        breath excursion first (an uncalibrated RIP sum; the AASM names RIPsum as an
        alternative sensor, standards.md §1.2). Its amplitude is in thorax units.
    """
    roles = [r for r in CHANNEL_ROLES if r in cond.signals]
    # The channels are independent and numpy/scipy release the GIL in their loops, so
    # two threads nearly halve the wall time; the belts go first, so the belt sum can
    # be searched while the airflow channels are still running.
    order = sorted(roles, key=lambda r: r not in ("thorax", "abdomen"))
    with ThreadPoolExecutor(max_workers=BREATH_WORKERS) as pool:
        futures = {r: pool.submit(_on_signal, cond.signals[r], r) for r in order}
        found: dict[str, BreathSeries] = {}
        thorax, abdomen = cond.signals.get("thorax"), cond.signals.get("abdomen")
        if thorax is not None and abdomen is not None:
            th_breaths, ab_breaths = futures["thorax"].result(), futures["abdomen"].result()
            summed, summed_valid = belt_sum(thorax, abdomen, th_breaths, ab_breaths)
            found["effort_sum"] = find_breaths(
                summed, thorax.fs, valid=summed_valid, role="effort_sum", t0_s=thorax.t0_s
            )
        found.update({r: futures[r].result() for r in order})
    series = {r: found[r] for r in (*roles, "effort_sum") if r in found}
    return Breaths(series)


def _on_signal(sig: Signal, role: str) -> BreathSeries:
    return find_breaths(sig.data, sig.fs, valid=sig.mask, role=role, t0_s=sig.t0_s)


def belt_sum(
    thorax: Signal, abdomen: Signal, thorax_breaths: BreathSeries, abdomen_breaths: BreathSeries
) -> tuple[np.ndarray, np.ndarray]:
    """Thorax + abdomen on the thorax's time axis, and the validity of the sum.

    The abdomen is resampled onto the thorax's sample times (linear interpolation), given
    the sign of inspiration the thorax has (each belt's polarity is decided from its data)
    and scaled so that its median valid breath amplitude equals the thorax's.
    """
    t = thorax.times()
    ab_t = abdomen.times()
    ab_mask = abdomen.mask
    ab_data = np.where(ab_mask, abdomen.data, 0.0)
    ab_on_thorax = np.interp(t, ab_t, ab_data)
    # a thorax sample is valid in the sum when the nearest abdomen sample is valid
    nearest = abdomen.index_of(t)
    inside = (t >= ab_t[0]) & (t <= ab_t[-1]) if len(ab_t) else np.zeros(len(t), dtype=bool)
    valid = thorax.mask & ab_mask[nearest] & inside
    sign = 1.0
    if thorax_breaths.polarity and abdomen_breaths.polarity:
        sign = float(thorax_breaths.polarity * abdomen_breaths.polarity)
    gain = 1.0
    th_amp = _typical_amplitude(thorax_breaths)
    ab_amp = _typical_amplitude(abdomen_breaths)
    if th_amp > 0 and ab_amp > 0:
        gain = th_amp / ab_amp
    th_data = np.where(thorax.mask, thorax.data, 0.0)
    return th_data + sign * gain * ab_on_thorax, valid


def _typical_amplitude(series: BreathSeries) -> float:
    amps = series.amplitude[series.valid]
    return float(np.median(amps)) if len(amps) else 0.0
