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

import gc
import threading
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


def _import_stages(first_ready: threading.Event) -> None:
    """Import the later stages' modules in two groups (see ``analyze``); set
    ``first_ready`` once the conditioning and breath modules (and scipy) are in. pandas
    is first needed by the scoring stage, so it comes in the second group, while the
    night is conditioned."""
    try:
        import hsat.breaths  # noqa: F401
        import hsat.condition  # noqa: F401
    except Exception:  # noqa: BLE001 - the main thread imports them again and reports it
        pass
    finally:
        first_ready.set()
    try:
        import pandas  # noqa: F401

        import hsat.events  # noqa: F401
        import hsat.metrics  # noqa: F401
        import hsat.outputs  # noqa: F401
    except Exception:  # noqa: BLE001 - as above
        pass


@dataclass(frozen=True)
class StudyResult:
    """What ``analyze`` wrote: the study folder and the files in it."""

    out_dir: Path
    summary: dict[str, Any]
    summary_path: Path
    events_path: Path
    report_path: Path | None


#: Files that make a study folder a record a physician has acted on.
_PHYSICIAN_RECORDS = ("signoff-log.jsonl", "review-edits.jsonl")


def refuse_signed_or_reviewed(out_dir: str | Path) -> None:
    """Refuse to analyse into a folder holding a sign-off log or a review edit log.

    The signed PDFs and the edit log refer to the scoring in that folder; replacing its
    summary.json and events.csv would leave them pointing at numbers nobody reviewed.
    """
    folder = Path(out_dir)
    found = [name for name in _PHYSICIAN_RECORDS if (folder / name).exists()]
    if found:
        raise OutputError(folder, f"holds {' and '.join(found)} (a signed or reviewed "
                          "study): analyse into a new folder; signed reports and the "
                          "review are kept as they are")


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

    Raises
    ------
    OutputError
        ``out_dir`` already holds a signed report or a physician's review of an earlier
        analysis: a new analysis there would replace the scoring they refer to, so it
        must go to a new folder.
    """
    refuse_signed_or_reviewed(out_dir)
    # Importing creates hundreds of thousands of objects and no garbage: the cyclic
    # collector only slows it down (about 0.1 s of CPU), so it pauses until the imports
    # below are done, and is restored however this ends.
    collecting = gc.isenabled()
    gc.disable()
    try:
        return _analyze(path, out_dir, rules=rules, profile=profile, pdf=pdf, intake=intake,
                        site=site, excluded=excluded, collecting=collecting)
    finally:
        if collecting:
            gc.enable()


def _analyze(
    path: str | Path,
    out_dir: str | Path,
    *,
    rules: list[str] | None,
    profile: str | Path | None,
    pdf: bool,
    intake: str | Path | None,
    site: str | Path | None,
    excluded: list[tuple[float, float]] | None,
    collecting: bool,
) -> StudyResult:
    """``analyze``'s work; the garbage collector is paused on entry (``collecting``: it
    was running before) and resumed here once the modules are imported."""
    from hsat.intake import load_intake_for
    from hsat.io import read_recording
    from hsat.rulesets import load_rule_sets

    rule_sets = load_rule_sets(rules)
    # Most of a night's start-up is importing scipy and pandas. A second thread imports
    # the modules of the later stages while this one works: pandas and the conditioning
    # and breath modules (scipy) while the file is read, which mostly waits on the disk
    # and in numpy (both release the GIL), then the scoring and output modules while the
    # night is conditioned. This thread imports nothing meanwhile (so the import locks
    # can never cross); it waits for each group before using it.
    first_ready = threading.Event()
    loading = threading.Thread(target=_import_stages, args=(first_ready,),
                               name="hsat-import", daemon=True)
    loading.start()
    try:
        recording = read_recording(path, profile=profile)
        intake_data = load_intake_for(path, intake)
        periods = list(excluded or [])
        if intake_data is not None:
            periods += intake_data.excluded_periods(recording.start)  # the patient's diary
        first_ready.wait()
        from hsat.breaths import detect_breaths
        from hsat.condition import condition_recording

        cond = condition_recording(recording, excluded=periods)
        breaths = detect_breaths(cond)
    finally:
        loading.join()

    from hsat.events import score_events
    from hsat.metrics import summarize
    from hsat.outputs import write_study

    if collecting:
        gc.enable()
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
