"""Inboxes of invented nights for the batch, registry-export and Dask tests.

Short nights keep the tests fast; two nights are long enough (4.6 h) to pass the AASM
4-hour adequacy rule so that "done" can be told from "inadequate - repeat study".
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date
from pathlib import Path

from hsat.recording import Patient

#: Invented patients (demo and tests only).
PATIENTS = (
    Patient(code="ZX4471", name="Quillfeather, Orla", sex="F", birthdate=date(1958, 7, 19)),
    Patient(code="ZX5502", name="Brannigan-Voss, Teodor", sex="M",
            birthdate=date(1971, 11, 2)),
    Patient(code="ZX6613", name="Okonkwo-Lind, Maren", sex="F", birthdate=date(1983, 1, 30)),
    Patient(code="ZX7724", name="Halvorsen, Idris", sex="M", birthdate=date(1949, 5, 5)),
)


@dataclass(frozen=True)
class NightPlan:
    stem: str
    preset: str
    seed: int
    hours: float
    patient: Patient
    recording_code: str = ""


GOOD = (
    NightPlan("night-a-moderate", "moderate", 11, 4.6, PATIENTS[0], "ADM90211"),
    NightPlan("night-b-mild", "mild", 12, 4.6, PATIENTS[1], "ADM90212"),
)
INADEQUATE = NightPlan("night-c-short", "mild", 13, 1.5,
                       Patient(code="../../ZX6613", name=PATIENTS[2].name, sex="F",
                               birthdate=PATIENTS[2].birthdate),
                       "ADM90213")
SHORT = (
    NightPlan("night-d-short", "moderate", 14, 1.2, PATIENTS[3], "ADM90214"),
    NightPlan("night-e-short", "severe", 15, 1.2, PATIENTS[0], "ADM90215"),
    NightPlan("night-f-short", "normal", 16, 1.2, PATIENTS[1], "ADM90216"),
)


def write_plan(folder: Path, plan: NightPlan) -> Path:
    """Generate one night (generic kit) into ``folder``; keep only the EDF."""
    from hsat.synth import generate_night, preset, write_night

    spec = preset(plan.preset, seed=plan.seed, kit="generic", duration_h=plan.hours,
                  patient=plan.patient, recording_code=plan.recording_code)
    edf, truth = write_night(generate_night(spec), folder / f"{plan.stem}.edf")
    truth.unlink()
    return edf


def write_corrupt(folder: Path) -> Path:
    """A file named .edf that is not EDF at all."""
    path = folder / "night-x-corrupt.edf"
    path.write_bytes(b"this is a phone photo, not a recording\n" * 40)
    return path


def write_truncated(folder: Path, from_edf: Path) -> Path:
    """A valid EDF cut off part-way through its data records (an aborted copy)."""
    data = from_edf.read_bytes()
    path = folder / "night-y-truncated.edf"
    path.write_bytes(data[: len(data) // 3 + 17])
    return path
