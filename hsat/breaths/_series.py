"""The breath containers passed from breath detection to the event detectors."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

#: Roles a breath series can have. ``effort_sum`` is the thorax + abdomen belt sum.
BREATH_ROLES: tuple[str, ...] = ("flow", "thermal", "thorax", "abdomen", "effort_sum")


@dataclass(frozen=True, eq=False)
class BreathSeries:
    """Breath-by-breath timing and amplitude of one respiratory channel.

    Attributes
    ----------
    role : 'flow', 'thermal', 'thorax', 'abdomen' or 'effort_sum'.
    onset_s : start of each breath (start of inspiration), seconds on the recording axis.
    peak_s : time of the inspiratory extreme.
    end_s : end of each breath; equals the next onset for consecutive breaths, and the end
        of expiration when a pause (e.g. an apnea) follows.
    amplitude : peak-to-trough excursion over the breath in the signal's units, >= 0
        (the "peak signal excursion" of the AASM respiratory rules, standards.md §1.2).
    valid : True where the breath lies wholly in valid data of its channel.
    polarity : +1 when inspiration is upward in the channel's data, -1 when the kit
        records it downward (decided from the data); 0 when there were no breaths.
    """

    role: str
    onset_s: np.ndarray
    peak_s: np.ndarray
    end_s: np.ndarray
    amplitude: np.ndarray
    valid: np.ndarray
    polarity: int = field(default=1)

    def __post_init__(self) -> None:
        n = len(self.onset_s)
        for name in ("peak_s", "end_s", "amplitude", "valid"):
            if len(getattr(self, name)) != n:
                raise ValueError(
                    f"breath series {self.role!r}: {name} has {len(getattr(self, name))} "
                    f"entries, onset_s has {n}"
                )

    def __len__(self) -> int:
        return len(self.onset_s)

    @property
    def duration_s(self) -> np.ndarray:
        """Duration of each breath (end - onset), seconds."""
        return self.end_s - self.onset_s


def empty_series(role: str, polarity: int = 0) -> BreathSeries:
    """A series with no breaths (a flat or wholly invalid channel)."""
    none = np.zeros(0, dtype=float)
    return BreathSeries(role, none, none.copy(), none.copy(), none.copy(),
                        np.zeros(0, dtype=bool), polarity)


@dataclass(frozen=True)
class Breaths:
    """The breath series of every respiratory channel of a recording.

    ``series`` holds one entry per available role, plus ``'effort_sum'`` when both belts
    exist.
    """

    series: dict[str, BreathSeries]

    def get(self, role: str) -> BreathSeries | None:
        """The series for ``role``, or None when that channel is absent."""
        return self.series.get(role)


def amplitude_at(series: BreathSeries, t_s: np.ndarray) -> np.ndarray:
    """Breath amplitude as a step function of time.

    Parameters
    ----------
    series : the breath series.
    t_s : times in seconds on the recording axis (any shape).

    Returns
    -------
    numpy.ndarray
        For each time, the amplitude of the breath whose ``[onset_s, end_s)`` covers it,
        and 0 where no breath covers it (an apnea, a pause, before the first breath).
        Invalid breaths keep their amplitude: check ``series.valid`` or the channel's
        validity mask before scoring on it.
    """
    t = np.asarray(t_s, dtype=float)
    if len(series) == 0:
        return np.zeros(t.shape, dtype=float)
    idx = np.searchsorted(series.onset_s, t, side="right") - 1
    safe = np.clip(idx, 0, len(series) - 1)
    covered = (idx >= 0) & (t < series.end_s[safe])
    return np.where(covered, series.amplitude[safe], 0.0)
