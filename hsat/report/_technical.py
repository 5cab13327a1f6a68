"""The technical section: channels, valid time, exclusions, rule sets as applied (with
their hashes), software version and the input file's SHA-256."""

from __future__ import annotations

from datetime import timedelta
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape

from reportlab.platypus import CondPageBreak, Flowable, PageBreak, Paragraph, Spacer

from hsat.report import fmt
from hsat.report._caution import CAUTION_POINTS, CAUTION_TITLE
from hsat.report._context import ReportContext
from hsat.report._document import frame_width
from hsat.report._review import review_details
from hsat.report._style import Styles
from hsat.report._tables import data_table, fact_grid, p

#: Longest exclusion table printed; the rest is summarised in one line.
MAX_EXCLUSION_ROWS = 60


def _flatten(params: dict[str, Any], prefix: str = "") -> list[tuple[str, str]]:
    out: list[tuple[str, str]] = []
    for key, value in params.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            out += _flatten(value, f"{name}.")
        elif isinstance(value, list | tuple):
            out.append((name, ", ".join(f"{v:g}" if isinstance(v, float) else str(v)
                                        for v in value)))
        elif isinstance(value, float):
            out.append((name, f"{value:g}"))
        else:
            out.append((name, str(value)))
    return out


def _clock_span(ctx: ReportContext, start_s: float, end_s: float) -> tuple[str, str]:
    return (fmt.clock_seconds(ctx.start + timedelta(seconds=start_s)),
            fmt.clock_seconds(ctx.start + timedelta(seconds=end_s)))


def technical_section(ctx: ReportContext, styles: Styles) -> list[Flowable]:
    width = frame_width()
    s = ctx.summary
    study = s.get("study", {}) or {}
    story: list[Flowable] = [PageBreak(), Paragraph("Technical details", styles.h1)]

    story.append(Paragraph("Recording", styles.h2))
    facts = [
        ("Input file", Path(str(study.get("input_file", ""))).name or fmt.MISSING),
        ("File type", str(study.get("file_type", fmt.MISSING))),
        ("Recording start (EDF header)", ctx.start.strftime("%Y-%m-%d %H:%M:%S")),
        ("Channel profile", fmt.text(study.get("profile"))),
        ("Equipment (EDF header)", fmt.text(study.get("equipment"))),
        ("Recording code", fmt.text(study.get("recording_code"))),
        ("Analysed at", fmt.text(study.get("analyzed_at"))),
        ("Software", f"{s.get('software', {}).get('name', 'hsat')} "
                     f"{s.get('software', {}).get('version', fmt.MISSING)}"),
    ]
    story.append(fact_grid(styles, facts, 4, width, value_style=styles.cell))
    input_sha = escape(str(study.get("input_sha256", "")))
    story.append(Paragraph(f"SHA-256 of the input file: {input_sha}", styles.mono))
    story.append(Paragraph(f"SHA-256 of summary.json: {ctx.summary_sha256}", styles.mono))
    story.append(Paragraph(f"SHA-256 of {ctx.events_file}: {ctx.events_sha256}", styles.mono))
    story += review_details(ctx.review, s, ctx.rule_names, styles, width)

    story.append(Paragraph("Channels used", styles.h2))
    rows = []
    for role, ch in (s.get("channels") or {}).items():
        rows.append([role, str(ch.get("label", "")), fmt.number(ch.get("fs_hz"), 0),
                     str(ch.get("unit", "")) or "\u2013", fmt.hours_decimal(ch.get("valid_h")),
                     fmt.pct(ch.get("valid_pct"))])
    story.append(data_table(styles, ["Role", "EDF label", "Hz", "Unit", "Valid h", "Valid %"],
                            rows, [70, 170, 55, 60, 70, width - 425], numeric_cols=(2, 4, 5)))
    sensors = s.get("sensors")
    if isinstance(sensors, dict) and sensors:
        used = "; ".join(f"{k}: {v}" for k, v in sensors.items())
        story.append(Paragraph(f"Signals used by the detectors: {escape(used)}", styles.small))

    a = s.get("adequacy", {}) or {}
    story.append(Paragraph("Technical adequacy", styles.h2))
    verdict = "adequate" if a.get("adequate") else "INADEQUATE"
    story.append(Paragraph(
        f"Verdict: <b>{verdict}</b>. Valid airflow {fmt.hours_decimal(a.get('valid_flow_h'))} h, "
        f"valid oximetry {fmt.hours_decimal(a.get('valid_spo2_h'))} h, both together "
        f"{fmt.hours_decimal(a.get('valid_flow_and_spo2_h'))} h; the minimum is "
        f"{fmt.hours_decimal(a.get('minimum_h'))} h of technically adequate flow and oximetry "
        "(AASM clinical practice guideline, Kapur et al. 2017).", styles.small))
    for reason in a.get("reasons", []) or []:
        story.append(Paragraph(escape(str(reason)), styles.small, bulletText="\u2013"))

    story += _exclusions(ctx, styles, width)
    story += _rule_sets(ctx, styles, width)

    notes = [str(n) for n in s.get("notes", []) or []]
    if notes:
        story.append(CondPageBreak(80))
        story.append(Paragraph("Notes from the analysis", styles.h2))
        story.extend(Paragraph(escape(n), styles.small, bulletText="\u2013") for n in notes)
    if ctx.study.notes:
        story.append(Paragraph("Notes from the intake", styles.h2))
        story.append(p(ctx.study.notes, styles.small))
    story.append(CondPageBreak(110))
    story.append(Paragraph(CAUTION_TITLE, styles.h2))
    story.extend(Paragraph(pt, styles.small, bulletText="\u2013") for pt in CAUTION_POINTS)
    return story


def _exclusions(ctx: ReportContext, styles: Styles, width: float) -> list[Flowable]:
    s = ctx.summary
    exc = s.get("exclusions") or {}
    wake = s.get("wake") or {}
    story: list[Flowable] = [CondPageBreak(90), Paragraph("Excluded periods", styles.h2)]
    story.append(Paragraph(
        f"Excluded from monitoring time: {fmt.number(exc.get('total_min'), 1)} min of invalid "
        f"signal or diary exclusions; {fmt.number(wake.get('total_min'), 1)} min judged awake.",
        styles.small))
    periods = list(exc.get("periods", []) or [])
    rows = []
    for x in periods[:MAX_EXCLUSION_ROWS]:
        t0, t1 = _clock_span(ctx, float(x["start_s"]), float(x["end_s"]))
        dur = float(x.get("duration_s", float(x["end_s"]) - float(x["start_s"])))
        rows.append([t0, t1, fmt.number(dur / 60.0, 1), str(x.get("role", "")) or "all",
                     p(str(x.get("reason", "")), styles.cell)])
    if rows:
        story.append(Spacer(1, 2))
        story.append(data_table(styles, ["From", "To", "min", "Channel", "Reason"], rows,
                                [55, 55, 40, 60, width - 210], numeric_cols=(2,)))
    if len(periods) > MAX_EXCLUSION_ROWS:
        rest = periods[MAX_EXCLUSION_ROWS:]
        mins = sum(float(x["end_s"]) - float(x["start_s"]) for x in rest) / 60.0
        story.append(Paragraph(f"\u2026 and {len(rest)} shorter listed periods "
                               f"({fmt.number(mins, 1)} min) in summary.json.", styles.small))
    if ctx.diary:
        story.append(Paragraph("Diary exclusions from the intake file:", styles.small))
        for d in ctx.diary:
            t0, t1 = _clock_span(ctx, d["start_s"], d["end_s"])
            story.append(Paragraph(f"{t0}\u2013{t1}: {escape(str(d['reason']))}", styles.small,
                                   bulletText="\u2013"))
    return story


def _rule_sets(ctx: ReportContext, styles: Styles, width: float) -> list[Flowable]:
    story: list[Flowable] = [CondPageBreak(140), Paragraph("Rule sets as applied", styles.h2)]
    for rs in ctx.summary.get("rule_sets", []) or []:
        story.append(CondPageBreak(120))
        story.append(Paragraph(f"<b>{escape(str(rs.get('name', '')))}</b> \u2013 "
                               f"{escape(str(rs.get('description', '')))}", styles.small))
        story.append(Paragraph(f"Source: {escape(str(rs.get('source', '')))}", styles.tiny))
        story.append(Paragraph(f"SHA-256 of the rule file: {escape(str(rs.get('sha256', '')))}",
                               styles.mono))
        pairs = _flatten(rs.get("parameters") or {})
        cols = 2
        per_col = -(-len(pairs) // cols) if pairs else 0
        grid = []
        for r in range(per_col):
            row = []
            for c in range(cols):
                i = c * per_col + r
                row += list(pairs[i]) if i < len(pairs) else ["", ""]
            grid.append(row)
        if grid:
            w = width / cols
            story.append(data_table(
                styles, ["parameter", "value"] * cols,
                [[p(x, styles.mono) for x in row] for row in grid],
                [w * 0.7, w * 0.3] * cols, numeric_from=99))
        story.append(Spacer(1, 5))
    return story
