"""Everything one report is drawn from, gathered from a study folder.

Sources, in order of precedence:

- ``summary.json`` and ``events.csv`` (the scoring; required); after a review
  (summary.json has a ``review`` object) ``events-reviewed.csv`` replaces events.csv,
  and the review facts come with it (``hsat.report._review.load_review``, which refuses
  a reviewed summary whose event tables are missing or changed since the rescore);
- the intake sidecar (patient and study details) given explicitly, else the one kept
  in the study folder's ``report-context.json``, else ``<stem>.intake.toml`` beside the
  EDF named in summary.json; the EDF header's patient fields (summary.json ``patient``)
  fill whatever the intake leaves empty;
- the site settings given explicitly, else the ones kept in ``report-context.json``;
- the overnight traces: from the conditioned night when the caller has it (``analyze``),
  else from the EDF given, else the ones kept in ``report-context.json`` when they belong
  to the same input file (same SHA-256), else from the EDF named in summary.json if it
  can be found (``hsat.api.read`` + ``hsat.api.condition``, about a second for a 10-hour
  night).

``report-context.json`` is rewritten when the draft is rendered, so that a signed version
can be drawn later, and identically, without the EDF.
"""

from __future__ import annotations

import csv
import hashlib
import json
from dataclasses import dataclass, field
from datetime import date, datetime
from pathlib import Path
from typing import Any

from hsat.errors import HsatError, UnreadableInput
from hsat.intake import Intake, load_intake, load_intake_for
from hsat.outputs import atomic_write_text
from hsat.recording import Conditioned
from hsat.report._review import REVIEWED_EVENTS, ReviewFacts, load_review
from hsat.site import Site, load_site

SUMMARY = "summary.json"
EVENTS = "events.csv"
CONTEXT = "report-context.json"
CONTEXT_VERSION = 1


@dataclass(frozen=True)
class PatientView:
    """Patient facts as printed; None means "not recorded"."""

    name: str | None
    id: str | None
    birthdate: date | None
    sex: str | None
    age_years: float | None


@dataclass(frozen=True)
class StudyView:
    study_date: date | None
    kit: str | None
    kit_serial: str | None
    referring_clinician: str | None
    interpreting_physician: str | None
    notes: str | None


@dataclass(frozen=True)
class ReportContext:
    study_dir: Path
    summary: dict[str, Any]
    summary_sha256: str
    events: list[dict[str, str]]
    events_sha256: str
    events_file: str
    start: datetime
    rule_names: list[str]
    patient: PatientView
    study: StudyView
    site: Site
    intake: Intake | None
    traces: dict[str, Any] | None
    traces_note: str = ""
    diary: list[dict[str, Any]] = field(default_factory=list)
    review: ReviewFacts = field(default_factory=ReviewFacts)

    def rule_set(self, name: str) -> dict[str, Any]:
        for rs in self.summary.get("rule_sets", []):
            if rs.get("name") == name:
                return rs
        return {}


def _clean(value: object) -> str | None:
    """EDF+ writes ``X`` for an unknown subfield; treat it and blanks as missing."""
    if value is None:
        return None
    s = str(value).strip()
    return None if s in ("", "X", "x") else s


def _parse_date(value: object) -> date | None:
    if isinstance(value, date):
        return value
    s = _clean(value)
    if not s:
        return None
    try:
        return date.fromisoformat(s[:10])
    except ValueError:
        return None


def _sex(value: object) -> str | None:
    s = _clean(value)
    if s is None:
        return None
    return {"f": "female", "m": "male", "x": "other", "u": "unknown"}.get(s.lower(), s.lower())


def read_json_file(path: Path) -> tuple[dict[str, Any], str]:
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UnreadableInput(path, "not found: run `hsat analyze` for this study first") from None
    except OSError as exc:
        raise UnreadableInput(path, f"cannot read ({exc.strerror})") from None
    try:
        data = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise UnreadableInput(path, f"not valid JSON ({exc})") from None
    if not isinstance(data, dict):
        raise UnreadableInput(path, "expected a JSON object")
    return data, hashlib.sha256(raw).hexdigest()


def read_events(path: Path) -> tuple[list[dict[str, str]], str]:
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UnreadableInput(path, "not found: run `hsat analyze` for this study first") from None
    except OSError as exc:
        raise UnreadableInput(path, f"cannot read ({exc.strerror})") from None
    rows = list(csv.DictReader(raw.decode("utf-8", errors="replace").splitlines()))
    needed = {"onset_s", "duration_s", "event", "rule_sets"}
    if rows and not needed <= set(rows[0]):
        raise UnreadableInput(path, f"missing columns {sorted(needed - set(rows[0]))}")
    return rows, hashlib.sha256(raw).hexdigest()


def _start_time(summary: dict[str, Any], path: Path) -> datetime:
    text = str(summary.get("study", {}).get("start_time", ""))
    try:
        return datetime.fromisoformat(text).replace(tzinfo=None)
    except ValueError:
        raise UnreadableInput(path, f"study.start_time {text!r} is not an ISO 8601 time") from None


def _patient(summary: dict[str, Any], intake: Intake | None, study_date: date | None
             ) -> PatientView:
    edf = summary.get("patient", {}) or {}
    ip = intake.patient if intake else None
    birth = (ip.birthdate if ip and ip.birthdate else None) or _parse_date(edf.get("birthdate"))
    age: float | None = None
    if birth and study_date:
        age = (study_date - birth).days / 365.25
    elif isinstance(edf.get("age_years"), int | float):
        age = float(edf["age_years"])
    return PatientView(
        name=(ip.name if ip and ip.name else None) or _clean(edf.get("name")),
        id=(ip.id if ip and ip.id else None) or _clean(edf.get("code") or edf.get("id")),
        birthdate=birth,
        sex=(ip.sex if ip and ip.sex else None) or _sex(edf.get("sex")),
        age_years=age,
    )


def _study(summary: dict[str, Any], intake: Intake | None, start: datetime) -> StudyView:
    kit = summary.get("kit", {}) or {}
    s = intake.study if intake else None

    def pick(key: str) -> str | None:
        value = getattr(s, key, None) if s else None
        return _clean(value) or _clean(kit.get(key))

    study_date = (s.study_date if s and s.study_date else None) or _parse_date(
        kit.get("study_date")) or start.date()
    return StudyView(
        study_date=study_date,
        kit=pick("kit") or _clean(summary.get("study", {}).get("equipment")),
        kit_serial=pick("kit_serial"),
        referring_clinician=pick("referring_clinician"),
        interpreting_physician=pick("interpreting_physician"),
        notes=pick("notes"),
    )


def _load_saved(study_dir: Path) -> dict[str, Any]:
    path = study_dir / CONTEXT
    if not path.exists():
        return {}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError):
        return {}  # a damaged cache is rebuilt, never trusted
    return data if isinstance(data, dict) and data.get("version") == CONTEXT_VERSION else {}


def _profile_arg(summary: dict[str, Any]) -> str | None:
    profile = _clean(summary.get("study", {}).get("profile"))
    if not profile or profile.lower().startswith(("auto", "none")):
        return None  # automatic label matching
    return profile


def find_recording(folder: Path, summary: dict[str, Any]) -> Path | None:
    """The EDF named in summary.json: absolute, or beside/inside the study folder, or in
    the working directory (summary.json keeps only the file name)."""
    named = str(summary.get("study", {}).get("input_file", "") or "")
    if not named:
        return None
    raw = Path(named).expanduser()
    candidates = (raw,) if raw.is_absolute() else (
        folder / raw, Path.cwd() / raw, folder / raw.name, folder.parent / raw.name)
    return next((c for c in candidates if c.is_file()), None)


def compute_traces(
    summary: dict[str, Any], edf: Path | None = None, cond: Conditioned | None = None
) -> tuple[dict[str, Any] | None, str]:
    """Overnight traces from a conditioned night or the EDF, or (None, why not)."""
    from hsat import api
    from hsat.report._traces import overnight_traces

    expected = summary.get("study", {}).get("input_sha256")
    if cond is None:
        if edf is None or not edf.is_file():
            name = summary.get("study", {}).get("input_file", "")
            return None, (f"the recording {name} was not found (pass it with --recording), "
                          "so the signal traces are missing")
        try:
            cond = api.condition(api.read(edf, _profile_arg(summary)))
        except HsatError as exc:
            return None, f"the recording could not be re-read for the graphs ({exc})"
    if cond.recording.sha256 and expected and cond.recording.sha256 != expected:
        return None, (f"{Path(cond.recording.path).name} is not the file this study was "
                      "analysed from (SHA-256 differs); signal traces omitted")
    return overnight_traces(cond), ""


def load_context(
    study_dir: str | Path,
    *,
    site: str | Path | Site | None = None,
    intake: str | Path | Intake | None = None,
    recording: str | Path | None = None,
    conditioned: Conditioned | None = None,
    allow_compute: bool = True,
) -> ReportContext:
    """Gather a study folder's report inputs (see the module docstring for precedence).

    ``conditioned`` (the night as ``hsat.api.condition`` returned it) or ``recording``
    (the EDF) give the overnight traces; otherwise the kept traces are used, or the EDF
    named in summary.json is looked for.
    """
    folder = Path(study_dir)
    if not folder.is_dir():
        raise UnreadableInput(folder, "study folder not found")
    summary, summary_sha = read_json_file(folder / SUMMARY)
    review = load_review(folder, summary)
    # After a rescore the reviewed table replaces the automatic one (load_review has
    # checked it is the table the reviewed summary was computed from).
    events_file = REVIEWED_EVENTS if isinstance(summary.get("review"), dict) else EVENTS
    events, events_sha = read_events(folder / events_file)
    start = _start_time(summary, folder / SUMMARY)
    saved = _load_saved(folder)

    if isinstance(site, Site):
        site_obj = site
    elif site is not None:
        site_obj = load_site(site)
    elif saved.get("site"):
        site_obj = Site.model_validate(saved["site"])
    else:
        site_obj = Site.unset()

    if isinstance(intake, Intake):
        intake_obj: Intake | None = intake
    elif intake is not None:
        intake_obj = load_intake(intake)
    elif saved.get("intake"):
        intake_obj = Intake.model_validate(saved["intake"])
    else:
        edf_found = Path(recording) if recording is not None else find_recording(folder, summary)
        intake_obj = load_intake_for(edf_found) if edf_found is not None else None

    traces = saved.get("traces")
    note = ""
    sha = summary.get("study", {}).get("input_sha256")
    if conditioned is not None or recording is not None:
        edf = Path(recording) if recording is not None else None
        if edf is not None and not edf.is_file():
            raise UnreadableInput(edf, "no such recording")
        traces, note = compute_traces(summary, edf, conditioned)
    elif not traces or traces.get("input_sha256") != sha:
        traces, note = (compute_traces(summary, find_recording(folder, summary))
                        if allow_compute else (None, "signal traces were not computed"))
    study = _study(summary, intake_obj, start)
    diary = []
    if intake_obj:
        for d, (s0, s1) in zip(intake_obj.diary_exclusions, intake_obj.excluded_periods(start),
                               strict=True):
            diary.append({"start_s": s0, "end_s": s1, "reason": d.reason or "patient diary"})
    return ReportContext(
        study_dir=folder,
        summary=summary,
        summary_sha256=summary_sha,
        events=events,
        events_sha256=events_sha,
        events_file=events_file,
        start=start,
        rule_names=[str(n) for n in (summary.get("indices") or {})],
        patient=_patient(summary, intake_obj, study.study_date),
        study=study,
        site=site_obj,
        intake=intake_obj,
        traces=traces,
        traces_note=note,
        diary=diary,
        review=review,
    )


def save_context(ctx: ReportContext) -> Path:
    """Keep the site, intake and traces beside the study (atomically) for later renders."""
    data = {
        "version": CONTEXT_VERSION,
        "site": None if ctx.site.is_unset else ctx.site.model_dump(mode="json"),
        "intake": ctx.intake.model_dump(mode="json") if ctx.intake else None,
        "traces": ctx.traces,
    }
    return atomic_write_text(ctx.study_dir / CONTEXT, json.dumps(data, separators=(",", ":")))
