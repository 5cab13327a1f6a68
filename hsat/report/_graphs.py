"""Vector graphics for the report (reportlab.graphics): the overnight lanes, the
severity scale and small inline bars.

All lanes of the overnight graph share one clock-time axis with a tick at every full
hour. Colour never carries meaning alone: every event type and every position has its
own labelled lane, so the page reads in greyscale and for colour-blind readers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import numpy as np
from reportlab.graphics.shapes import Drawing, Group, Line, Polygon, PolyLine, Rect, String
from reportlab.lib import colors

from hsat.report import _style as st
from hsat.report._fonts import FontSet
from hsat.report._traces import as_arrays

LABEL_W = 96.0
RIGHT_PAD = 8.0
AXIS_H = 22.0
LANE_GAP = 10.0


@dataclass(frozen=True)
class EventLane:
    """One row of event markers: its label, colour and the (onset_s, duration_s) spans."""

    label: str
    colour: colors.Color
    spans: tuple[tuple[float, float], ...]


@dataclass(frozen=True)
class TimeAxis:
    start: datetime
    t0_s: float
    t1_s: float
    x0: float
    x1: float

    def x(self, t_s: np.ndarray | float) -> np.ndarray:
        span = max(self.t1_s - self.t0_s, 1.0)
        return self.x0 + (np.asarray(t_s, dtype=float) - self.t0_s) / span * (self.x1 - self.x0)

    def hour_ticks(self) -> list[tuple[float, str]]:
        """(x, "HH:00") for every full clock hour in the span (half hours when short)."""
        step_min = 60 if self.t1_s - self.t0_s > 3 * 3600 else 30
        first = self.start + timedelta(seconds=self.t0_s)
        on_tick = first.minute % step_min == 0 and first.second == 0 and not first.microsecond
        minute = (first.minute // step_min + (0 if on_tick else 1)) * step_min
        tick = first.replace(minute=0, second=0, microsecond=0) + timedelta(minutes=minute)
        ticks = []
        while (offset := (tick - self.start).total_seconds()) <= self.t1_s:
            ticks.append((float(self.x(offset)), tick.strftime("%H:%M")))
            tick += timedelta(minutes=step_min)
        return ticks


def _runs_of_finite(v: np.ndarray) -> list[tuple[int, int]]:
    """[start, end) index runs where ``v`` is finite (a gap is never bridged)."""
    finite = np.isfinite(v).astype(np.int8)
    edges = np.diff(np.concatenate([[0], finite, [0]]))
    return list(zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True))


def _line(group: Group, xs: np.ndarray, ys: np.ndarray, colour: colors.Color, width: float
          ) -> None:
    for a, b in _runs_of_finite(ys):
        if b - a == 1:
            group.add(Line(xs[a], ys[a], xs[a] + 0.6, ys[a], strokeColor=colour,
                           strokeWidth=width))
            continue
        pts = np.empty(2 * (b - a))
        pts[0::2] = xs[a:b]
        pts[1::2] = ys[a:b]
        group.add(PolyLine(pts.tolist(), strokeColor=colour, strokeWidth=width,
                           strokeLineJoin=1))


def _text(x: float, y: float, s: str, fonts: FontSet, size: float = 6.5,
          anchor: str = "start", colour: colors.Color = st.INK, bold: bool = False) -> String:
    return String(x, y, s, fontName=fonts.bold if bold else fonts.regular, fontSize=size,
                  fillColor=colour, textAnchor=anchor)


def _fit(s: str, fonts: FontSet, size: float, max_w: float) -> tuple[str, float]:
    """Shrink (down to 5 pt), then shorten with an ellipsis, until ``s`` fits ``max_w``."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    while size > 5.0 and stringWidth(s, fonts.regular, size) > max_w:
        size -= 0.2
    while len(s) > 4 and stringWidth(s, fonts.regular, size) > max_w:
        s = s[:-2] + "\u2026"
    return s, size


def _nice_range(lo: float, hi: float, step: float) -> tuple[float, float]:
    return math.floor(lo / step) * step, math.ceil(hi / step) * step


class _Lanes:
    """Builds the stacked lanes from the top of the drawing downwards."""

    def __init__(self, drawing: Drawing, axis: TimeAxis, fonts: FontSet, top: float) -> None:
        self.d, self.axis, self.fonts, self.y = drawing, axis, fonts, top

    def frame(self, height: float, title: str, unit: str = "") -> tuple[float, float]:
        y1 = self.y
        y0 = y1 - height
        a = self.axis
        self.d.add(Rect(a.x0, y0, a.x1 - a.x0, height, fillColor=None,
                        strokeColor=st.RULE, strokeWidth=0.4))
        self.d.add(_text(4, y1 - 8, title, self.fonts, 7, bold=True))
        if unit:
            self.d.add(_text(4, y1 - 16, unit, self.fonts, 6, colour=st.MUTED))
        self.y = y0 - LANE_GAP
        return y0, y1

    def value_lane(self, title: str, unit: str, trace: dict[str, Any] | None, height: float,
                   lo: float, hi: float, ticks: list[float], colour: colors.Color,
                   reference: float | None = None) -> None:
        y0, y1 = self.frame(height, title, unit)
        a = self.axis

        def ymap(v: np.ndarray | float) -> np.ndarray:
            return y0 + (np.clip(np.asarray(v, dtype=float), lo, hi) - lo) / (hi - lo) * height

        for tv in ticks:
            yy = float(ymap(tv))
            self.d.add(Line(a.x0 - 2, yy, a.x0, yy, strokeColor=st.MUTED, strokeWidth=0.4))
            self.d.add(_text(a.x0 - 3, yy - 2.2, f"{tv:g}", self.fonts, 5.8, "end", st.MUTED))
        if reference is not None:
            yy = float(ymap(reference))
            self.d.add(Line(a.x0, yy, a.x1, yy, strokeColor=st.MUTED, strokeWidth=0.5,
                            strokeDashArray=[2, 2]))
        t, v = as_arrays(trace)
        if len(t) == 0 or not np.any(np.isfinite(v)):
            self.d.add(_text((a.x0 + a.x1) / 2, (y0 + y1) / 2 - 2, "no valid signal recorded",
                             self.fonts, 7, "middle", st.MUTED))
            return
        ys = np.where(np.isfinite(v), ymap(np.nan_to_num(v, nan=lo)), np.nan)
        group = Group()
        _line(group, a.x(t), ys, colour, 0.55)
        self.d.add(group)

    def event_lanes(self, lanes: list[EventLane], row_h: float) -> None:
        y1 = self.y
        height = row_h * len(lanes)
        y0 = y1 - height
        a = self.axis
        self.d.add(Rect(a.x0, y0, a.x1 - a.x0, height, fillColor=None, strokeColor=st.RULE,
                        strokeWidth=0.4))
        min_w = 0.5
        for i, lane in enumerate(lanes):
            top = y1 - i * row_h
            if i:
                self.d.add(Line(a.x0, top, a.x1, top, strokeColor=st.ZEBRA, strokeWidth=0.4))
            label, size = _fit(f"{lane.label} ({len(lane.spans)})", self.fonts, 6.2,
                               a.x0 - 8)
            self.d.add(_text(4, top - row_h + 2.2, label, self.fonts, size))
            for onset, dur in lane.spans:
                x = float(a.x(onset))
                w = max(float(a.x(onset + dur)) - x, min_w)
                self.d.add(Rect(x, top - row_h + 1.5, w, row_h - 3, fillColor=lane.colour,
                                strokeColor=None))
        self.y = y0 - LANE_GAP

    def position_lanes(self, runs: list[dict[str, Any]] | None, row_h: float) -> None:
        order = ["supine", "left", "right", "prone", "upright", "unknown"]
        y1 = self.y
        height = row_h * len(order)
        y0 = y1 - height
        a = self.axis
        self.d.add(Rect(a.x0, y0, a.x1 - a.x0, height, fillColor=None, strokeColor=st.RULE,
                        strokeWidth=0.4))
        self.d.add(_text(4, y1 - 8, "Body position", self.fonts, 7, bold=True))
        for i, name in enumerate(order):
            top = y1 - i * row_h
            self.d.add(_text(a.x0 - 3, top - row_h + 2, name, self.fonts, 5.8, "end", st.MUTED))
        if not runs:
            self.d.add(_text((a.x0 + a.x1) / 2, (y0 + y1) / 2 - 2, "no position channel",
                             self.fonts, 7, "middle", st.MUTED))
        for run in runs or []:
            i = order.index(run["position"]) if run["position"] in order else len(order) - 1
            top = y1 - i * row_h
            x = float(a.x(run["start_s"]))
            w = max(float(a.x(run["end_s"])) - x, 0.5)
            self.d.add(Rect(x, top - row_h + 1.2, w, row_h - 2.4, fillColor=st.POSITION_BAR,
                            strokeColor=None))
        self.y = y0 - LANE_GAP


def overnight_drawing(
    width: float,
    traces: dict[str, Any] | None,
    start: datetime,
    duration_s: float,
    lanes: list[EventLane],
    shaded: list[tuple[float, float, str]],
    fonts: FontSet,
    height: float,
    spo2_floor: float | None = None,
) -> Drawing:
    """The overnight graph: SpO2, pulse, flow amplitude, events by type, body position.

    ``shaded`` holds (start_s, end_s, kind) with kind ``"excluded"`` or ``"wake"``; they
    are shaded across every lane so a physician sees why time does not count. The value
    lanes share what ``height`` leaves after the event and position lanes.
    """
    traces = traces or {}
    row_h = 9.0
    fixed = row_h * len(lanes) + 8.0 * 6 + LANE_GAP * 5 + AXIS_H + 4
    free = max(height - fixed, 150.0)
    heights = [free * 0.44, free * 0.29, free * 0.27, row_h * len(lanes), 8.0 * 6]
    total_h = sum(heights) + LANE_GAP * len(heights) + AXIS_H + 4
    d = Drawing(width, total_h)
    axis = TimeAxis(start, 0.0, max(duration_s, 60.0), LABEL_W, width - RIGHT_PAD)
    plot_top = total_h - 2
    plot_bottom = AXIS_H + LANE_GAP
    for t0, t1, kind in shaded:
        x0, x1 = float(axis.x(max(t0, 0.0))), float(axis.x(min(t1, axis.t1_s)))
        if x1 > x0:
            d.add(Rect(x0, plot_bottom, x1 - x0, plot_top - plot_bottom, strokeColor=None,
                       fillColor=st.EXCLUDED if kind == "excluded" else st.WAKE))
    for x, _label in axis.hour_ticks():
        d.add(Line(x, plot_bottom, x, plot_top, strokeColor=st.RULE, strokeWidth=0.3,
                   strokeDashArray=[1, 2]))
    build = _Lanes(d, axis, fonts, plot_top)
    _, spo2 = as_arrays(traces.get("spo2"))
    finite = spo2[np.isfinite(spo2)]
    data_lo = float(finite.min()) if len(finite) else 85.0
    lo = min(80.0, _nice_range(min(data_lo, spo2_floor or 100.0) - 2, 100, 10)[0])
    lo = max(lo, 40.0)
    build.value_lane("SpO2", "%", traces.get("spo2"), heights[0], lo, 100.0,
                     [v for v in (40, 50, 60, 70, 80, 90, 100) if v >= lo], st.SPO2_LINE,
                     reference=90.0)
    _, pulse = as_arrays(traces.get("pulse"))
    pf = pulse[np.isfinite(pulse)]
    plo, phi = _nice_range(float(pf.min()) - 3, float(pf.max()) + 3, 20) if len(pf) else (40, 120)
    step = 20 if phi - plo <= 100 else 40
    build.value_lane("Pulse rate", "bpm", traces.get("pulse"), heights[1], plo, phi,
                     list(np.arange(plo, phi + 1, step)), st.PULSE_LINE)
    build.value_lane("Flow amplitude", "% of night median", traces.get("flow_amplitude"),
                     heights[2], 0.0, 200.0, [0, 100, 200], st.FLOW_LINE)
    if lanes:
        build.event_lanes(lanes, row_h)
    build.position_lanes(traces.get("position"), 8.0)
    base = build.y + LANE_GAP
    for x, label in axis.hour_ticks():
        d.add(Line(x, base - 2, x, base, strokeColor=st.INK, strokeWidth=0.5))
        d.add(_text(x, base - 10, label, fonts, 6.8, "middle"))
    d.add(_text(axis.x0, base - 19, "clock time (recording clock)", fonts, 6, colour=st.MUTED))
    return d


def legend_drawing(width: float, fonts: FontSet) -> Drawing:
    """Legend for the shaded backgrounds and the SpO2 90 % line."""
    d = Drawing(width, 12)
    x = 0.0
    for fill, label in ((st.EXCLUDED, "excluded (invalid signal or diary)"),
                        (st.WAKE, "judged awake / outside lights-off")):
        d.add(Rect(x, 2, 14, 7, fillColor=fill, strokeColor=st.RULE, strokeWidth=0.3))
        d.add(_text(x + 18, 3, label, fonts, 6.5))
        x += 30 + 3.4 * len(label)
    d.add(Line(x, 5.5, x + 14, 5.5, strokeColor=st.MUTED, strokeWidth=0.5,
               strokeDashArray=[2, 2]))
    d.add(_text(x + 18, 3, "SpO2 90 % reference", fonts, 6.5))
    return d


_MARKERS = ("circle", "triangle", "square", "diamond")


def _marker(kind: str, x: float, y: float, r: float) -> Any:
    from reportlab.graphics.shapes import Circle

    style = {"fillColor": st.INK, "strokeColor": colors.white, "strokeWidth": 0.6}
    if kind == "circle":
        return Circle(x, y, r, **style)
    if kind == "triangle":
        return Polygon([x - r, y - r * 0.85, x + r, y - r * 0.85, x, y + r], **style)
    if kind == "square":
        return Rect(x - r * 0.85, y - r * 0.85, 1.7 * r, 1.7 * r, **style)
    return Polygon([x, y - r, x + r, y, x, y + r, x - r, y], **style)


def severity_scale(
    width: float, values: list[tuple[str, float | None]], thresholds: tuple[float, ...],
    fonts: FontSet,
) -> Drawing:
    """A horizontal REI scale with the AASM bands and one marker per rule set.

    The bands darken with severity (ordinal in greyscale). Each rule set has its own
    marker shape above the bar with a stem down to its REI; the line above names shape,
    rule set and value, so nothing depends on colour and no label crosses a marker.
    """
    y0, bar_h = 10.0, 11.0
    h = y0 + bar_h + 22
    d = Drawing(width, h)
    top = max([v for _, v in values if v is not None] + [thresholds[-1]])
    vmax = max(45.0, math.ceil((top + 5) / 5) * 5)
    x0, x1 = 4.0, width - 4.0

    def xmap(v: float) -> float:
        return x0 + min(v, vmax) / vmax * (x1 - x0)

    edges = [0.0, *thresholds, vmax]
    shades = ["#f4f6f7", "#dfe5e8", "#b9c5cb", "#8a9ba4"]
    names = ["none", "mild", "moderate", "severe"]
    for i in range(4):
        a, b = xmap(edges[i]), xmap(edges[i + 1])
        d.add(Rect(a, y0, b - a, bar_h, fillColor=colors.HexColor(shades[i]),
                   strokeColor=st.RULE, strokeWidth=0.3))
        d.add(_text((a + b) / 2, y0 + 3.4, names[i], fonts, 6, "middle", st.INK))
    d.add(_text(x0, 2.0, "0", fonts, 5.8, "middle", st.MUTED))
    for t in thresholds:
        d.add(_text(xmap(t), 2.0, f"{t:g}", fonts, 5.8, "middle", st.MUTED))
    d.add(_text(x1, 2.0, f"{vmax:g} events/h (REI)", fonts, 5.8, "end", st.MUTED))
    from reportlab.pdfbase.pdfmetrics import stringWidth

    lx = x0
    ly = y0 + bar_h + 14
    for i, (name, v) in enumerate(values):
        shape = _MARKERS[i % len(_MARKERS)]
        if v is not None:  # marker just above the bar, a stem down to the value
            x = xmap(v)
            d.add(Line(x, y0 + bar_h - 3, x, y0 + bar_h + 2, strokeColor=st.INK, strokeWidth=0.8))
            d.add(_marker(shape, x, y0 + bar_h + 4.5, 3.0))
        label = f"{name}: {v:.1f}/h" if v is not None else f"{name}: n/a"
        d.add(_marker(shape, lx + 3, ly + 2.2, 3.0))
        d.add(_text(lx + 9, ly, label, fonts, 6.6, bold=True))
        lx += 9 + stringWidth(label, fonts.bold, 6.6) + 16
    return d


def marker_legend(names: list[str], fonts: FontSet, width: float) -> Drawing:
    """Which marker shape stands for which rule set on the severity scale."""
    d = Drawing(width, 10)
    x = 4.0
    for i, name in enumerate(names):
        d.add(_marker(_MARKERS[i % len(_MARKERS)], x + 3, 5, 3.2))
        d.add(_text(x + 10, 2.6, name, fonts, 6.5))
        x += 22 + 4.2 * len(name)
    return d


def inline_bar(share: float, width: float = 80.0, height: float = 7.0) -> Drawing:
    """A small horizontal bar for a share in [0, 1] (tables of time in bands)."""
    d = Drawing(width, height)
    d.add(Rect(0, 1, width, height - 2, fillColor=st.ZEBRA, strokeColor=None))
    w = max(0.0, min(1.0, share)) * width
    if w > 0:
        d.add(Rect(0, 1, w, height - 2, fillColor=st.ACCENT, strokeColor=None))
    return d
