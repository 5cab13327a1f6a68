"""The containers that travel between pipeline stages.

Every stage takes one of these and returns a new one; nothing is mutated in place.
Times are seconds from the recording start (the EDF header start time) on one shared
axis; every signal keeps its native sample rate.

``Signal``           one channel: samples in physical units, its rate, and a validity mask.
``Recording``        what the reader produced: raw signals by role, annotations, gaps,
                     header facts, and why each channel was chosen for its role.
``Conditioned``      what conditioning produced: cleaned signals with validity masks,
                     excluded periods with reasons, wake periods, monitoring time and the
                     technical-adequacy verdict.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime
from typing import Literal

import numpy as np

#: Roles a channel can play. ``flow`` is nasal pressure (or the only airflow channel);
#: ``thermal`` is an oronasal thermal sensor.
Role = Literal[
    "flow", "thermal", "thorax", "abdomen", "spo2", "pulse", "position",
    "snore", "pleth", "activity",
]
ROLES: tuple[str, ...] = (
    "flow", "thermal", "thorax", "abdomen", "spo2", "pulse", "position",
    "snore", "pleth", "activity",
)

#: Body positions after decoding. Kits' own codes map onto these in the channel profile.
Position = Literal["supine", "left", "right", "prone", "upright", "unknown"]
POSITIONS: tuple[str, ...] = ("supine", "left", "right", "prone", "upright", "unknown")
#: Numeric codes used inside hsat for the decoded position channel.
POSITION_CODES: dict[str, int] = {p: i for i, p in enumerate(POSITIONS)}


@dataclass(frozen=True)
class Interval:
    """A half-open time span [start_s, end_s) with the reason it exists."""

    start_s: float
    end_s: float
    reason: str = ""
    role: str = ""  # the channel role it concerns; "" for the whole recording

    @property
    def duration_s(self) -> float:
        return self.end_s - self.start_s


@dataclass(frozen=True)
class Annotation:
    """An EDF+ annotation (TAL entry) in seconds from the recording start."""

    onset_s: float
    duration_s: float
    text: str


@dataclass(frozen=True, eq=False)
class Signal:
    """One channel on the recording's time axis.

    Sample ``i`` lies at ``t0_s + i / fs``. ``data`` is float64 in physical units (``unit``).
    ``valid`` is a boolean mask of the same length; samples inside EDF+D gaps are NaN in
    ``data`` and False in ``valid``.
    """

    role: str
    label: str
    fs: float
    data: np.ndarray
    unit: str = ""
    t0_s: float = 0.0
    valid: np.ndarray | None = None
    transducer: str = ""
    prefilter: str = ""

    def __post_init__(self) -> None:
        if self.fs <= 0:
            raise ValueError(f"signal {self.label!r}: sample rate must be > 0, got {self.fs}")
        if self.valid is not None and len(self.valid) != len(self.data):
            raise ValueError(
                f"signal {self.label!r}: validity mask has {len(self.valid)} samples, "
                f"data has {len(self.data)}"
            )

    @property
    def duration_s(self) -> float:
        return len(self.data) / self.fs

    @property
    def mask(self) -> np.ndarray:
        """The validity mask (all True when none was set)."""
        if self.valid is None:
            return np.isfinite(self.data)
        return self.valid

    def times(self) -> np.ndarray:
        """Sample times in seconds."""
        return self.t0_s + np.arange(len(self.data)) / self.fs

    def index_of(self, t_s: float | np.ndarray) -> np.ndarray:
        """Nearest sample index for time(s) ``t_s``, clipped to the signal."""
        idx = np.rint((np.asarray(t_s, dtype=float) - self.t0_s) * self.fs).astype(np.int64)
        return np.clip(idx, 0, max(len(self.data) - 1, 0))

    def valid_seconds(self) -> float:
        return float(np.count_nonzero(self.mask)) / self.fs

    def replace(self, **changes: object) -> Signal:
        """A copy with some fields changed (the original stays as it was)."""
        fields = {
            "role": self.role, "label": self.label, "fs": self.fs, "data": self.data,
            "unit": self.unit, "t0_s": self.t0_s, "valid": self.valid,
            "transducer": self.transducer, "prefilter": self.prefilter,
        }
        fields.update(changes)
        return Signal(**fields)  # type: ignore[arg-type]


@dataclass(frozen=True)
class Patient:
    """Patient facts from the EDF+ header or an intake sidecar; empty string = unknown."""

    code: str = ""
    name: str = ""
    sex: str = ""
    birthdate: date | None = None


@dataclass(frozen=True)
class ChannelChoice:
    """Why a channel was taken for a role (shown to the user by ``hsat check``)."""

    role: str
    label: str
    reason: str


@dataclass(frozen=True)
class Recording:
    """A read recording: raw signals by role plus the header facts.

    ``signals`` maps role -> Signal for the channels a profile (or automatic matching)
    assigned. ``other_labels`` lists the EDF labels that were not used.
    """

    path: str
    start: datetime
    duration_s: float
    signals: dict[str, Signal]
    annotations: tuple[Annotation, ...] = ()
    gaps: tuple[Interval, ...] = ()
    patient: Patient = field(default_factory=Patient)
    equipment: str = ""
    recording_code: str = ""
    file_type: str = "EDF"  # "EDF", "EDF+C" or "EDF+D"
    channel_choices: tuple[ChannelChoice, ...] = ()
    other_labels: tuple[str, ...] = ()
    profile_name: str = ""
    warnings: tuple[str, ...] = ()
    sha256: str = ""
    #: Onsets (s) of the kit's lights-off / lights-on annotations, as the channel profile
    #: names them; None when the file has none.
    lights_off_s: float | None = None
    lights_on_s: float | None = None

    def has(self, role: str) -> bool:
        return role in self.signals


@dataclass(frozen=True)
class Adequacy:
    """Technical adequacy verdict for the study."""

    adequate: bool
    reasons: tuple[str, ...]
    valid_flow_h: float
    valid_spo2_h: float
    valid_flow_and_spo2_h: float
    minimum_h: float


@dataclass(frozen=True)
class Conditioned:
    """A conditioned recording: cleaned signals, masks, exclusions, monitoring time.

    ``signals`` holds the conditioned channels by role; ``signals['flow']`` is the
    linearised, band-limited airflow used for hypopneas, ``signals.get('thermal')`` the
    thermal airflow used for apneas when present. ``signals['position']`` holds decoded
    position codes (``POSITION_CODES``).

    ``analysis_mask`` (sampled at ``mask_fs``) is True where the time counts towards the
    monitoring time: inside lights-off..lights-on, not judged awake, flow and oximetry
    both valid, and not in a user-excluded period.
    """

    recording: Recording
    signals: dict[str, Signal]
    exclusions: tuple[Interval, ...]
    wake: tuple[Interval, ...]
    lights_off_s: float
    lights_on_s: float
    mask_fs: float
    analysis_mask: np.ndarray
    monitoring_time_s: float
    adequacy: Adequacy
    notes: tuple[str, ...] = ()

    @property
    def recording_time_s(self) -> float:
        return self.lights_on_s - self.lights_off_s

    def in_analysis(self, t_s: float | np.ndarray) -> np.ndarray:
        """Whether time(s) ``t_s`` fall inside analysed (monitoring) time."""
        idx = np.clip(
            (np.asarray(t_s, dtype=float) * self.mask_fs).astype(np.int64),
            0, len(self.analysis_mask) - 1,
        )
        return self.analysis_mask[idx]
