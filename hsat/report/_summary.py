"""Page 1: the header, patient and study details, and the physician's summary.

The summary must fit on one page: it holds the headline numbers under every rule set
side by side, the oximetry and positional findings, the adequacy verdict, the review
state and the caution.
"""

from __future__ import annotations

from typing import Any
from xml.sax.saxutils import escape

from reportlab.platypus import Flowable, KeepInFrame, Paragraph, Spacer, Table, TableStyle

from hsat.report import _style as st
from hsat.report import fmt
from hsat.report._caution import CAUTION_POINTS, CAUTION_TITLE
from hsat.report._context import ReportContext
from hsat.report._document import frame_height, frame_width
from hsat.report._graphs import severity_scale
from hsat.report._review import review_statement
from hsat.report._signature import Signature
from hsat.report._style import Styles
from hsat.report._tables import boxed, data_table, fact_grid, p

#: Rows of the side-by-side table: (label, key in indices.<rule set>, formatter).
INDEX_ROWS: tuple[tuple[str, str, Any], ...] = (
    ("REI, respiratory events per hour", "rei", fmt.index),
    ("Severity (AASM adult, on the REI)", "severity", fmt.severity),
    ("Obstructive apnea index (/h)", "oai", fmt.index),
    ("Central apnea index (/h)", "cai", fmt.index),
    ("Mixed apnea index (/h)", "mai", fmt.index),
    ("Unclassified apnea index (/h)", "uai", fmt.index),
    ("Hypopnea index (/h)", "hi", fmt.index),
    ("Oxygen desaturation index, ODI (/h)", "odi", fmt.index),
)


def rule_caption(rs: dict[str, Any]) -> str:
    """``≥30 % drop + ≥3 % desat.`` (the hypopnea rule) and ``ODI: drops ≥3 %`` from the
    rule set's applied parameters (two lines, ReportLab markup)."""
    params = rs.get("parameters", {}) or {}
    hyp = params.get("hypopnea", {}) or {}
    desat = params.get("desaturation", {}) or {}
    parts = []
    if "drop_pct" in hyp and "desaturation_pct" in hyp:
        parts.append(f"\u2265{hyp['drop_pct']:g} % drop + "
                     f"\u2265{hyp['desaturation_pct']:g} % desat.")
    if "drop_pct" in desat:
        parts.append(f"ODI: drops \u2265{desat['drop_pct']:g} %")
    return "<br/>".join(parts)


def positional_values(ix: dict[str, Any]) -> tuple[str, str, str]:
    pos = ix.get("positional", {}) or {}
    supine = (pos.get("supine") or {}).get("rei")
    non = (pos.get("non_supine") or {}).get("rei")
    flag = pos.get("positional_osa")
    verdict = "not assessable" if flag is None else ("yes" if flag else "no")
    return fmt.index(supine), fmt.index(non), verdict


def _header(ctx: ReportContext, styles: Styles, width: float, sig: Signature | None
            ) -> list[Flowable]:
    site = ctx.site
    left = [Paragraph(f"<b>{escape(site.name)}</b>", styles.h1)]
    for line in site.address:
        left.append(p(line, styles.small))
    left.append(p(site.contact_line(), styles.small))
    if site.email:
        left.append(p(site.email, styles.small))
    status = "DRAFT \u2013 not signed" if sig is None else (
        f"Signed report, version {sig.version}")
    right = [
        Paragraph("<b>Home sleep apnea test</b>", styles.right),
        p("Type III home recording, "
          + ("scoring reviewed" if ctx.review.reviewed else "automated scoring"), styles.right),
        Paragraph(f"<b>{status}</b>", styles.right),
    ]
    t = Table([[left, right]], colWidths=[width * 0.64, width * 0.36], hAlign="LEFT")
    t.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), 0),
        ("RIGHTPADDING", (0, 0), (-1, -1), 0),
        ("LINEBELOW", (0, 0), (-1, -1), 1.2, st.ACCENT),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 5),
    ]))
    return [t, Spacer(1, 4)]


def patient_facts(ctx: ReportContext) -> list[tuple[str, str]]:
    pv, sv = ctx.patient, ctx.study
    birth = fmt.day(pv.birthdate)
    if pv.birthdate and pv.age_years is not None:
        birth += f" (age {int(pv.age_years)})"
    kit = fmt.text(sv.kit)
    if sv.kit_serial:
        kit += f", serial {sv.kit_serial}"
    return [
        ("Patient", fmt.text(pv.name)),
        ("Patient ID", fmt.text(pv.id)),
        ("Date of birth", birth),
        ("Sex", fmt.text(pv.sex)),
        ("Study date (night of)", fmt.day(sv.study_date)),
        ("Kit / device", kit),
        ("Referring clinician", fmt.text(sv.referring_clinician)),
        ("Interpreting physician", fmt.text(sv.interpreting_physician)),
    ]


def shared_facts(ctx: ReportContext) -> list[tuple[str, str]]:
    s = ctx.summary
    spo2 = s.get("spo2", {}) or {}
    pulse = s.get("pulse", {}) or {}
    return [
        ("Recording time (lights off\u2013on)", fmt.hours(s.get("recording_time_h"))),
        ("Monitoring time", fmt.hours(s.get("monitoring_time_h"))),
        ("Valid oximetry", fmt.hours(spo2.get("valid_h"))),
        ("Pulse rate mean (min\u2013max), bpm",
         f"{fmt.rate(pulse.get('mean_bpm'))} ({fmt.rate(pulse.get('min_bpm'))}\u2013"
         f"{fmt.rate(pulse.get('max_bpm'))})"),
        ("SpO2 baseline, %", fmt.pct(spo2.get("baseline_pct"))),
        ("SpO2 mean, %", fmt.pct(spo2.get("mean_pct"))),
        ("SpO2 nadir, %", fmt.pct(spo2.get("nadir_pct"))),
        ("Hypoxic burden, %min/h", fmt.burden(spo2.get("hypoxic_burden"))),
        ("T90, % of oximetry time", fmt.pct(spo2.get("t90_pct"))),
        ("T88, % of oximetry time", fmt.pct(spo2.get("t88_pct"))),
        ("Event-related pulse rise, bpm", fmt.number(pulse.get("event_rise_bpm"), 1)),
        ("Oximetry events under", str(spo2.get("hypoxic_burden_rule_set") or fmt.MISSING)),
    ]


def index_table(ctx: ReportContext, styles: Styles, width: float) -> Table:
    names = ctx.rule_names
    label_w = 190.0
    col_w = (width - label_w) / max(len(names), 1)
    header = ["Measure", *names]
    rows: list[list[Any]] = []
    rows.append(["Hypopnea rule applied",
                 *[rule_caption(ctx.rule_set(n)) for n in names]])
    for label, key, f in INDEX_ROWS:
        rows.append([label, *[f(ctx.summary["indices"][n].get(key)) for n in names]])
    rows.append(["Respiratory events (apneas + hypopneas)",
                 *[fmt.count((ctx.summary["indices"][n].get("counts") or {})
                             .get("respiratory_events")) for n in names]])
    pos = [positional_values(ctx.summary["indices"][n]) for n in names]
    rows.append(["Supine REI (/h)", *[v[0] for v in pos]])
    rows.append(["Non-supine REI (/h)", *[v[1] for v in pos]])
    rows.append(["Positional OSA (supine REI \u2265 2 \u00d7 non-supine)", *[v[2] for v in pos]])
    csb = [(ctx.summary["indices"][n].get("cheyne_stokes") or {}) for n in names]
    rows.append(["Cheyne-Stokes breathing",
                 *["present" if c.get("present") else "not found" for c in csb]])
    rows[0] = [rows[0][0], *[Paragraph(c, styles.cell_center) for c in rows[0][1:]]]
    return data_table(styles, header, rows, [label_w] + [col_w] * len(names),
                      emphasis_rows=(1, 2), center=True, pad=1.5)


def findings(ctx: ReportContext, styles: Styles, width: float) -> list[Flowable]:
    s = ctx.summary
    first = ctx.rule_names[0]
    pos = (s["indices"][first].get("positional") or {})
    out: list[Flowable] = []
    supine, non, verdict = positional_values(s["indices"][first])
    ratio = pos.get("ratio_supine_to_non_supine")
    ratio_text = f", ratio {fmt.number(ratio, 1)}" if ratio is not None else ""
    out.append(Paragraph(
        f"<b>Position ({escape(first)}):</b> supine REI {supine}/h, non-supine {non}/h"
        f"{ratio_text}; positional OSA: {verdict} (definition under Body position).",
        styles.small))
    out.append(Spacer(1, 3))
    out.append(review_statement(ctx.review, ctx.rule_names, styles, width))
    return out


def adequacy_box(ctx: ReportContext, styles: Styles, width: float) -> Flowable:
    a = ctx.summary.get("adequacy", {}) or {}
    both = fmt.hours_decimal(a.get("valid_flow_and_spo2_h"))
    minimum = fmt.hours_decimal(a.get("minimum_h"))
    if a.get("adequate"):
        text = (f"<b>Technically adequate.</b> {both} h of valid airflow and oximetry "
                f"together (at least {minimum} h needed).")
        return boxed([Paragraph(text, styles.small)], width, fill=st.ACCENT_LIGHT, pad=4)
    reasons = "; ".join(str(r) for r in a.get("reasons", [])) or "no reason recorded"
    text = (f"<b>TECHNICALLY INADEQUATE.</b> {both} h of valid airflow and oximetry "
            f"together (at least {minimum} h needed). Reasons: {escape(reasons)}. "
            "A negative or inconclusive result does not exclude sleep apnea.")
    return boxed([Paragraph(text, styles.small)], width, fill=st.WARN_LIGHT, border=st.WARN,
                 pad=4)


def caution_box(styles: Styles, width: float) -> Flowable:
    items: list[Flowable] = [Paragraph(f"<b>{CAUTION_TITLE}</b>", styles.caution)]
    items.extend(Paragraph(pt, styles.caution, bulletText="\u2013") for pt in CAUTION_POINTS)
    return boxed(items, width, border=st.INK, pad=5)


def status_banner(styles: Styles, width: float, sig: Signature | None,
                  reviewed: bool = False) -> Flowable:
    if sig is None:
        awaiting = ("Events reviewed; awaiting interpretation and signature" if reviewed
                    else "Automated scoring awaiting review, interpretation and signature")
        text = (f"<b>DRAFT.</b> {awaiting} by the interpreting physician. Not for clinical "
                "decisions in this state.")
        return boxed([Paragraph(text, styles.small)], width, fill=st.WARN_LIGHT,
                     border=st.WARN, pad=4)
    when = sig.signed_at.strftime("%Y-%m-%d %H:%M UTC")
    text = (f"<b>Signed, version {sig.version}.</b> Interpreted and signed by "
            f"{escape(sig.physician)} on {when}; interpretation on page 2.")
    if sig.amendment is not None:
        text += f" Amends version {sig.amendment.previous_version}."
    if sig.acknowledged_inadequate:
        text += (" <b>Signed although technically inadequate; the physician acknowledged "
                 "this.</b>")
        return boxed([Paragraph(text, styles.small)], width, fill=st.WARN_LIGHT,
                     border=st.WARN, pad=4)
    return boxed([Paragraph(text, styles.small)], width, fill=st.ACCENT_LIGHT, pad=4)


def summary_page(ctx: ReportContext, styles: Styles, sig: Signature | None) -> list[Flowable]:
    width = frame_width()
    story: list[Flowable] = []
    story += _header(ctx, styles, width, sig)
    story.append(fact_grid(styles, patient_facts(ctx), 4, width))
    story.append(Spacer(1, 5))
    story.append(status_banner(styles, width, sig, ctx.review.reviewed))
    story.append(Paragraph("Summary for the interpreting physician", styles.h2))
    story.append(index_table(ctx, styles, width))
    story.append(Spacer(1, 3))
    thresholds = tuple(
        (ctx.rule_set(ctx.rule_names[0]).get("parameters", {}) or {}).get(
            "severity_thresholds", (5.0, 15.0, 30.0)))
    story.append(severity_scale(
        width, [(n, ctx.summary["indices"][n].get("rei")) for n in ctx.rule_names],
        thresholds, styles.fonts))
    story.append(Paragraph("Oximetry and pulse (same under every rule set)", styles.h3))
    story.append(fact_grid(styles, shared_facts(ctx), 4, width))
    story.append(Spacer(1, 4))
    story += findings(ctx, styles, width)
    story.append(Spacer(1, 4))
    story.append(adequacy_box(ctx, styles, width))
    story.append(Spacer(1, 5))
    story.append(caution_box(styles, width))
    # The summary must stay on one page: shrink it (rarely needed) rather than spill over.
    return [KeepInFrame(width, frame_height(), story, mode="shrink")]
