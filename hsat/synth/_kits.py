"""The three invented home-monitor kits the generator writes (see KITS.md in the brief).

Each kit fixes its channel labels, sample rates, units, physical ranges, body-position
codes, probe-off codes, SpO2 resolution and the sign and gain of each sensor. None is
modelled on a real device.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

KitName = Literal["generic", "alder", "birch"]
KIT_NAMES: tuple[str, ...] = ("generic", "alder", "birch")

#: Physical ranges chosen so EDF's linear scaling is exact: over the int16 range the step
#: is 1 (position codes), 0.01 (percent, bpm) or 0.0001 (a 0-1 fraction). Codes such as
#: probe-off 0 or 1.27 then read back exactly.
_INT16_RANGE = (-32768.0, 32767.0)
_STEP_001 = (-327.68, 327.67)
_STEP_00001 = (-3.2768, 3.2767)


@dataclass(frozen=True)
class ChannelDef:
    """One channel a kit writes."""

    role: str
    label: str
    fs: float
    unit: str
    physical_range: tuple[float, float]
    transducer: str = ""
    prefilter: str = ""


@dataclass(frozen=True)
class KitDef:
    """Everything kit-specific: channels, codes, gains and polarities.

    Gains turn the generator's physiological units into the kit's written units:
    ``pressure_gain`` per (L/s)^2 of nasal flow, ``thermal_gain`` per L/s of oronasal
    flow, ``belt_gain`` per litre of belt-volume excursion. ``inspiration_sign`` is the
    sign of inspiration in the written nasal pressure (a real cannula sees negative
    pressure on inspiration; alder writes it inverted, inspiration positive).
    """

    name: str
    equipment: str
    channels: tuple[ChannelDef, ...]
    position_codes: dict[str, int]
    spo2_scale: float            # written value = percent * spo2_scale
    spo2_probe_off: float        # written value while the probe is off
    pulse_probe_off: float
    spo2_integer: bool           # the oximeter reports whole percent steps
    spo2_averaging_s: float      # oximeter averaging window
    inspiration_sign: float
    pressure_gain: float
    thermal_gain: float
    belt_gain: float
    snore_gain: float
    lights_texts: tuple[str, str] | None  # (off, on) EDF+ annotation texts
    lights_policy: Literal["always", "sometimes", "never"]
    extra: dict[str, float] = field(default_factory=dict)

    def channel(self, role: str) -> ChannelDef | None:
        for ch in self.channels:
            if ch.role == role:
                return ch
        return None

    @property
    def roles(self) -> tuple[str, ...]:
        return tuple(ch.role for ch in self.channels)


_GENERIC = KitDef(
    name="generic",
    equipment="hsat-synth generic",
    channels=(
        # "Resp nasal pressure" cut to the 16 characters of the EDF label field
        ChannelDef("flow", "Resp nasal press", 100, "cmH2O", (-15.0, 15.0),
                   "nasal cannula pressure transducer", "HP:DC LP:40Hz"),
        ChannelDef("thermal", "Resp oro-nasal", 100, "uV", (-1000.0, 1000.0),
                   "oronasal thermal sensor", "HP:0.1Hz LP:15Hz"),
        ChannelDef("thorax", "Resp thorax", 25, "uV", (-1200.0, 1200.0),
                   "RIP belt", "HP:0.05Hz LP:15Hz"),
        ChannelDef("abdomen", "Resp abdomen", 25, "uV", (-1200.0, 1200.0),
                   "RIP belt", "HP:0.05Hz LP:15Hz"),
        ChannelDef("spo2", "SpO2", 1, "%", _STEP_001, "finger pulse oximeter"),
        ChannelDef("pulse", "Pulse", 1, "bpm", _STEP_001, "finger pulse oximeter"),
        ChannelDef("position", "Position", 1, "", _INT16_RANGE, "3-axis position sensor"),
        ChannelDef("snore", "Snore", 200, "uV", (-500.0, 500.0), "snore microphone"),
    ),
    position_codes={"supine": 0, "left": 1, "right": 2, "prone": 3, "upright": 4},
    spo2_scale=1.0, spo2_probe_off=0.0, pulse_probe_off=0.0,
    spo2_integer=True, spo2_averaging_s=3.0,
    inspiration_sign=-1.0, pressure_gain=6.0, thermal_gain=300.0, belt_gain=1500.0,
    snore_gain=60.0,
    lights_texts=("LIGHTS OFF", "LIGHTS ON"), lights_policy="sometimes",
)

_ALDER = KitDef(
    name="alder",
    equipment="alder R3",
    channels=(
        ChannelDef("flow", "NasalPres", 100, "mbar", (-12.0, 12.0), "pressure cannula"),
        ChannelDef("thermal", "Therm", 50, "uV", (-800.0, 800.0), "thermistor"),
        ChannelDef("thorax", "Thorax", 50, "mV", (-3.0, 3.0), "RIP"),
        ChannelDef("abdomen", "Abdomen", 50, "mV", (-3.0, 3.0), "RIP"),
        ChannelDef("spo2", "SpO2", 4, "%", _STEP_001, "oximeter"),
        ChannelDef("pulse", "PR", 4, "bpm", _STEP_001, "oximeter"),
        ChannelDef("position", "BodyPos", 1, "", _INT16_RANGE, "position"),
        ChannelDef("snore", "Snore", 100, "uV", (-500.0, 500.0), "microphone"),
        ChannelDef("activity", "Activity", 10, "mg", (0.0, 8000.0), "accelerometer"),
    ),
    position_codes={"unknown": 0, "supine": 1, "left": 2, "right": 3, "prone": 4,
                    "upright": 5},
    spo2_scale=1.0, spo2_probe_off=0.0, pulse_probe_off=0.0,
    spo2_integer=False, spo2_averaging_s=4.0,
    inspiration_sign=1.0, pressure_gain=5.0, thermal_gain=220.0, belt_gain=3.5,
    snore_gain=45.0,
    lights_texts=("Lights off", "Lights on"), lights_policy="always",
)

_BIRCH = KitDef(
    name="birch",
    equipment="birch P2",
    channels=(
        ChannelDef("flow", "PFLOW", 32, "", (-4000.0, 4000.0), "pressure flow"),
        ChannelDef("thorax", "CHEST", 32, "", (-3000.0, 3000.0), "effort"),
        ChannelDef("abdomen", "ABD", 32, "", (-3000.0, 3000.0), "effort"),
        ChannelDef("spo2", "SAT", 1, "", _STEP_00001, "oximeter"),
        ChannelDef("pulse", "HR", 1, "bpm", _STEP_001, "oximeter"),
        ChannelDef("position", "POS", 10, "", _INT16_RANGE, "position"),
        ChannelDef("pleth", "PLETH", 32, "", (-2048.0, 2048.0), "oximeter"),
    ),
    position_codes={"upright": 10, "supine": 20, "prone": 30, "left": 40, "right": 50},
    spo2_scale=0.01, spo2_probe_off=1.27, pulse_probe_off=0.0,
    spo2_integer=True, spo2_averaging_s=2.0,
    inspiration_sign=-1.0, pressure_gain=700.0, thermal_gain=0.0, belt_gain=3000.0,
    snore_gain=0.0,
    lights_texts=None, lights_policy="never",
)

KITS: dict[str, KitDef] = {"generic": _GENERIC, "alder": _ALDER, "birch": _BIRCH}


def get_kit(name: str) -> KitDef:
    """The kit definition by name (``generic``, ``alder`` or ``birch``)."""
    try:
        return KITS[name]
    except KeyError:
        raise ValueError(f"unknown kit {name!r}; known kits: {', '.join(KIT_NAMES)}") from None
