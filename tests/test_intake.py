"""The intake sidecar and the site settings: format, discovery, clock times, errors."""

from __future__ import annotations

import re
from datetime import date, datetime
from pathlib import Path

import pytest

import hsat.intake as intake_module
from hsat.errors import EXIT_CONFIG, ConfigError
from hsat.intake import intake_path_for, load_intake, load_intake_for
from hsat.site import Site, load_site


def _docstring_example(module: object) -> str:
    """The TOML example in a module docstring (the indented block after '::')."""
    doc = module.__doc__ or ""
    block = doc.split("::", 1)[1]
    lines = []
    for line in block.splitlines()[1:]:
        if line and not line.startswith("    "):
            break
        lines.append(line[4:])
    return "\n".join(lines)


def test_documented_example_is_valid(tmp_path: Path):
    path = tmp_path / "night-042.intake.toml"
    path.write_text(_docstring_example(intake_module), encoding="utf-8")
    intake = load_intake(path)
    assert intake.patient.name == "Doe, Jane"
    assert intake.patient.birthdate == date(1961, 4, 23)
    assert intake.patient.sex == "female"
    assert intake.study.kit_serial == "AL-3-00917"
    assert intake.study.study_date == date(2024, 3, 1)
    assert len(intake.diary_exclusions) == 2


def test_sidecar_beside_the_recording_is_found(tmp_path: Path):
    edf = tmp_path / "night-7.edf"
    assert intake_path_for(edf) == tmp_path / "night-7.intake.toml"
    assert load_intake_for(edf) is None
    (tmp_path / "night-7.intake.toml").write_text('[patient]\nname = "Beside"\n')
    assert load_intake_for(edf).patient.name == "Beside"
    other = tmp_path / "other.toml"
    other.write_text('[patient]\nname = "Explicit"\n')
    assert load_intake_for(edf, other).patient.name == "Explicit"


def test_empty_strings_count_as_not_recorded(tmp_path: Path):
    path = tmp_path / "x.intake.toml"
    path.write_text('[patient]\nname = ""\nid = "  "\nsex = "M"\n[study]\nnotes = ""\n')
    intake = load_intake(path)
    assert intake.patient.name is None and intake.patient.id is None
    assert intake.patient.sex == "male"  # EDF+ patient subfield letters F/M accepted
    assert intake.study.notes is None


@pytest.mark.parametrize(
    ("body", "key"),
    [
        ('[patient]\nnmae = "typo"\n', "patient.nmae"),
        ('[patient]\nbirthdate = "23/04/1961"\n', "patient.birthdate"),
        ('[patient]\nsex = "sometimes"\n', "patient.sex"),
        ('[studdy]\nkit = "x"\n', "studdy"),
        ('[[diary_exclusions]]\nstart = "25:00"\nend = "01:00"\n', "diary_exclusions.0.start"),
        ('[[diary_exclusions]]\nstart = "01:00"\nend = 300\n', "diary_exclusions.0"),
        ('[[diary_exclusions]]\nstart = 600\nend = 300\n', "diary_exclusions.0"),
    ],
)
def test_bad_intake_names_the_file_and_the_key(tmp_path: Path, body: str, key: str):
    path = tmp_path / "bad.intake.toml"
    path.write_text(body)
    with pytest.raises(ConfigError) as err:
        load_intake(path)
    assert err.value.exit_code == EXIT_CONFIG
    assert str(path) in str(err.value)
    assert f"key '{key}" in str(err.value)


def test_not_toml_and_missing_file_are_config_errors(tmp_path: Path):
    path = tmp_path / "broken.intake.toml"
    path.write_text("[patient\nname = 1")
    with pytest.raises(ConfigError, match="not a valid TOML"):
        load_intake(path)
    with pytest.raises(ConfigError, match="cannot read"):
        load_intake(tmp_path / "absent.toml")


def test_diary_clock_times_on_the_recording_clock(tmp_path: Path):
    # Plain clock arithmetic (common practice): a recording that starts at 22:30.
    path = tmp_path / "d.intake.toml"
    path.write_text(
        '[[diary_exclusions]]\nstart = "02:10"\nend = "02:35"\n'   # after midnight
        '[[diary_exclusions]]\nstart = "23:50"\nend = "00:10"\n'   # spans midnight
        '[[diary_exclusions]]\nstart = "22:40:30"\nend = "22:41"\n'  # seconds given
        '[[diary_exclusions]]\nstart = 100\nend = 200.5\n'          # seconds from start
    )
    periods = load_intake(path).excluded_periods(datetime(2024, 3, 1, 22, 30))
    assert periods == [(13200.0, 14700.0), (4800.0, 6000.0), (630.0, 660.0), (100.0, 200.5)]


def test_site_settings_load_and_refuse_unknown_keys(tmp_path: Path):
    good = tmp_path / "site.toml"
    good.write_text('[clinic]\nname = "A Clinic"\naddress = ["1 Road", "Town"]\n'
                    'phone = "123"\nfax = "456"\n')
    site = load_site(good)
    assert site.name == "A Clinic" and site.address == ("1 Road", "Town")
    assert "Fax 456" in site.contact_line()
    assert not site.is_unset and Site.unset().is_unset
    for body, key in (('[clinic]\nname = "A"\naddress = ["x"]\nphone = "1"\nweb = "y"\n',
                       "clinic.web"),
                      ('[clinic]\nname = "A"\naddress = ["x"]\n', "clinic.phone"),
                      ('[clinic]\nname = "A"\naddress = []\nphone = "1"\n', "clinic.address"),
                      ('name = "A"\n', "clinic")):
        bad = tmp_path / "bad-site.toml"
        bad.write_text(body)
        with pytest.raises(ConfigError) as err:
            load_site(bad)
        assert str(bad) in str(err.value)
        assert re.search(rf"key '{re.escape(key)}", str(err.value)), str(err.value)
    with pytest.raises(ConfigError, match="cannot read"):
        load_site(tmp_path / "none.toml")
