"""Read a recording: decode the EDF, assign channels to roles, apply the kit's coding.

After this step a ``Recording`` is kit-neutral: values are in standard units (SpO2 in %),
probe-off codes are marked invalid, body positions are hsat's ``POSITION_CODES``, and the
kit's lights-off/on annotations are found. Cleaning (filters, artefact rules, validity)
is the conditioning stage's job.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from hsat.errors import ChannelError
from hsat.io._edf import EdfFile, read_edf
from hsat.io._profiles import (
    GENERIC,
    Profile,
    RoleSpec,
    load_profile,
    match_channels,
    suggest_kit_profiles,
)
from hsat.recording import POSITION_CODES, Annotation, ChannelChoice, Recording, Signal

#: Roles without which no study can be scored.
REQUIRED_ROLES = ("flow", "spo2")
#: Tolerance when comparing a recorded position value with the kit's codes.
_CODE_TOLERANCE = 0.25


def _decode_positions(sig: Signal, spec: RoleSpec) -> tuple[np.ndarray, list[str]]:
    """Kit position codes -> hsat ``POSITION_CODES``; unknown codes -> 'unknown'."""
    out = np.full(len(sig.data), float(POSITION_CODES["unknown"]))
    codes = spec.code_map()
    if not codes:
        return out, ["the profile gives no position codes: position unknown"]
    values = np.where(sig.mask, sig.data, np.nan)
    matched = np.zeros(len(values), dtype=bool)
    for code, position in codes.items():
        hit = np.abs(values - code) <= _CODE_TOLERANCE
        out[hit] = POSITION_CODES[position]
        matched |= hit
    strange = np.unique(np.round(values[~matched & np.isfinite(values)], 2))
    notes = []
    if strange.size:
        shown = ", ".join(f"{v:g}" for v in strange[:8]) + (" ..." if strange.size > 8 else "")
        notes.append(
            f"position values {shown} are not codes of this profile: shown as unknown "
            "(a kit profile may be needed)"
        )
    return out, notes


def _apply_role(
    path: Path, role: str, sig: Signal, spec: RoleSpec, reason: str
) -> tuple[Signal, str, list[str]]:
    """Units, probe-off codes and position codes of one role's channel."""
    notes: list[str] = []
    data = np.asarray(sig.data, dtype=float)
    # the decoded mask is shared, never modified: a new one is made when codes drop samples
    valid = np.isfinite(data) if spec.digital_minimum_is_value else sig.mask
    if spec.probe_off:
        off = np.zeros(len(data), dtype=bool)
        for code in spec.probe_off:
            off |= np.abs(data - code) <= spec.probe_off_tolerance
        valid = valid & ~off
    unit = sig.unit
    if spec.scale != 1.0 or spec.offset != 0.0:
        data = data * spec.scale + spec.offset
    convert = spec.convert
    if convert == "auto_fraction_to_percent":
        usable = data[valid]
        looks_fraction = (
            unit.strip() != "%"
            and usable.size > 0
            and np.nanpercentile(usable, 99) <= 1.5
            and np.nanpercentile(usable, 1) >= 0
        )
        convert = "fraction_to_percent" if looks_fraction else "none"
        if looks_fraction:
            reason += (
                "; values look like a 0-1 fraction (unit " + repr(unit) + "): scaled x100 to %"
            )
            notes.append(
                f"{role} channel {sig.label!r} holds a 0-1 fraction: scaled to % "
                "automatically; check it, or give the kit's profile"
            )
    if convert == "fraction_to_percent":
        data = data * 100.0
        unit = "%"
    if spec.unit is not None:
        unit = spec.unit
    if role == "position":
        data, more = _decode_positions(sig.replace(data=data, valid=valid), spec)
        notes.extend(more)
        unit = ""
    return sig.replace(role=role, data=data, valid=valid, unit=unit), reason, notes


def _lights(
    annotations: tuple[Annotation, ...], profile: Profile
) -> tuple[float | None, float | None]:
    """Onsets of the first lights-off and the last lights-on after it (profile texts)."""
    offs = {t.strip().lower() for t in profile.lights_off}
    ons = {t.strip().lower() for t in profile.lights_on}
    off_times = [a.onset_s for a in annotations if a.text.strip().lower() in offs]
    lights_off = min(off_times) if off_times else None
    on_times = [
        a.onset_s
        for a in annotations
        if a.text.strip().lower() in ons and (lights_off is None or a.onset_s > lights_off)
    ]
    return lights_off, (max(on_times) if on_times else None)


def recording_from_edf(edf: EdfFile, profile: Profile, *, automatic: bool) -> Recording:
    """Assign roles to a decoded file's channels with ``profile``."""
    path = Path(edf.path)
    labels = [s.label for s in edf.signals]
    match = match_channels(path, labels, profile)
    warnings = list(edf.warnings) + list(match.warnings)
    signals: dict[str, Signal] = {}
    choices: list[ChannelChoice] = []
    reasons = {c.role: c.reason for c in match.choices}
    for role, index in match.roles.items():
        raw = edf.signals[index]
        if len(raw.data) == 0:
            if role in REQUIRED_ROLES:
                raise ChannelError(
                    path, f"{role} channel {raw.label!r} is zero-length (no samples)"
                )
            warnings.append(f"{role} channel {raw.label!r} is zero-length (no samples): not used")
            continue
        # Without nasal pressure the thermal channel also plays flow: decode it as thermal.
        from_thermal = role == "flow" and match.roles.get("thermal") == index
        spec = profile.roles["thermal"] if from_thermal else profile.roles[role]
        sig, reason, notes = _apply_role(path, role, raw, spec, reasons[role])
        signals[role] = sig
        choices.append(ChannelChoice(role, raw.label, reason))
        warnings.extend(notes)
    if automatic:
        for kit in suggest_kit_profiles(path, labels, match):
            warnings.append(
                f"labels match kit profile {kit.name!r} ({kit.description}); its position "
                "codes and SpO2 coding may differ from automatic matching: "
                f"use --profile {kit.name}"
            )
    lights_off, lights_on = _lights(edf.annotations, profile)
    return Recording(
        path=edf.path,
        start=edf.start,
        duration_s=edf.duration_s,
        signals=signals,
        annotations=edf.annotations,
        gaps=edf.gaps,
        patient=edf.patient,
        equipment=edf.equipment,
        recording_code=edf.recording_code,
        file_type=edf.file_type,
        channel_choices=tuple(choices),
        other_labels=match.unused,
        profile_name=profile.name,
        warnings=tuple(warnings),
        sha256=edf.sha256,
        lights_off_s=lights_off,
        lights_on_s=lights_on,
    )


def read_recording(path: str | Path, profile: str | Path | Profile | None = None) -> Recording:
    """Read an EDF/EDF+ file and assign its channels to roles (stage 1).

    Parameters
    ----------
    path : the EDF/EDF+ file.
    profile : a built-in profile name, a TOML path, a loaded ``Profile``, or None for
        automatic matching (the ``generic`` profile, plus a hint when a kit profile fits).

    Raises
    ------
    UnreadableInput, ChannelError, ConfigError
    """
    automatic = profile is None
    prof = profile if isinstance(profile, Profile) else load_profile(profile or GENERIC)
    edf = read_edf(path)
    return recording_from_edf(edf, prof, automatic=automatic)


__all__ = ["read_recording", "recording_from_edf"]
