"""Rule sets: validated scoring parameters loaded from small TOML files in ``rules/``.

A rule set holds numbers and switches only (thresholds, durations, windows, which
detectors run); the detectors that use them are code in ``hsat.events``. Adding a rule
set means copying a file and changing numbers.

Validation fails early and names the file and the key: an unknown key, a wrong type or
an impossible value (a 130 % drop, a negative duration) raises ``ConfigError``.
"""

from __future__ import annotations

import hashlib
import tomllib
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from hsat.errors import ConfigError


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Detectors(_Strict):
    """Which detectors run."""

    apnea: bool = True
    hypopnea: bool = True
    desaturation: bool = True
    cheyne_stokes: bool = True
    hypopnea_type: bool = False


class Baseline(_Strict):
    """Pre-event amplitude baseline (AASM: mean amplitude of stable breathing in the
    preceding 2 min; when breathing is unstable, the largest breaths)."""

    window_s: float = Field(120.0, gt=0, le=600)
    statistic: Literal["stable_mean", "largest"] = "stable_mean"
    largest_n: int = Field(3, ge=1, le=50)
    stable_cv: float = Field(0.35, gt=0, le=5)
    min_breaths: int = Field(3, ge=1, le=100)
    exclude_event_breaths: bool = True


class ApneaRule(_Strict):
    drop_pct: float = Field(90.0, gt=0, lt=100)
    min_duration_s: float = Field(10.0, gt=0, le=600)
    max_duration_s: float = Field(180.0, gt=0, le=3600)
    sensor: Literal["thermal_then_flow", "flow", "thermal"] = "thermal_then_flow"
    effort_absent_pct: float = Field(
        20.0, gt=0, lt=100,
        description="effort excursion below this % of its pre-event baseline counts as absent",
    )


class HypopneaRule(_Strict):
    drop_pct: float = Field(30.0, gt=0, lt=100)
    min_duration_s: float = Field(10.0, gt=0, le=600)
    max_duration_s: float = Field(180.0, gt=0, le=3600)
    desaturation_pct: float = Field(3.0, gt=0, le=50)
    arousal_scored: Literal[False] = Field(
        False, description="arousals need EEG, which a Type III kit does not record"
    )


class DesaturationRule(_Strict):
    drop_pct: float = Field(3.0, gt=0, le=50)
    baseline_window_s: float = Field(120.0, gt=0, le=600)
    min_duration_s: float = Field(5.0, ge=0, le=600)
    max_duration_s: float = Field(120.0, gt=0, le=3600)
    link_window_s: float = Field(
        30.0, ge=0, le=120,
        description="a desaturation whose nadir falls between event onset and this long "
        "after event end is linked to the event",
    )
    event_nadir: Literal["window_minimum", "own_nadir"] = Field(
        "window_minimum",
        description="an event's desaturation: the lowest SpO2 from onset to the end of the "
        "link window ('window_minimum'), or a SpO2 nadir no earlier event has taken "
        "('own_nadir': each desaturation counted once)",
    )


class CheyneStokesRule(_Strict):
    min_consecutive: int = Field(3, ge=2, le=50)
    min_cycle_s: float = Field(40.0, gt=0, le=600)
    max_cycle_s: float = Field(120.0, gt=0, le=1200)
    min_central_index: float = Field(5.0, ge=0, le=200)
    min_monitoring_h: float = Field(2.0, ge=0, le=24)


class InvalidDataRule(_Strict):
    """How events that straddle invalid data are handled."""

    max_invalid_fraction: float = Field(
        0.0, ge=0, le=1,
        description="an event is dropped when more than this fraction of it lies in "
        "invalid data or outside monitoring time",
    )


class RuleSet(_Strict):
    name: str = Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.\-]+$")
    description: str = ""
    source: str = ""
    detectors: Detectors = Detectors()
    baseline: Baseline = Baseline()
    apnea: ApneaRule = ApneaRule()
    hypopnea: HypopneaRule = HypopneaRule()
    desaturation: DesaturationRule = DesaturationRule()
    cheyne_stokes: CheyneStokesRule = CheyneStokesRule()
    invalid_data: InvalidDataRule = InvalidDataRule()
    severity_thresholds: tuple[float, float, float] = (5.0, 15.0, 30.0)
    #: SHA-256 of the file's bytes; filled by ``load_rule_set``.
    content_sha256: str = ""

    @model_validator(mode="after")
    def _check_consistency(self) -> RuleSet:
        a, b, c = self.severity_thresholds
        if not 0 < a < b < c:
            raise ValueError("severity_thresholds must be increasing and positive")
        if self.hypopnea.drop_pct >= self.apnea.drop_pct:
            raise ValueError("hypopnea.drop_pct must be smaller than apnea.drop_pct")
        if self.apnea.max_duration_s <= self.apnea.min_duration_s:
            raise ValueError("apnea.max_duration_s must exceed apnea.min_duration_s")
        if self.hypopnea.max_duration_s <= self.hypopnea.min_duration_s:
            raise ValueError("hypopnea.max_duration_s must exceed hypopnea.min_duration_s")
        return self

    @property
    def short_hash(self) -> str:
        return self.content_sha256[:12]


def _rules_dir() -> Path:
    """The folder of built-in rule sets (``rules/`` at the project root)."""
    here = Path(__file__).resolve().parent
    for candidate in (here / "_bundled_rules", here.parent / "rules"):
        if candidate.is_dir():
            return candidate
    raise ConfigError(here.parent / "rules", "built-in rules folder not found")


BUILTIN_DEFAULTS: tuple[str, ...] = ("aasm-3pct", "aasm-4pct")


def builtin_rule_names() -> list[str]:
    return sorted(p.stem for p in _rules_dir().glob("*.toml"))


def read_toml(path: Path, what: str, *, missing: str | None = None) -> tuple[bytes, dict]:
    """The bytes and the parsed table of one settings file (rule set, profile, intake, site).

    Raises ``ConfigError`` naming the file: ``cannot read <what> (...)`` (or ``missing``
    when given and the file does not exist), or ``not a valid TOML file (...)``.
    """
    try:
        raw = path.read_bytes()
    except FileNotFoundError as exc:
        raise ConfigError(path, missing or f"cannot read {what} ({exc.strerror})") from None
    except OSError as exc:
        raise ConfigError(path, f"cannot read {what} ({exc.strerror})") from None
    try:
        return raw, tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError(path, f"not a valid TOML file ({exc})") from None


def describe_validation_error(what: str, err: ValidationError) -> str:
    """One line naming every bad key of a settings file: ``invalid <what>: key 'a.b': ...``.

    Shared by the rule-set, intake and site-settings loaders (the channel-profile loader
    adds the allowed keys and roles itself).
    """
    parts = []
    for e in err.errors():
        loc = ".".join(str(x) for x in e["loc"]) or "(top level)"
        msg = "unknown key" if e["type"] == "extra_forbidden" else e["msg"]
        parts.append(f"key '{loc}': {msg}")
    return f"invalid {what}: " + "; ".join(parts)


def load_rule_set(name_or_path: str | Path) -> RuleSet:
    """Load a rule set by built-in name (``aasm-3pct``) or by path to a TOML file.

    Raises
    ------
    ConfigError
        The file is missing, is not TOML, or fails validation (the message names the
        file and every bad key).
    """
    p = Path(name_or_path)
    if p.suffix != ".toml" and not p.exists():
        p = _rules_dir() / f"{name_or_path}.toml"
        if not p.exists():
            raise ConfigError(
                name_or_path,
                f"no such rule set; built-in ones are: {', '.join(builtin_rule_names())}",
            )
    raw, data = read_toml(p, "rule set")
    if "content_sha256" in data:
        raise ConfigError(p, "key 'content_sha256' is computed by hsat and cannot be set")
    data["content_sha256"] = hashlib.sha256(raw).hexdigest()
    try:
        return RuleSet.model_validate(data)
    except ValidationError as exc:
        raise ConfigError(p, describe_validation_error("rule set", exc)) from None


def load_rule_sets(names: list[str] | tuple[str, ...] | None) -> list[RuleSet]:
    """Load several rule sets (the built-in defaults when ``names`` is empty)."""
    chosen = list(names) if names else list(BUILTIN_DEFAULTS)
    sets = [load_rule_set(n) for n in chosen]
    seen: set[str] = set()
    for rs in sets:
        if rs.name in seen:
            raise ConfigError(rs.name, "the same rule-set name was given twice")
        seen.add(rs.name)
    return sets
