"""The Python API: one function per job, each stringing the pipeline stages together.

The command line and the Makefile call these; a researcher can call them, or the stages
they use, from a notebook::

    import hsat.api as hsat
    rec = hsat.read("night.edf")                 # Recording
    cond = hsat.condition(rec)                   # Conditioned
    result = hsat.analyze("night.edf", "out/")   # writes summary.json, events.csv, PDF

Heavy modules are imported inside the functions so that a quick command (``hsat check``)
does not pay for the report or neurokit2 at start-up.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from hsat.errors import OutputError
from hsat.recording import Conditioned, Recording


def read(path: str | Path, profile: str | Path | None = None) -> Recording:
    """Read an EDF/EDF+ file and assign its channels to roles (stage 1)."""
    from hsat.io import read_recording

    return read_recording(path, profile=profile)


def condition(
    recording: Recording,
    *,
    excluded: list[tuple[float, float]] | None = None,
) -> Conditioned:
    """Clean every channel, mark invalid data, judge wake, compute monitoring time (stage 2).

    ``excluded`` holds extra (start_s, end_s) periods to leave out of monitoring time
    (e.g. from the patient's diary).
    """
    from hsat.condition import condition_recording

    return condition_recording(recording, excluded=excluded or [])


def check(path: str | Path, profile: str | Path | None = None) -> dict[str, Any]:
    """Read and condition one recording and describe it (what ``hsat check`` prints).

    Returns a JSON-ready dict with at least ``monitoring_time_h`` and ``adequate``.
    """
    from hsat.condition import describe

    return describe(condition(read(path, profile)))


@dataclass(frozen=True)
class StudyResult:
    """What ``analyze`` wrote: the study folder and the files in it."""

    out_dir: Path
    summary: dict[str, Any]
    summary_path: Path
    events_path: Path
    report_path: Path | None


def analyze(
    path: str | Path,
    out_dir: str | Path,
    *,
    rules: list[str] | None = None,
    profile: str | Path | None = None,
    pdf: bool = True,
    intake: str | Path | None = None,
    site: str | Path | None = None,
    excluded: list[tuple[float, float]] | None = None,
) -> StudyResult:
    """Run the whole pipeline on one night and write its study folder.

    Parameters
    ----------
    path : EDF/EDF+ file of the night.
    out_dir : the study folder; created owner-only if missing.
    rules : rule-set names or TOML paths; both built-in AASM sets when None.
    profile : channel profile (name or TOML path); automatic label matching when None.
    pdf : render the draft report.
    intake : intake sidecar with patient and kit details; ``<stem>.intake.toml`` beside
        the recording is used when None and it exists.
    site : site settings (clinic name, address, phone) for the report header.
    """
    from hsat.breaths import detect_breaths
    from hsat.events import score_events
    from hsat.intake import load_intake_for
    from hsat.metrics import summarize
    from hsat.outputs import write_study
    from hsat.rulesets import load_rule_sets

    rule_sets = load_rule_sets(rules)
    recording = read(path, profile)
    intake_data = load_intake_for(path, intake)
    periods = list(excluded or [])
    if intake_data is not None:
        periods += intake_data.excluded_periods(recording.start)  # the patient's diary
    cond = condition(recording, excluded=periods)
    breaths = detect_breaths(cond)
    scoring = score_events(cond, breaths, rule_sets)
    summary = summarize(cond, breaths, scoring, rule_sets, intake=intake_data)
    summary_path, events_path = write_study(out_dir, summary, scoring)
    report_path = None
    if pdf:
        try:
            from hsat.report import render_draft
        except ImportError as exc:
            raise OutputError(out_dir, f"the PDF report is not available ({exc}); "
                              "summary.json and events.csv were written; use --no-pdf "
                              "to skip the report") from None
        report_path = render_draft(out_dir, site=site, intake=intake_data, conditioned=cond)
    return StudyResult(Path(out_dir), summary, summary_path, events_path, report_path)
