"""``NightSpec``: every knob of a synthetic night, frozen so a night is reproducible.

Ranges are ``(low, high)`` pairs drawn uniformly per night or per event from the night's
random generator (``numpy.random.default_rng(seed)``). Event rates are per hour of the
night's true monitoring time (lights-off to lights-on, minus wake, minus invalid flow or
oximetry), so they read like the REI a perfect scorer would find.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field, fields, replace
from datetime import date, datetime
from typing import Any

from hsat.recording import Patient
from hsat.synth._kits import KIT_NAMES

Range = tuple[float, float]


@dataclass(frozen=True)
class NightSpec:
    """Settings of one synthetic night (all times in seconds unless named otherwise).

    Notes
    -----
    Physiological defaults, each common practice unless a source is named:
    adult resting breathing 12-20 breaths/min; SpO2 baseline 94-97 %; circulatory delay
    from event end to SpO2 nadir 20-28 s (physiological range about 20-40 s, kept inside
    the 30 s link window of the built-in rule sets, rules/aasm-*.toml); hypopnea flow
    reduction 40-70 % (AASM: a hypopnea needs >= 30 %, standards.md section 1.2); apnea
    flow <= 5 % of baseline (AASM: <= 10 %); Cheyne-Stokes cycle 45-90 s (standards.md
    section 1.4).
    """

    seed: int = 0
    kit: str = "generic"
    duration_h: float = 8.0
    start: datetime = datetime(2026, 3, 2, 22, 30, 0)
    patient: Patient = field(default_factory=Patient)
    recording_code: str = ""
    preset: str = ""

    # --- night layout (minutes) ---
    lights_off_after_min: Range = (4.0, 12.0)
    sleep_latency_min: Range = (8.0, 25.0)
    final_wake_min: Range = (8.0, 20.0)
    lights_on_before_end_min: Range = (2.0, 6.0)
    waso_count: int = 2
    waso_min: Range = (3.0, 10.0)
    lights_annotated: bool | None = None  # None: the kit's own policy
    rem_cycle_min: Range = (85.0, 100.0)
    rem_duration_min: Range = (8.0, 30.0)

    # --- breathing ---
    breaths_per_min: Range = (13.0, 17.0)
    breath_period_cv: float = 0.10
    breath_amplitude_cv: float = 0.10
    rem_period_cv: float = 0.28
    rem_amplitude_cv: float = 0.30
    tidal_flow_l_s: Range = (0.30, 0.45)
    sigh_rate_per_h: float = 3.0
    post_sigh_apnea_probability: float = 0.6
    post_sigh_apnea_s: Range = (5.0, 16.0)
    snore_level: float = 0.4

    # --- events (rates per hour of true monitoring time) ---
    obstructive_apnea_rate: float = 0.0
    central_apnea_rate: float = 0.0
    mixed_apnea_rate: float = 0.0
    hypopnea_rate: float = 0.0
    central_hypopnea_fraction: float = 0.1
    apnea_duration_s: Range = (12.0, 38.0)
    hypopnea_duration_s: Range = (13.0, 40.0)
    hypopnea_flow_reduction: Range = (0.40, 0.70)
    #: weights of the hypopnea desaturation bands: <= 2 points, exactly 3 points
    #: (meets 3 % but not 4 %), 5-9 points
    hypopnea_desat_weights: tuple[float, float, float] = (0.2, 0.25, 0.55)
    apnea_desat_per_s: Range = (0.12, 0.30)
    desat_scale: float = 1.0
    supine_factor: float = 2.0
    rem_factor: float = 1.5
    clustering: float = 1.0  # Dirichlet concentration of the gaps: < 1 packs events
    min_recovery_s: Range = (7.0, 12.0)
    circulatory_delay_s: Range = (20.0, 28.0)
    csb_hours: float = 0.0
    csb_cycle_s: Range = (45.0, 90.0)
    spontaneous_desat_rate: float = 0.8

    # --- positions ---
    position_weights: tuple[float, float, float, float] = (0.40, 0.26, 0.26, 0.08)
    position_segment_min: Range = (15.0, 80.0)

    # --- oximetry and pulse ---
    spo2_baseline: Range = (94.0, 97.0)
    spo2_integer: bool | None = None  # None: the kit's own resolution
    pulse_bpm: Range = (56.0, 70.0)

    # --- signal problems (counts of episodes during sleep) ---
    probe_off_count: int = 1
    probe_off_min: Range = (2.0, 10.0)
    probe_off_after_h: float | None = None  # oximetry lost from lights-off + this, to the end
    cannula_off_count: int = 1
    cannula_off_min: Range = (3.0, 8.0)
    mouth_breathing_count: int = 1
    mouth_breathing_min: Range = (4.0, 12.0)
    flat_belt_count: int = 0
    flat_belt_min: Range = (5.0, 15.0)
    weak_belt_count: int = 1
    clipping_belt_count: int = 1
    belt_episode_min: Range = (10.0, 30.0)
    belt_artefact_rate_per_h: float = 2.0
    gaps: tuple[tuple[float, float], ...] = ()  # (start_s, duration_s): an EDF+D file

    def __post_init__(self) -> None:
        if self.kit not in KIT_NAMES:
            raise ValueError(f"unknown kit {self.kit!r}; known kits: {', '.join(KIT_NAMES)}")
        if not 0.5 <= self.duration_h <= 14:
            raise ValueError(f"duration_h must lie in 0.5..14 h, got {self.duration_h}")
        for f in fields(self):
            value = getattr(self, f.name)
            if (f.name.endswith("_rate") or f.name.endswith("_count")) and value < 0:
                raise ValueError(f"{f.name} must be >= 0, got {value}")
            if (isinstance(value, tuple) and len(value) == 2 and f.name != "gaps"
                    and all(isinstance(v, float | int) for v in value) and value[0] > value[1]):
                raise ValueError(f"{f.name}: low {value[0]} exceeds high {value[1]}")
        if abs(sum(self.hypopnea_desat_weights) - 1.0) > 1e-6:
            raise ValueError("hypopnea_desat_weights must add up to 1")
        if self.clustering <= 0:
            raise ValueError("clustering must be > 0")

    @property
    def duration_s(self) -> float:
        return self.duration_h * 3600.0

    def with_changes(self, **changes: Any) -> NightSpec:
        """A copy with some knobs changed."""
        return replace(self, **changes)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready settings (written into the ground-truth file)."""
        out: dict[str, Any] = {}
        for key, value in asdict(self).items():
            if isinstance(value, datetime | date):
                out[key] = value.isoformat()
            elif key == "patient":
                out[key] = {k: (v.isoformat() if isinstance(v, date) else v)
                            for k, v in value.items()}
            elif isinstance(value, tuple):
                out[key] = [list(v) if isinstance(v, tuple) else v for v in value]
            else:
                out[key] = value
        return out
