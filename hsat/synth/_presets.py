"""Named nights: ``preset(name, seed, kit)`` gives a ``NightSpec`` for a typical case.

Rates are per hour of true monitoring time. With the default hypopnea desaturation mix
(about 55 % of hypopneas drop >= 5 points, 25 % exactly 3, 20 % <= 2) the expected REI
of each preset lands in its AASM severity class under both rule sets (< 5 none, 5-15
mild, 15-30 moderate, >= 30 severe; standards.md section 3.1); the ground truth holds the
exact expected indices of each generated night.
"""

from __future__ import annotations

from typing import Any

from hsat.synth._spec import NightSpec

_PRESETS: dict[str, dict[str, Any]] = {
    "normal": dict(obstructive_apnea_rate=0.8, central_apnea_rate=0.4, hypopnea_rate=2.0,
                   snore_level=0.2, supine_factor=1.5),
    "mild": dict(obstructive_apnea_rate=3.0, central_apnea_rate=0.5, mixed_apnea_rate=0.3,
                 hypopnea_rate=7.0, supine_factor=2.0),
    "moderate": dict(obstructive_apnea_rate=8.0, central_apnea_rate=1.0, mixed_apnea_rate=1.0,
                     hypopnea_rate=13.0, supine_factor=2.0, snore_level=0.6),
    "severe": dict(obstructive_apnea_rate=28.0, central_apnea_rate=1.5, mixed_apnea_rate=4.0,
                   hypopnea_rate=20.0, supine_factor=1.4, clustering=0.3,
                   apnea_duration_s=(15.0, 48.0), desat_scale=1.3, snore_level=0.8,
                   min_recovery_s=(6.0, 10.0), spontaneous_desat_rate=0.3,
                   sigh_rate_per_h=1.0, spo2_baseline=(93.0, 95.0)),
    "positional": dict(obstructive_apnea_rate=6.0, central_apnea_rate=0.3, mixed_apnea_rate=0.5,
                       hypopnea_rate=12.0, supine_factor=9.0,
                       position_weights=(0.42, 0.26, 0.26, 0.06), snore_level=0.5),
    "central_csb": dict(obstructive_apnea_rate=1.5, central_apnea_rate=2.0, hypopnea_rate=4.0,
                        central_hypopnea_fraction=0.5, csb_hours=2.5, snore_level=0.15,
                        supine_factor=1.3, pulse_bpm=(62.0, 78.0), spo2_baseline=(93.0, 95.0)),
    "inadequate": dict(obstructive_apnea_rate=3.0, central_apnea_rate=0.5, hypopnea_rate=6.0,
                       probe_off_after_h=2.6, probe_off_count=0),
}

PRESET_NAMES: tuple[str, ...] = tuple(_PRESETS)


def preset(name: str, seed: int = 0, kit: str = "generic", **changes: Any) -> NightSpec:
    """The named night for ``kit``; ``changes`` override any knob (e.g. ``duration_h``).

    Names: normal, mild, moderate, severe, positional, central_csb (Cheyne-Stokes:
    central apneas and hypopneas in crescendo-decrescendo cycles of 45-90 s), inadequate
    (oximetry lost 2.6 h after lights-off, so valid oximetry < 4 h).
    """
    if name not in _PRESETS:
        raise ValueError(f"unknown preset {name!r}; known presets: {', '.join(PRESET_NAMES)}")
    knobs = {**_PRESETS[name], **changes}
    return NightSpec(seed=seed, kit=kit, preset=name, **knobs)
