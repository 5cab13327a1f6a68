"""The intake sidecar: patient, kit and referral details typed in when the kit goes out.

The file sits beside the recording as ``<stem>.intake.toml`` (``night-042.edf`` ->
``night-042.intake.toml``) or is passed explicitly. It is TOML, every table and key is
optional, and an unknown key is an error naming the file and the key::

    [patient]
    name = "Doe, Jane"              # free text, as it should appear on the report
    id = "MRN-0042"                 # the clinic's patient identifier
    birthdate = 1961-04-23          # TOML date, or the string "1961-04-23" (YYYY-MM-DD)
    sex = "female"                  # female | male | other | unknown (also F / M / X / U)

    [study]
    kit = "alder"                   # kit model or family
    kit_serial = "AL-3-00917"       # serial / device ID of the unit worn
    referring_clinician = "Dr A. Example"
    interpreting_physician = "Dr B. Example, MD"
    study_date = 2024-03-01         # the evening the night started; TOML date or string
    notes = "Patient reports removing the finger probe once around 3 am."

    [[diary_exclusions]]            # periods the patient's diary says to leave out
    start = "02:10"                 # clock time HH:MM or HH:MM:SS (local, as in the EDF) ...
    end = "02:35"
    reason = "up to the bathroom"   # optional; shown in the report's technical section

    [[diary_exclusions]]
    start = 16200.0                 # ... or seconds from the recording start
    end = 17100.0

Clock times are read on the recording's clock (the EDF header start time): a clock time
earlier than the start time is taken to be after midnight; an end earlier than its start
wraps past midnight. Empty strings count as "not recorded". Patient fields that are
missing here fall back to the EDF header's patient fields; the report prints
"not recorded" for anything neither source holds.
"""

from __future__ import annotations

import re
from datetime import date, datetime, timedelta
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, ValidationError, field_validator, model_validator

from hsat.errors import ConfigError
from hsat.rulesets import describe_validation_error, read_toml

Sex = Literal["female", "male", "other", "unknown"]
_SEX_ALIASES: dict[str, str] = {
    "f": "female", "female": "female", "m": "male", "male": "male",
    "x": "other", "other": "other", "u": "unknown", "unknown": "unknown",
}
_CLOCK = re.compile(r"^(\d{1,2}):(\d{2})(?::(\d{2}(?:\.\d+)?))?$")
SECONDS_PER_DAY = 86_400.0


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, str_strip_whitespace=True)

    @field_validator("*", mode="before")
    @classmethod
    def _empty_is_missing(cls, value: object) -> object:
        return None if isinstance(value, str) and not value.strip() else value


class PatientIntake(_Strict):
    """The ``[patient]`` table."""

    name: str | None = None
    id: str | None = None
    birthdate: date | None = None
    sex: Sex | None = None

    @field_validator("sex", mode="before")
    @classmethod
    def _normalise_sex(cls, value: object) -> object:
        if isinstance(value, str):
            return _SEX_ALIASES.get(value.strip().lower(), value)
        return value

    @field_validator("birthdate")
    @classmethod
    def _plausible_birthdate(cls, value: date | None) -> date | None:
        if value is not None and not date(1900, 1, 1) <= value <= date.today():
            raise ValueError("birthdate must lie between 1900-01-01 and today")
        return value


class StudyIntake(_Strict):
    """The ``[study]`` table."""

    kit: str | None = None
    kit_serial: str | None = None
    referring_clinician: str | None = None
    interpreting_physician: str | None = None
    study_date: date | None = None
    notes: str | None = None


class DiaryExclusion(_Strict):
    """One ``[[diary_exclusions]]`` entry: a clock time ``HH:MM[:SS]`` or seconds."""

    start: str | float
    end: str | float
    reason: str | None = None

    @field_validator("start", "end")
    @classmethod
    def _clock_or_seconds(cls, value: str | float) -> str | float:
        if isinstance(value, str):
            m = _CLOCK.match(value)
            if not m or int(m.group(1)) > 23 or int(m.group(2)) > 59 or (
                m.group(3) and float(m.group(3)) >= 60
            ):
                raise ValueError("must be a clock time HH:MM or HH:MM:SS, or seconds")
        elif value < 0:
            raise ValueError("seconds from the recording start must be >= 0")
        return value

    @model_validator(mode="after")
    def _same_kind(self) -> DiaryExclusion:
        if isinstance(self.start, str) != isinstance(self.end, str):
            raise ValueError("start and end must both be clock times or both be seconds")
        if not isinstance(self.start, str) and float(self.end) <= float(self.start):
            raise ValueError("end must come after start")
        return self

    def seconds(self, recording_start: datetime) -> tuple[float, float]:
        """(start_s, end_s) from the recording start; clock times wrap past midnight."""
        start = _to_seconds(self.start, recording_start)
        end = _to_seconds(self.end, recording_start)
        if end <= start:  # only clock times get here (checked on load): past midnight
            end += SECONDS_PER_DAY
        return start, end


def _to_seconds(value: str | float, recording_start: datetime) -> float:
    if not isinstance(value, str):
        return float(value)
    m = _CLOCK.match(value)
    assert m is not None  # validated on load
    clock = timedelta(
        hours=int(m.group(1)), minutes=int(m.group(2)), seconds=float(m.group(3) or 0)
    )
    midnight = recording_start.replace(hour=0, minute=0, second=0, microsecond=0)
    offset = (midnight + clock - recording_start).total_seconds()
    return offset + SECONDS_PER_DAY if offset < 0 else offset


class Intake(_Strict):
    """The whole intake sidecar."""

    patient: PatientIntake = PatientIntake()
    study: StudyIntake = StudyIntake()
    diary_exclusions: tuple[DiaryExclusion, ...] = ()
    #: The file it was read from (set by the loader; not a key in the file).
    source_path: str = ""

    def excluded_periods(self, recording_start: datetime) -> list[tuple[float, float]]:
        """Diary exclusions as (start_s, end_s) from the recording start.

        This is the shape ``hsat.api.condition(..., excluded=...)`` takes.
        """
        return [d.seconds(recording_start) for d in self.diary_exclusions]


def load_intake(path: str | Path) -> Intake:
    """Read and validate one intake sidecar.

    Raises
    ------
    ConfigError
        The file is missing, unreadable, not TOML, or has an unknown key or bad value
        (the message names the file and every bad key).
    """
    p = Path(path)
    _, data = read_toml(p, "intake file")
    if "source_path" in data:
        raise ConfigError(p, "key 'source_path': unknown key")
    try:
        return Intake.model_validate({**data, "source_path": str(p)})
    except ValidationError as exc:
        raise ConfigError(p, describe_validation_error("intake file", exc)) from None


def intake_path_for(edf_path: str | Path) -> Path:
    """Where the sidecar of ``edf_path`` lives: ``<stem>.intake.toml`` beside it."""
    p = Path(edf_path)
    return p.with_name(f"{p.stem}.intake.toml")


def load_intake_for(edf_path: str | Path, intake_path: str | Path | None = None) -> Intake | None:
    """The intake for a recording: ``intake_path`` if given, else the sidecar if present.

    Returns None when no path is given and no ``<stem>.intake.toml`` exists.
    """
    if intake_path is not None:
        return load_intake(intake_path)
    sidecar = intake_path_for(edf_path)
    return load_intake(sidecar) if sidecar.is_file() else None
