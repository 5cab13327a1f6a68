"""Synthetic HSAT nights with ground truth, for the demo, the tests and accuracy runs.

``generate_night(spec)`` builds a night from a ``NightSpec`` (every knob, frozen;
deterministic by ``spec.seed``); ``write_night(night, path)`` writes ``<stem>.edf``
(through ``hsat.io.write_edf``) and ``<stem>.truth.json`` (schema in
``hsat.synth._truth``); ``preset(name, seed, kit)`` gives typical nights (normal, mild,
moderate, severe, positional, central_csb, inadequate). The kits (generic, alder,
birch) are invented; none is modelled on a real device.

Mouth-breathing (cannula-shift) periods are recorded in the truth's ``invalid`` list as
role ``flow``, reason ``mouth breathing``: nasal pressure nearly flat while the thermal
sensor, the belts and SpO2 carry on; they are not apneas. Each truth event carries
``scored_under`` (the rule sets, among ``aasm-3pct`` and ``aasm-4pct``, that should
score it) and ``ambiguous``; ``expected`` holds the indices a perfect scorer would find.

Invented data: for the demo and tests only, never for clinical use.
"""

from hsat.synth._kits import KIT_NAMES, KITS, ChannelDef, KitDef, get_kit
from hsat.synth._night import SyntheticNight, generate_night, truth_path_for, write_night
from hsat.synth._presets import PRESET_NAMES, preset
from hsat.synth._spec import NightSpec
from hsat.synth._truth import RULE_SETS, measured_drop

__all__ = [
    "KITS", "KIT_NAMES", "PRESET_NAMES", "RULE_SETS", "ChannelDef", "KitDef", "NightSpec",
    "SyntheticNight", "generate_night", "get_kit", "measured_drop", "preset",
    "truth_path_for", "write_night",
]
