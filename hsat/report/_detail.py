"""The detail pages: respiratory events, oximetry, body position and the overnight graph."""

from __future__ import annotations

from datetime import timedelta
from typing import Any
from xml.sax.saxutils import escape

from reportlab.platypus import (
    CondPageBreak,
    Flowable,
    KeepTogether,
    NextPageTemplate,
    PageBreak,
    Paragraph,
    Spacer,
)

from hsat.recording import POSITIONS
from hsat.report import _style as st
from hsat.report import fmt
from hsat.report._context import ReportContext
from hsat.report._document import frame_height, frame_width
from hsat.report._graphs import EventLane, inline_bar, legend_drawing, overnight_drawing
from hsat.report._style import Styles
from hsat.report._tables import data_table

_TYPE_ROWS = (
    ("Obstructive apneas", "obstructive_apnea", "oai"),
    ("Central apneas", "central_apnea", "cai"),
    ("Mixed apneas", "mixed_apnea", "mai"),
    ("Unclassified apneas (no valid effort belt)", "unclassified_apnea", "uai"),
    ("All apneas", "apnea", "ai"),
    ("Hypopneas", "hypopnea", "hi"),
    ("All respiratory events", "respiratory_events", "rei"),
    ("Desaturations (ODI)", "desaturation", "odi"),
)


def _ix(ctx: ReportContext, name: str) -> dict[str, Any]:
    return ctx.summary["indices"][name]


def _pair_header(ctx: ReportContext, first: str, a: str, b: str) -> list[str]:
    head = [first]
    for n in ctx.rule_names:
        head += [f"{n} {a}", f"{n} {b}"]
    return head


def _pair_widths(ctx: ReportContext, width: float, label_w: float) -> list[float]:
    n = 2 * len(ctx.rule_names)
    return [label_w] + [(width - label_w) / n] * n


def respiratory_section(ctx: ReportContext, styles: Styles) -> list[Flowable]:
    width = frame_width()
    story: list[Flowable] = [Paragraph("Respiratory events", styles.h1)]
    if ctx.review.reviewed:
        story.append(Paragraph(
            f"Counted from the reviewed events ({escape(ctx.events_file)}: "
            f"{len(ctx.events)} rows including desaturations; review edits: "
            f"{ctx.review.edit_breakdown()}). The automatic scoring is unchanged in "
            "events.csv.", styles.small))
    rows = []
    for label, count_key, index_key in _TYPE_ROWS:
        row = [label]
        for n in ctx.rule_names:
            ix = _ix(ctx, n)
            counts = ix.get("counts") or {}
            row += [fmt.count(counts.get(count_key)), fmt.index(ix.get(index_key))]
        rows.append(row)
    story.append(Paragraph("Counts and indices by event type", styles.h2))
    story.append(data_table(styles, _pair_header(ctx, "Event type", "count", "per h"), rows,
                            _pair_widths(ctx, width, 190), emphasis_rows=(6,)))
    hyp_rows = []
    for key, label in (("obstructive", "Obstructive hypopneas"), ("central", "Central hypopneas"),
                       ("unclassified", "Hypopneas not typed")):
        vals = [(_ix(ctx, n).get("hypopnea_types") or {}).get(key) for n in ctx.rule_names]
        if any(v is not None for v in vals):
            hyp_rows.append([label, *[fmt.count(v) for v in vals]])
    if hyp_rows:
        story.append(Spacer(1, 4))
        col = (width - 190) / len(ctx.rule_names)
        story.append(data_table(styles, ["Hypopnea type (optional AASM rule)", *ctx.rule_names],
                                hyp_rows, [190] + [col] * len(ctx.rule_names)))
    story.append(Paragraph("Event durations (seconds)", styles.h2))
    dur_rows = []
    for label, mean_key, long_key in (("All respiratory events", "mean_event_s", "longest_event_s"),
                                      ("Apneas", "mean_apnea_s", "longest_apnea_s"),
                                      ("Hypopneas", "mean_hypopnea_s", "longest_hypopnea_s")):
        row = [label]
        for n in ctx.rule_names:
            d = _ix(ctx, n).get("event_durations") or {}
            row += [fmt.seconds(d.get(mean_key)), fmt.seconds(d.get(long_key))]
        dur_rows.append(row)
    story.append(data_table(styles, _pair_header(ctx, "Events", "mean", "longest"), dur_rows,
                            _pair_widths(ctx, width, 190)))
    story.append(CondPageBreak(160))
    story.append(Paragraph("By clock hour", styles.h2))
    story.append(_hourly_table(ctx, styles, width))
    story.append(Paragraph("Cheyne-Stokes breathing", styles.h2))
    for n in ctx.rule_names:
        c = _ix(ctx, n).get("cheyne_stokes") or {}
        verdict = "present" if c.get("present") else "not found"
        story.append(Paragraph(
            f"<b>{escape(n)}:</b> {verdict}; {fmt.number(c.get('duration_min'), 1)} min in "
            f"periodic runs; central-event index for the criterion "
            f"{fmt.index(c.get('central_index'))}/h.",
            styles.small))
    criteria = next((str((_ix(ctx, n).get("cheyne_stokes") or {}).get("criteria", ""))
                     for n in ctx.rule_names), "")
    if criteria:
        story.append(Paragraph(f"Criteria: {escape(criteria)}", styles.tiny))
    return story


def _hourly_table(ctx: ReportContext, styles: Styles, width: float) -> Flowable:
    signal_rows = {int(h.get("hour", i)): h for i, h in enumerate(ctx.summary.get("hourly", []))}
    per_rs = {n: {int(h.get("hour", i)): h for i, h in enumerate(_ix(ctx, n).get("hourly", []))}
              for n in ctx.rule_names}
    hours = sorted(set(signal_rows) | {h for m in per_rs.values() for h in m})
    header = ["Hour from", "Monitored min"]
    for n in ctx.rule_names:
        header += [f"{n} events", f"{n} REI"]
    header += ["SpO2 mean %", "SpO2 min %", "Main position"]
    rows = []
    for h in hours:
        sig = signal_rows.get(h, {})
        any_rs = next((m[h] for m in per_rs.values() if h in m), {})
        start_s = sig.get("start_s", any_rs.get("start_s", 0.0))
        row = [fmt.clock(ctx.start + timedelta(seconds=float(start_s))),
               fmt.number(sig.get("monitoring_min", any_rs.get("monitoring_min")), 0)]
        for n in ctx.rule_names:
            hr = per_rs[n].get(h, {})
            row += [fmt.count(hr.get("events")), fmt.index(hr.get("rei"))]
        row += [fmt.pct(sig.get("spo2_mean_pct")), fmt.pct(sig.get("spo2_min_pct")),
                fmt.text(sig.get("main_position")) if sig.get("main_position") else fmt.MISSING]
        rows.append(row)
    n_cols = len(header)
    first = 52.0
    rest = (width - first - 70) / (n_cols - 2)
    return data_table(styles, header, rows, [first] + [rest] * (n_cols - 2) + [70.0])


def oximetry_section(ctx: ReportContext, styles: Styles) -> list[Flowable]:
    width = frame_width()
    spo2 = ctx.summary.get("spo2", {}) or {}
    pulse = ctx.summary.get("pulse", {}) or {}
    story: list[Flowable] = [CondPageBreak(300), Paragraph("Oximetry and pulse", styles.h1)]
    story.append(Paragraph("Time in SpO2 bands (share of valid oximetry time)", styles.h2))
    rows = []
    for band in spo2.get("time_in_bands", []) or []:
        share = float(band.get("pct") or 0.0) / 100.0
        rows.append([str(band.get("label", "")), fmt.number(band.get("minutes"), 1),
                     fmt.pct(band.get("pct")), inline_bar(share, 150)])
    if rows:
        story.append(data_table(styles, ["SpO2 band", "minutes", "% of oximetry", ""], rows,
                                [150, 80, 80, width - 310]))
    ineq = spo2.get("inequalities") or {}
    story.append(Paragraph(
        f"T90 {fmt.pct(spo2.get('t90_pct'))} % ({fmt.number(spo2.get('t90_min'), 1)} min), "
        f"T88 {fmt.pct(spo2.get('t88_pct'))} % ({fmt.number(spo2.get('t88_min'), 1)} min) of "
        f"{fmt.hours(spo2.get('valid_h'))} valid oximetry"
        + (f" (T90 counts {escape(str(ineq['t90']))}; T88 counts {escape(str(ineq['t88']))})."
           if "t90" in ineq and "t88" in ineq else "."), styles.small))
    depth = spo2.get("desaturation_depth") or {}
    bins = depth.get("bins") or []
    if bins:
        total = sum(int(b.get("count") or 0) for b in bins) or 1
        story.append(Paragraph(
            f"Desaturation depth (drops of at least {fmt.number(depth.get('min_drop_pct'), 0)} "
            "SpO2 points)", styles.h2))
        drows = [[str(b.get("label", "")), fmt.count(b.get("count")),
                  fmt.pct(100.0 * int(b.get("count") or 0) / total),
                  inline_bar(int(b.get("count") or 0) / total, 150)] for b in bins]
        story.append(data_table(styles, ["Drop", "count", "% of drops", ""], drows,
                                [150, 80, 80, width - 310]))
    story.append(Paragraph("Hypoxic burden and pulse rate", styles.h2))
    window = spo2.get("hypoxic_burden_window_s")
    window_text = (f", search window {window[0]:g} to {window[1]:g} s around event end"
                   if isinstance(window, list) and len(window) == 2 else "")
    story.append(Paragraph(
        f"Hypoxic burden {fmt.burden(spo2.get('hypoxic_burden'))} %min/h (Azarbarzin et al., "
        f"Eur Heart J 2019), from the events of "
        f"{escape(str(spo2.get('hypoxic_burden_rule_set') or fmt.MISSING))}{window_text}; "
        "divided by monitoring time rather than sleep time.", styles.small))
    story.append(Paragraph(
        f"Pulse rate mean {fmt.rate(pulse.get('mean_bpm'))} bpm, lowest "
        f"{fmt.rate(pulse.get('min_bpm'))}, highest {fmt.rate(pulse.get('max_bpm'))} "
        f"over {fmt.hours(pulse.get('valid_h'))} of valid pulse signal. Mean rise after "
        f"respiratory events ({escape(str(pulse.get('event_rise_rule_set') or fmt.MISSING))}): "
        f"{fmt.number(pulse.get('event_rise_bpm'), 1)} bpm.", styles.small))
    return story


def positional_section(ctx: ReportContext, styles: Styles) -> list[Flowable]:
    width = frame_width()
    pos = ctx.summary.get("position", {}) or {}
    minutes = pos.get("minutes") or {}
    share = pos.get("pct_of_monitoring") or {}
    story: list[Flowable] = [CondPageBreak(260), Paragraph("Body position", styles.h1)]
    if not pos.get("available", True):
        story.append(Paragraph("No usable body-position channel was recorded.", styles.body))
    header = ["Position", "minutes", "% of MT"]
    for n in ctx.rule_names:
        header += [f"{n} events", f"{n} REI"]
    rows = []
    for name in POSITIONS:
        row = [name, fmt.number(minutes.get(name), 0), fmt.pct(share.get(name))]
        for n in ctx.rule_names:
            bp = ((_ix(ctx, n).get("positional") or {}).get("by_position") or {}).get(name, {})
            row += [fmt.count(bp.get("events")), fmt.index(bp.get("rei"))]
        rows.append(row)
    for key, label in (("supine", "Supine"), ("non_supine", "Non-supine")):
        first = (_ix(ctx, ctx.rule_names[0]).get("positional") or {}).get(key) or {}
        row = [label, fmt.number(first.get("monitoring_min"), 0), ""]
        for n in ctx.rule_names:
            part = (_ix(ctx, n).get("positional") or {}).get(key) or {}
            row += [fmt.count(part.get("events")), fmt.index(part.get("rei"))]
        rows.append(row)
    n_cols = len(header)
    widths = [80.0, 50.0, 50.0] + [(width - 180) / (n_cols - 3)] * (n_cols - 3)
    story.append(data_table(styles, header, rows, widths,
                            emphasis_rows=(len(POSITIONS), len(POSITIONS) + 1)))
    story.append(Spacer(1, 4))
    for n in ctx.rule_names:
        p_ = _ix(ctx, n).get("positional") or {}
        flag = p_.get("positional_osa")
        ratio = p_.get("ratio_supine_to_non_supine")
        if flag is None:
            verdict = ("cannot be assessed (too little time supine or non-supine, or REI "
                       "below 5/h)")
        else:
            verdict = "positional OSA" if flag else "not positional"
        story.append(Paragraph(
            f"<b>{escape(n)}:</b> supine to non-supine REI ratio "
            f"{fmt.number(ratio, 1)}; {verdict}.", styles.small))
    definition = str((_ix(ctx, ctx.rule_names[0]).get("positional") or {}).get("definition", ""))
    min_minutes = (_ix(ctx, ctx.rule_names[0]).get("positional") or {}).get("min_minutes")
    story.append(Paragraph(
        f"Definition used: {escape(definition)}. Positions with less than "
        f"{fmt.number(min_minutes, 0)} min of monitoring time get no REI (n/a).", styles.tiny))
    return story


def event_lanes(ctx: ReportContext) -> list[EventLane]:
    """One lane per apnea type, one hypopnea lane per rule set, one desaturation lane."""
    by_type: dict[str, list[tuple[float, float]]] = {}
    hyp: dict[str, list[tuple[float, float]]] = {n: [] for n in ctx.rule_names}
    for row in ctx.events:
        try:
            span = (float(row["onset_s"]), float(row["duration_s"]))
        except (TypeError, ValueError):
            continue
        kind = row.get("event", "")
        if kind == "hypopnea":
            for n in str(row.get("rule_sets", "")).split(";"):
                if n in hyp:
                    hyp[n].append(span)
        else:
            by_type.setdefault(kind, []).append(span)
    names = {"obstructive_apnea": "Obstructive apnea", "mixed_apnea": "Mixed apnea",
             "central_apnea": "Central apnea", "unclassified_apnea": "Unclassified apnea"}
    lanes = [EventLane(label, st.EVENT_COLOURS[k], tuple(by_type.get(k, [])))
             for k, label in names.items()]
    lanes += [EventLane(f"Hypopnea {n}", st.EVENT_COLOURS["hypopnea"], tuple(spans))
              for n, spans in hyp.items()]
    lanes.append(EventLane("Desaturation", st.EVENT_COLOURS["desaturation"],
                           tuple(by_type.get("desaturation", []))))
    return lanes


def graphs_page(ctx: ReportContext, styles: Styles) -> list[Flowable]:
    """The overnight graph on a landscape page of its own."""
    width = frame_width(landscape=True)
    s = ctx.summary
    shaded = [(float(x["start_s"]), float(x["end_s"]), "excluded")
              for x in (s.get("exclusions") or {}).get("periods", [])]
    shaded += [(float(x["start_s"]), float(x["end_s"]), "wake")
               for x in (s.get("wake") or {}).get("periods", [])]
    study = s.get("study", {})
    lights = [(0.0, float(study["lights_off_s"]), "wake")] if study.get("lights_off_s") else []
    duration = float((ctx.traces or {}).get("duration_s") or 0.0) or max(
        [float(h.get("end_s", 0)) for h in s.get("hourly", [])] + [3600.0])
    if study.get("lights_on_s") is not None and float(study["lights_on_s"]) < duration:
        lights.append((float(study["lights_on_s"]), duration, "wake"))
    room = frame_height(landscape=True) - 30 - 16 - 28 - (30 if ctx.traces is None else 0)
    drawing = overnight_drawing(width, ctx.traces, ctx.start, duration, event_lanes(ctx),
                                lights + shaded, styles.fonts, room,
                                spo2_floor=(s.get("spo2") or {}).get("nadir_pct"))
    story: list[Flowable] = [NextPageTemplate("landscape"), PageBreak(),
                             Paragraph("Overnight signals", styles.h1)]
    if ctx.traces is None:
        story.append(Paragraph(f"<b>Signal traces unavailable:</b> {escape(ctx.traces_note)}. "
                               "Event markers are drawn from the scoring files only.",
                               styles.small))
    story.append(KeepTogether([drawing, Spacer(1, 3), legend_drawing(width, styles.fonts)]))
    story.append(Paragraph(
        "Each trace keeps the lowest and highest sample of every time bin (min/max thinning "
        "to about 2000 points), so short dips and spikes stay visible. Flow amplitude is the "
        "peak-to-trough range of the airflow signal in 5 s blocks, relative to the night's "
        "median. Event counts in the lane labels are all scored rows in "
        f"{ctx.events_file}.",
        styles.tiny))
    story.append(NextPageTemplate("portrait"))
    return story
