"""Channel profiles and automatic label matching.

The expected role of each generic label follows the channel-label table of standards.md
§7 (common practice, from memory) and the EDF+ standard-text-like labels; the kits'
labels, units and codes follow the kit table handed to the project (invented kits).
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import numpy as np
import pytest

from hsat.errors import ChannelError, ConfigError
from hsat.io import builtin_profile_names, load_profile, read_recording, write_edf
from hsat.recording import POSITION_CODES, Annotation, Signal

START = datetime(2025, 5, 6, 23, 0, 0)
SECONDS = 60


def _sig(label: str, fs: float, value: float | np.ndarray | None = None, unit: str = "") -> Signal:
    n = int(SECONDS * fs)
    if value is None:
        data = np.sin(2 * np.pi * 0.25 * np.arange(n) / fs)
    else:
        data = np.broadcast_to(np.asarray(value, dtype=float), (n,)).copy()
    return Signal("", label, fs, data, unit)


def _file(tmp_path: Path, signals: list[Signal], name: str = "k.edf", **kw) -> Path:
    return write_edf(tmp_path / name, signals, start=START, **kw)


def _roles(rec) -> dict[str, str]:
    return {role: sig.label for role, sig in rec.signals.items()}


def test_builtin_profiles_load():
    assert {"generic", "alder-r3", "birch-p2"} <= set(builtin_profile_names())
    for name in ("generic", "alder-r3", "birch-p2"):
        prof = load_profile(name)
        assert prof.name == name and "spo2" in prof.roles and "flow" in prof.roles


def test_generic_kit_labels_match_automatically(tmp_path):
    signals = [_sig("Resp nasal pressure", 100, unit="cmH2O"), _sig("Resp oro-nasal", 100),
               _sig("Resp thorax", 25), _sig("Resp abdomen", 25),
               _sig("SpO2", 1, 96.0, "%"), _sig("Pulse", 1, 60.0, "bpm"),
               _sig("Position", 1, 2.0), _sig("Snore", 200)]
    rec = read_recording(_file(tmp_path, signals))
    assert _roles(rec) == {
        "flow": "Resp nasal press", "thermal": "Resp oro-nasal", "thorax": "Resp thorax",
        "abdomen": "Resp abdomen", "spo2": "SpO2", "pulse": "Pulse", "position": "Position",
        "snore": "Snore",
    }
    reasons = {c.role: c.reason for c in rec.channel_choices}
    assert reasons["flow"] == ("label 'Resp nasal press' matched flow pattern "
                               "'resp nasal pres*' in profile generic")
    assert rec.profile_name == "generic" and rec.other_labels == ()
    # hsat's own codes: 2 = right
    assert np.all(rec.signals["position"].data == POSITION_CODES["right"])
    assert not any("kit profile" in w for w in rec.warnings)


@pytest.mark.parametrize(("labels", "expected"), [
    # standards.md §7 channel-label table (common practice, from memory)
    (["Nasal Pressure", "Thermistor", "Thor", "Abdo", "SaO2", "PR"],
     {"flow": "Nasal Pressure", "thermal": "Thermistor", "thorax": "Thor",
      "abdomen": "Abdo", "spo2": "SaO2", "pulse": "PR"}),
    (["Cannula", "Airflow", "RIP Thor", "RIP Abd", "Sat", "HR", "Pleth", "Body"],
     {"flow": "Cannula", "thermal": "Airflow", "thorax": "RIP Thor", "abdomen": "RIP Abd",
      "spo2": "Sat", "pulse": "HR", "pleth": "Pleth", "position": "Body"}),
    (["NPress", "Oral/Nasal Therm", "Chest", "Abdomen", "SpO2", "Pulse", "Activity"],
     {"flow": "NPress", "thermal": "Oral/Nasal Therm", "thorax": "Chest",
      "abdomen": "Abdomen", "spo2": "SpO2", "pulse": "Pulse", "activity": "Activity"}),
])
def test_common_labels_match_their_roles(tmp_path, labels, expected):
    rates = {"SpO2": 1, "SaO2": 1, "Sat": 1, "PR": 1, "HR": 1, "Pulse": 1, "Body": 1}
    signals = [_sig(lab, rates.get(lab, 10), 95.0 if lab in ("SpO2", "SaO2", "Sat") else None,
                    "%" if lab in ("SpO2", "SaO2", "Sat") else "") for lab in labels]
    assert _roles(read_recording(_file(tmp_path, signals))) == expected


def _alder(tmp_path: Path) -> Path:
    body = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0, 0.0], 10)
    spo2 = np.full(240, 95.5)
    spo2[100:120] = 0.0  # probe off written as 0
    signals = [_sig("NasalPres", 100, unit="mbar"), _sig("Therm", 50), _sig("Thorax", 50),
               _sig("Abdomen", 50), Signal("", "SpO2", 4, spo2, "%"),
               _sig("PR", 4, 62.0, "bpm"), Signal("", "BodyPos", 1, body),
               _sig("Snore", 100), _sig("Activity", 10, 1000.0, "mg")]
    return _file(tmp_path, signals, "alder.edf",
                 annotations=[Annotation(5.0, 0, "Lights off"), Annotation(55.0, 0, "Lights on")],
                 physical_ranges={"SpO2": (0.0, 100.0), "BodyPos": (-32768.0, 32767.0)})


def test_alder_profile_decodes_positions_probe_off_polarity_and_lights(tmp_path):
    path = _alder(tmp_path)
    plain = read_recording(path)
    rec = read_recording(path, "alder-r3")
    pos = rec.signals["position"].data
    want = [POSITION_CODES[p] for p in ("supine", "left", "right", "prone", "upright", "unknown")]
    assert np.array_equal(pos[::10], want)
    spo2 = rec.signals["spo2"]
    assert not spo2.mask[100:120].any() and spo2.mask[:100].all()
    # The kit writes inspiration as positive pressure; the profile flips it.
    assert np.allclose(rec.signals["flow"].data, -plain.signals["flow"].data)
    assert rec.lights_off_s == 5.0 and rec.lights_on_s == 55.0
    assert rec.profile_name == "alder-r3"


def test_alder_without_profile_says_which_profile_fits(tmp_path):
    rec = read_recording(_alder(tmp_path))
    assert set(rec.signals) == {"flow", "thermal", "thorax", "abdomen", "spo2", "pulse",
                                "position", "snore", "activity"}
    assert any("use --profile alder-r3" in w for w in rec.warnings)
    # generic codes read 5 as no known position
    assert any("position values 5" in w for w in rec.warnings)


def _birch(tmp_path: Path) -> Path:
    sat = np.full(60, 0.94)
    sat[20:30] = 1.27  # probe off
    pos = np.repeat([10.0, 20.0, 30.0, 40.0, 50.0, 20.0], 100)
    signals = [_sig("PFLOW", 32), _sig("CHEST", 32), _sig("ABD", 32),
               Signal("", "SAT", 1, sat, ""), _sig("HR", 1, 58.0, "bpm"),
               Signal("", "POS", 10, pos), _sig("PLETH", 32)]
    return _file(tmp_path, signals, "birch.edf",
                 physical_ranges={"SAT": (0.0, 1.28), "POS": (-32768.0, 32767.0)})


def test_birch_profile_scales_fraction_to_percent_and_decodes_codes(tmp_path):
    rec = read_recording(_birch(tmp_path), "birch-p2")
    spo2 = rec.signals["spo2"]
    assert spo2.unit == "%"
    assert np.allclose(spo2.data[spo2.mask], 94.0, atol=0.01)
    assert not spo2.mask[20:30].any() and spo2.mask[:20].all()
    pos = rec.signals["position"].data[::100]
    assert list(pos) == [POSITION_CODES[p] for p in
                         ("upright", "supine", "prone", "left", "right", "supine")]
    assert "thermal" not in rec.signals


def test_birch_without_profile_converts_the_fraction_and_points_to_the_profile(tmp_path):
    rec = read_recording(_birch(tmp_path))
    spo2 = rec.signals["spo2"]
    assert spo2.unit == "%" and np.isclose(np.median(spo2.data), 94.0, atol=0.01)
    reason = next(c.reason for c in rec.channel_choices if c.role == "spo2")
    assert "0-1 fraction" in reason
    assert any("use --profile birch-p2" in w for w in rec.warnings)
    assert np.all(rec.signals["position"].data == POSITION_CODES["unknown"])


def test_missing_belts_warn_that_apnea_type_cannot_be_classified(tmp_path):
    rec = read_recording(_file(tmp_path, [_sig("Nasal Pressure", 25), _sig("SpO2", 1, 95.0, "%")]))
    assert any("apnea type cannot be classified" in w for w in rec.warnings)


def test_thermal_only_serves_as_airflow(tmp_path):
    signals = [_sig("Resp oro-nasal", 25), _sig("Resp thorax", 25), _sig("Resp abdomen", 25),
               _sig("SpO2", 1, 95.0, "%")]
    rec = read_recording(_file(tmp_path, signals))
    assert rec.signals["flow"].label == rec.signals["thermal"].label == "Resp oro-nasal"
    assert any("no nasal-pressure channel" in w for w in rec.warnings)


def test_missing_spo2_or_flow_is_a_channel_error(tmp_path):
    with pytest.raises(ChannelError, match="no SpO2 channel"):
        read_recording(_file(tmp_path, [_sig("Nasal Pressure", 25), _sig("Thorax", 25)], "a.edf"))
    with pytest.raises(ChannelError, match="no airflow channel"):
        read_recording(_file(tmp_path, [_sig("Thorax", 25), _sig("SpO2", 1, 95.0, "%")], "b.edf"))


def test_profile_by_path_with_regex_and_glob(tmp_path):
    prof = tmp_path / "mine.toml"
    prof.write_text(
        'name = "mine"\n'
        '[roles.flow]\nlabels = ["re:^ch0?1$"]\n'
        '[roles.spo2]\nlabels = ["ox*"]\nscale = 0.5\noffset = 50.0\nunit = "%"\n'
    )
    signals = [_sig("CH1", 25), _sig("OXI", 1, 90.0, "x")]
    rec = read_recording(_file(tmp_path, signals), prof)
    assert _roles(rec) == {"flow": "CH1", "spo2": "OXI"}
    assert np.allclose(rec.signals["spo2"].data, 95.0, atol=1e-3)  # 90 * 0.5 + 50
    assert rec.signals["spo2"].unit == "%"
    assert rec.profile_name == "mine"


def test_profile_typo_names_the_key_and_the_allowed_keys(tmp_path):
    prof = tmp_path / "typo.toml"
    prof.write_text('name = "t"\n[roles.flow]\nlables = ["x"]\n[roles.spo2]\nlabels = ["y"]\n')
    with pytest.raises(ConfigError) as err:
        load_profile(prof)
    text = str(err.value)
    assert str(prof) in text and "roles.flow.lables" in text
    assert "allowed: labels, unit, scale, offset, convert, probe_off" in text


def test_unknown_role_and_bad_position_name_are_config_errors(tmp_path):
    prof = tmp_path / "role.toml"
    prof.write_text('name = "t"\n[roles.flw]\nlabels = ["x"]\n[roles.spo2]\nlabels = ["y"]\n')
    with pytest.raises(ConfigError, match="flw"):
        load_profile(prof)
    prof.write_text('name = "t"\n[roles.flow]\nlabels = ["x"]\n[roles.spo2]\nlabels = ["y"]\n'
                    '[roles.position]\nlabels = ["p"]\ncodes = { "1" = "sideways" }\n')
    with pytest.raises(ConfigError, match="sideways"):
        load_profile(prof)


def test_unknown_profile_name_lists_the_built_in_ones():
    with pytest.raises(ConfigError, match="alder-r3, birch-p2, generic"):
        load_profile("no-such-kit")
