"""Study folders for the report and sign-off tests: short synthetic nights, analysed by
the real pipeline (``hsat.api.analyze``), then rendered as a physician would get them.

The nights, the patient and the clinic are invented test inputs (``hsat.synth``); nothing
here describes a real person or place.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import subprocess
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

#: Adequate night: past the 4 h of valid flow and SpO2 an adequate HSAT needs
#: (Kapur et al. 2017, standards.md section 3.3).
ADEQUATE_HOURS = 5.0
#: Too short to reach 4 h of valid signal: technically inadequate by the same rule.
INADEQUATE_HOURS = 1.5

INTAKE_TOML = """\
[patient]
name = "Testcase, Alpha"
id = "T-0001"
birthdate = 1970-05-17
sex = "F"

[study]
kit = "generic"
kit_serial = "GEN-TEST-01"
referring_clinician = "Dr Referrer Test"
interpreting_physician = "Dr Reader Test, MD"
notes = "Test intake: probe re-attached once."

[[diary_exclusions]]
start = "01:00"
end = "01:10"
reason = "test diary entry"
"""

SITE_TOML = """\
[clinic]
name = "Test Clinic for Sleep Studies"
address = ["1 Test Lane", "Testville TE5 7ST"]
phone = "+00 0000 0000"
email = "sleep@test-clinic.invalid"
"""


def make_study(root: Path, *, hours: float, seed: int, with_intake: bool = True,
               preset_name: str = "moderate") -> tuple[Path, Path, Path]:
    """Generate, write and analyse one night (no PDF); return (study, edf, site file)."""
    import hsat.api as api
    from hsat.synth import generate_night, preset, write_night

    nights = root / "nights"
    nights.mkdir(parents=True, exist_ok=True)
    edf = nights / f"report-night-{seed}.edf"
    write_night(generate_night(preset(preset_name, seed=seed, duration_h=hours)), edf)
    if with_intake:
        (nights / f"report-night-{seed}.intake.toml").write_text(INTAKE_TOML, encoding="utf-8")
    site = root / "site.toml"
    site.write_text(SITE_TOML, encoding="utf-8")
    study = root / f"study-{seed}"
    api.analyze(edf, study, pdf=False)
    return study, edf, site


def clone(study: Path, name: str) -> Path:
    """A copy of a study folder beside it, for one test to change."""
    dest = study.parent / f"{name}-{uuid.uuid4().hex[:8]}"
    shutil.copytree(study, dest)
    return dest


def page_texts(pdf: Path) -> list[str]:
    from pypdf import PdfReader

    return [page.extract_text() or "" for page in PdfReader(str(pdf)).pages]


def flat(text: str) -> str:
    """Whitespace collapsed (wrapped lines join)."""
    return " ".join(text.split())


def lines(text: str) -> list[str]:
    return [ln.strip() for ln in text.splitlines() if ln.strip()]


def values_after(text: str, label: str, n: int) -> list[str]:
    """The ``n`` lines after the line that is exactly ``label`` (a table row)."""
    ls = lines(text)
    assert label in ls, f"label {label!r} not on the page"
    i = ls.index(label)
    return ls[i + 1:i + 1 + n]


@contextlib.contextmanager
def read_only(folder: Path) -> Iterator[None]:
    """Make ``folder`` refuse new files for the duration of the block.

    A normal user gets the folder's write permission removed. Root ignores permissions,
    so for root the folder is bind-mounted onto itself read-only (and unmounted after);
    the test is skipped where even that is not allowed.
    """
    if os.geteuid() != 0:
        folder.chmod(0o500)
        try:
            yield
        finally:
            folder.chmod(0o700)
        return
    mounted = subprocess.run(["mount", "--bind", str(folder), str(folder)],
                             capture_output=True).returncode == 0
    if not mounted:
        pytest.skip("running as root and cannot bind-mount a read-only folder")
    try:
        if subprocess.run(["mount", "-o", "remount,ro,bind", str(folder)],
                          capture_output=True).returncode != 0:
            pytest.skip("running as root and cannot remount the folder read-only")
        yield
    finally:
        subprocess.run(["umount", str(folder)], capture_output=True, check=False)
