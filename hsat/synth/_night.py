"""Generate a synthetic night and write it as EDF+ plus its ground-truth JSON.

Stages, each taking data and returning data: schedule (wake, positions, problem
episodes) -> plan (events placed in time) -> breaths -> oximetry -> channels -> truth.
One ``numpy.random.default_rng(seed)`` drives them in a fixed order, so a spec gives the
same night every time.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

from hsat.outputs import atomic_write_text
from hsat.recording import Annotation, Interval, Patient, Signal
from hsat.synth._breaths import BreathTable, build_breaths
from hsat.synth._events import Plan, plan_events
from hsat.synth._kits import KitDef, get_kit
from hsat.synth._oximetry import build_oximetry
from hsat.synth._schedule import build_schedule
from hsat.synth._sensors import render_channels
from hsat.synth._spec import NightSpec
from hsat.synth._truth import build_truth


@dataclass(frozen=True, eq=False)
class SyntheticNight:
    """A generated night: channels by EDF label, annotations, patient and ground truth."""

    spec: NightSpec
    kit: KitDef
    start: datetime
    signals: dict[str, Signal]
    annotations: tuple[Annotation, ...]
    patient: Patient
    truth: dict[str, Any]
    gaps: tuple[Interval, ...]
    breaths: BreathTable
    plan: Plan

    @property
    def file_type(self) -> str:
        return "EDF+D" if self.gaps else "EDF+C"

    @property
    def physical_ranges(self) -> dict[str, tuple[float, float]]:
        return {ch.label: ch.physical_range for ch in self.kit.channels}

    def signal(self, role: str) -> Signal:
        """The channel that plays ``role`` (KeyError when the kit has none)."""
        for sig in self.signals.values():
            if sig.role == role:
                return sig
        raise KeyError(f"kit {self.kit.name!r} has no {role!r} channel")


def generate_night(spec: NightSpec) -> SyntheticNight:
    """Generate the night ``spec`` describes (deterministic by ``spec.seed``)."""
    kit = get_kit(spec.kit)
    rng = np.random.default_rng(spec.seed)
    integer = kit.spo2_integer if spec.spo2_integer is None else spec.spo2_integer
    sched = build_schedule(spec, rng, kit.lights_policy)
    plan = plan_events(spec, rng, sched, integer)
    table = build_breaths(spec, rng, sched, plan)
    ox = build_oximetry(rng, sched, plan, baseline_range=spec.spo2_baseline, integer=integer,
                        averaging_s=kit.spo2_averaging_s, pulse_range=spec.pulse_bpm)
    signals = render_channels(rng, kit, sched, table, ox, plan)
    truth = build_truth(spec, kit, sched, plan, table, ox, signals, integer)
    annotations: list[Annotation] = []
    if sched.lights_annotated and kit.lights_texts is not None:
        annotations = [Annotation(round(sched.lights_off_s, 1), 0.0, kit.lights_texts[0]),
                       Annotation(round(sched.lights_on_s, 1), 0.0, kit.lights_texts[1])]
    truth["lights_annotated"] = bool(annotations)
    gaps = tuple(Interval(s.start_s, s.end_s, s.detail, "") for s in sched.invalid
                 if s.role == "")
    return SyntheticNight(spec, kit, spec.start, signals, tuple(annotations), spec.patient,
                          truth, gaps, table, plan)


def truth_path_for(edf_path: str | Path) -> Path:
    """``night.edf`` -> ``night.truth.json`` (beside it)."""
    p = Path(edf_path)
    return p.with_name(p.stem + ".truth.json")


def write_night(night: SyntheticNight, path: str | Path) -> tuple[Path, Path]:
    """Write ``<stem>.edf`` (EDF+C, or EDF+D with gaps) and ``<stem>.truth.json``.

    ``path`` is the EDF file to write (``.edf`` is added when it has no suffix). Both
    files are written atomically (temporary name, then rename).
    """
    from hsat.io import write_edf

    edf = Path(path)
    if edf.suffix.lower() != ".edf":
        edf = edf.with_name(edf.name + ".edf")
    write_edf(
        edf, list(night.signals.values()), start=night.start,
        annotations=night.annotations, patient=night.patient,
        equipment=night.kit.equipment, recording_code=night.spec.recording_code,
        record_duration_s=1.0, file_type=night.file_type,  # type: ignore[arg-type]
        gaps=night.gaps, physical_ranges=night.physical_ranges,
    )
    truth = truth_path_for(edf)
    atomic_write_text(truth, json.dumps(night.truth, indent=1, allow_nan=False) + "\n")
    return edf, truth
