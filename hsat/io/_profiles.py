"""Channel profiles: which EDF label plays which role, and how the kit codes its values.

A profile is a small TOML file in ``rules/profiles/`` (or anywhere, given by path)::

    name = "my-kit"
    description = "..."
    lights_off = ["Lights off"]          # annotation texts, case-insensitive
    lights_on = ["Lights on"]
    [roles.flow]
    labels = ["NasalPres", "re:^nasal"]  # ordered; glob, or regex after 're:'
    scale = -1.0                         # value = recorded * scale + offset, then convert
    [roles.spo2]
    labels = ["SAT"]
    convert = "fraction_to_percent"
    probe_off = [1.27]                   # recorded values that mean "no reading"
    [roles.position]
    labels = ["POS"]
    codes = { "10" = "upright", "20" = "supine" }

Every key is validated (pydantic, unknown keys forbidden); a mistake raises
``ConfigError`` naming the file, the key and the keys allowed there.

Automatic matching uses ``generic.toml``: an alias table of common labels (standards.md §7
"Channel labels in practice", common practice) plus the EDF+ standard-text-like labels.
"""

from __future__ import annotations

import fnmatch
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from hsat.errors import ChannelError, ConfigError
from hsat.recording import POSITIONS, ROLES, ChannelChoice, Role
from hsat.rulesets import read_toml

#: Roles tried in this order, so a specific label is taken before a broad pattern of a
#: later role can see it (e.g. 'Resp oro-nasal' goes to thermal before flow's 'nasal').
MATCH_ORDER: tuple[str, ...] = (
    "spo2",
    "pulse",
    "pleth",
    "position",
    "thermal",
    "flow",
    "thorax",
    "abdomen",
    "snore",
    "activity",
)
GENERIC = "generic"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class RoleSpec(_Strict):
    """How one role is found and decoded."""

    labels: tuple[str, ...] = Field(min_length=1)
    unit: str | None = Field(None, description="unit after conversion (default: the EDF unit)")
    scale: float = 1.0
    offset: float = 0.0
    convert: Literal["none", "fraction_to_percent", "auto_fraction_to_percent"] = "none"
    probe_off: tuple[float, ...] = ()
    probe_off_tolerance: float = Field(0.005, ge=0)
    codes: dict[str, str] | None = None
    digital_minimum_is_value: bool = False

    @field_validator("labels")
    @classmethod
    def _patterns_compile(cls, v: tuple[str, ...]) -> tuple[str, ...]:
        for pattern in v:
            if pattern.startswith("re:"):
                try:
                    re.compile(pattern[3:])
                except re.error as exc:
                    raise ValueError(f"bad regular expression {pattern!r} ({exc})") from None
        return v

    @field_validator("codes")
    @classmethod
    def _codes_known(cls, v: dict[str, str] | None) -> dict[str, str] | None:
        if v is None:
            return v
        for code, pos in v.items():
            try:
                float(code)
            except ValueError:
                raise ValueError(f"position code {code!r} is not a number") from None
            if pos not in POSITIONS:
                raise ValueError(f"position {pos!r} must be one of {', '.join(POSITIONS)}")
        return v

    def code_map(self) -> dict[float, str]:
        return {float(k): v for k, v in (self.codes or {}).items()}


class Profile(_Strict):
    """A channel profile (see the module docstring for the keys)."""

    name: str = Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9_.\-]+$")
    description: str = ""
    source: str = ""
    roles: dict[Role, RoleSpec]
    lights_off: tuple[str, ...] = ()
    lights_on: tuple[str, ...] = ()
    #: SHA-256-free: a profile changes reading, not scoring; its path is kept for messages.
    path: str = ""

    @field_validator("roles")
    @classmethod
    def _needs_flow_and_spo2(cls, v: dict[str, RoleSpec]) -> dict[str, RoleSpec]:
        if "spo2" not in v or not ({"flow", "thermal"} & set(v)):
            raise ValueError("a profile needs roles.spo2 and roles.flow (or roles.thermal)")
        return v


def profiles_dir() -> Path:
    """The folder of built-in profiles (``rules/profiles/`` at the project root)."""
    here = Path(__file__).resolve().parent.parent
    for candidate in (here / "_bundled_rules" / "profiles", here.parent / "rules" / "profiles"):
        if candidate.is_dir():
            return candidate
    raise ConfigError(here.parent / "rules" / "profiles", "built-in profiles folder not found")


def builtin_profile_names() -> list[str]:
    return sorted(p.stem for p in profiles_dir().glob("*.toml"))


def _allowed_keys(loc: tuple[object, ...]) -> list[str]:
    """The keys allowed at the parent of ``loc`` (for 'unknown key' messages)."""
    parent = loc[:-1]
    if not parent:
        return sorted(k for k in Profile.model_fields if k != "path")
    if parent[0] == "roles" and len(parent) == 1:
        return list(ROLES)
    if parent[0] == "roles" and len(parent) == 2:
        return list(RoleSpec.model_fields)
    return []


def _format_error(err: ValidationError) -> str:
    parts = []
    for e in err.errors():
        loc = tuple(e["loc"])
        where = ".".join(str(x) for x in loc) or "(top level)"
        if e["type"] == "extra_forbidden":
            allowed = _allowed_keys(loc)
            parts.append(f"unknown key '{where}' (allowed: {', '.join(allowed)})")
        elif e["type"] == "literal_error" and loc[:1] == ("roles",) and loc[-1] == "[key]":
            parts.append(f"unknown role 'roles.{loc[1]}' (allowed: {', '.join(ROLES)})")
        elif e["type"] == "missing":
            parts.append(f"missing key '{where}'")
        else:
            parts.append(f"key '{where}': {e['msg']}")
    return "invalid channel profile: " + "; ".join(parts)


def load_profile(name_or_path: str | Path) -> Profile:
    """Load a profile by built-in name (``alder-r3``) or by path to a TOML file.

    Raises
    ------
    ConfigError
        Missing file, not TOML, or a validation failure naming the key and allowed keys.
    """
    p = Path(name_or_path)
    if not p.exists() and p.suffix != ".toml" and "/" not in str(name_or_path):
        p = profiles_dir() / f"{name_or_path}.toml"
        if not p.exists():
            raise ConfigError(
                name_or_path,
                f"no such channel profile; built-in ones are: {', '.join(builtin_profile_names())}",
            )
    _, data = read_toml(p, "channel profile", missing="no such channel profile file")
    if "path" in data:
        raise ConfigError(
            p, "unknown key 'path' (allowed: " + ", ".join(_allowed_keys(("x",))) + ")"
        )
    try:
        return Profile.model_validate({**data, "path": str(p)})
    except ValidationError as exc:
        raise ConfigError(p, _format_error(exc)) from None


def _matches(pattern: str, label: str) -> bool:
    """Case-insensitive: regex search after 're:', otherwise a whole-label glob."""
    if pattern.startswith("re:"):
        return re.search(pattern[3:], label, flags=re.IGNORECASE) is not None
    return fnmatch.fnmatchcase(label.lower(), pattern.lower())


@dataclass(frozen=True)
class ChannelMatch:
    """Which channel index plays which role, and why."""

    roles: dict[str, int]
    choices: tuple[ChannelChoice, ...]
    unused: tuple[str, ...]
    warnings: tuple[str, ...]


def match_channels(path: str | Path, labels: list[str], profile: Profile) -> ChannelMatch:
    """Assign EDF labels to roles with the profile's ordered patterns.

    For each role (in ``MATCH_ORDER``) the first pattern that matches any label not yet
    taken decides; two labels matching that pattern is an ambiguity (``ChannelError``
    naming both). Without nasal pressure the thermal channel also serves as ``flow``
    (AASM: thermal is an alternative hypopnea sensor, standards.md §1.2).

    Raises
    ------
    ChannelError
        Ambiguous labels, or no airflow / no SpO2 channel.
    """
    taken: dict[int, str] = {}
    roles: dict[str, int] = {}
    choices: list[ChannelChoice] = []
    warnings: list[str] = []
    for role in MATCH_ORDER:
        spec = profile.roles.get(role)
        if spec is None:
            continue
        for pattern in spec.labels:
            hits = [i for i, lab in enumerate(labels) if i not in taken and _matches(pattern, lab)]
            if not hits:
                continue
            if len(hits) > 1:
                names = ", ".join(repr(labels[i]) for i in hits)
                raise ChannelError(
                    path,
                    (
                        f"ambiguous {role} channel: labels {names} all match pattern {pattern!r} "
                        f"of profile {profile.name}; give a profile that names one"
                    ),
                )
            i = hits[0]
            taken[i] = role
            roles[role] = i
            choices.append(
                ChannelChoice(
                    role,
                    labels[i],
                    (
                        f"label {labels[i]!r} matched {role} pattern {pattern!r} "
                        f"in profile {profile.name}"
                    ),
                )
            )
            break
    if "flow" not in roles and "thermal" in roles:
        roles["flow"] = roles["thermal"]
        lab = labels[roles["thermal"]]
        choices.append(
            ChannelChoice(
                "flow",
                lab,
                (f"no nasal-pressure channel: thermal channel {lab!r} also used as airflow"),
            )
        )
        warnings.append("no nasal-pressure channel: hypopneas are judged on the thermal signal")
    available = ", ".join(repr(x) for x in labels) or "(none)"
    if "flow" not in roles:
        raise ChannelError(
            path,
            (
                f"no airflow channel (nasal pressure or thermal) found by profile {profile.name} "
                f"among labels {available}"
            ),
        )
    if "spo2" not in roles:
        raise ChannelError(
            path, f"no SpO2 channel found by profile {profile.name} among labels {available}"
        )
    belts = [r for r in ("thorax", "abdomen") if r in roles]
    if not belts:
        warnings.append("no effort belts (thorax/abdomen): apnea type cannot be classified")
    elif len(belts) == 1:
        warnings.append(f"only one effort belt ({belts[0]}): apnea typing rests on one belt")
    duplicates = sorted({lab for lab in labels if labels.count(lab) > 1})
    for lab in duplicates:
        warnings.append(f"label {lab!r} occurs more than once; unused copies are ignored")
    unused = tuple(lab for i, lab in enumerate(labels) if i not in taken)
    order = {r: k for k, r in enumerate(ROLES)}
    choices.sort(key=lambda c: order.get(c.role, 99))
    return ChannelMatch(roles, tuple(choices), unused, tuple(warnings))


def suggest_kit_profiles(
    path: str | Path, labels: list[str], matched: ChannelMatch
) -> list[Profile]:
    """Built-in kit profiles whose patterns pick exactly the labels automatic matching picked.

    Such a kit's position codes and SpO2 coding may differ from the generic ones, so the
    user is told to pass that profile.
    """
    found = []
    for name in builtin_profile_names():
        if name == GENERIC:
            continue
        try:
            prof = load_profile(name)
            theirs = match_channels(path, labels, prof)
        except (ChannelError, ConfigError):
            continue
        if theirs.roles == matched.roles:
            found.append(prof)
    return found
