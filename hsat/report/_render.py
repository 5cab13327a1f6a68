"""Rendering: the draft report of a study folder, and the bytes of a signed version."""

from __future__ import annotations

from pathlib import Path

from reportlab.platypus import Flowable, NextPageTemplate, PageBreak

from hsat.errors import ConfigError
from hsat.intake import Intake
from hsat.outputs import atomic_write_bytes
from hsat.recording import Conditioned
from hsat.report import fmt
from hsat.report._context import ReportContext, load_context, save_context
from hsat.report._detail import (
    graphs_page,
    oximetry_section,
    positional_section,
    respiratory_section,
)
from hsat.report._document import PageFacts, build_pdf
from hsat.report._fonts import FontSet, describe_chars, load_fonts, undrawable
from hsat.report._signature import Signature, interpretation_page
from hsat.report._style import make_styles
from hsat.report._summary import summary_page
from hsat.report._technical import technical_section
from hsat.site import Site

DRAFT_NAME = "report-draft.pdf"


def _facts(ctx: ReportContext, sig: Signature | None) -> PageFacts:
    pv = ctx.patient
    patient_line = (f"{fmt.text(pv.name)}  \u00b7  ID {fmt.text(pv.id)}  \u00b7  night of "
                    f"{fmt.day(ctx.study.study_date)}")
    if sig is None:
        scoring = "events reviewed" if ctx.review.reviewed else "automated scoring"
        status = f"DRAFT \u2013 {scoring}, not interpreted or signed"
    else:
        status = (f"Version {sig.version}, signed {sig.signed_at.strftime('%Y-%m-%d %H:%M UTC')} "
                  f"by {sig.physician}")
    return PageFacts(clinic=ctx.site.name, patient_line=patient_line, status_line=status,
                     draft=sig is None, title="Home sleep apnea test report")


def check_drawable(ctx: ReportContext, fonts: FontSet, extra: dict[str, str] | None = None
                   ) -> None:
    """Refuse, before anything is written, text the fonts cannot draw (names the field)."""
    fields = {
        "patient name": ctx.patient.name or "", "patient ID": ctx.patient.id or "",
        "referring clinician": ctx.study.referring_clinician or "",
        "interpreting physician": ctx.study.interpreting_physician or "",
        "kit": ctx.study.kit or "", "intake notes": ctx.study.notes or "",
        "clinic name": ctx.site.name, "clinic address": " ".join(ctx.site.address),
        "reviewer name": ctx.review.reviewer,
        **(extra or {}),
    }
    for what, value in fields.items():
        bad = undrawable(value, fonts)
        if bad:
            source = ctx.intake.source_path if ctx.intake and "clinic" not in what else ""
            if "clinic" in what:
                source = ctx.site.source_path
            if what == "reviewer name":
                source = str(ctx.study_dir / "review-edits.jsonl")
            raise ConfigError(
                source or ctx.study_dir,
                f"the {what} contains characters the report font cannot draw: "
                f"{describe_chars(bad)}; write it in characters the font covers "
                "(Latin, Greek or Cyrillic script) or transliterate it")


def _story(ctx: ReportContext, sig: Signature | None, fonts: FontSet) -> list[Flowable]:
    styles = make_styles(fonts)
    story: list[Flowable] = []
    story += summary_page(ctx, styles, sig)
    if sig is not None:
        story += [NextPageTemplate("portrait"), PageBreak()]
        story += interpretation_page(sig, styles)
    story += [PageBreak()]
    story += respiratory_section(ctx, styles)
    story += positional_section(ctx, styles)
    story += oximetry_section(ctx, styles)
    story += graphs_page(ctx, styles)
    story += technical_section(ctx, styles)
    return story


def render_pdf_bytes(ctx: ReportContext, sig: Signature | None = None) -> bytes:
    """The report as PDF bytes (a draft when ``sig`` is None)."""
    fonts = load_fonts()
    extra = {"physician name": sig.physician} if sig else None
    check_drawable(ctx, fonts, extra)
    meta = {
        "title": f"HSAT report \u2013 {fmt.text(ctx.patient.name)}"
                 + (" (DRAFT)" if sig is None else f" (signed v{sig.version})"),
        "author": sig.physician if sig else "hsat (automated draft)",
        "subject": "Home sleep apnea test report",
    }
    return build_pdf(_story(ctx, sig, fonts), _facts(ctx, sig), fonts, meta)


def render_draft(
    study_dir: str | Path,
    site: str | Path | Site | None = None,
    *,
    intake: str | Path | Intake | None = None,
    recording: str | Path | None = None,
    conditioned: Conditioned | None = None,
) -> Path:
    """Render ``report-draft.pdf`` in the study folder (atomically) and return its path.

    The draft is marked DRAFT on every page. ``site`` is a site settings file (the one
    kept from an earlier render is reused when None). The site, intake and overnight
    traces used are kept in ``report-context.json`` so that a signed version is drawn
    from the same inputs. ``conditioned`` (what ``hsat.api.condition`` returned for this
    night) or ``recording`` (its EDF) give the overnight graphs their signal traces.
    """
    ctx = load_context(study_dir, site=site, intake=intake, recording=recording,
                       conditioned=conditioned)
    data = render_pdf_bytes(ctx)
    save_context(ctx)
    return atomic_write_bytes(Path(study_dir) / DRAFT_NAME, data)


def render_signed(
    study_dir: str | Path,
    signature: Signature,
    *,
    site: str | Path | Site | None = None,
    context: ReportContext | None = None,
) -> tuple[bytes, ReportContext]:
    """The bytes of a signed version (no file is written: sign-off writes it, never
    overwriting) and the context it was drawn from (``context`` when given)."""
    ctx = context if context is not None else load_context(study_dir, site=site)
    return render_pdf_bytes(ctx, signature), ctx
