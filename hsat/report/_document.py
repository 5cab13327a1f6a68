"""The page frame: portrait and landscape templates, running header and footer,
"page n of N", and the DRAFT watermark."""

from __future__ import annotations

import io
from dataclasses import dataclass
from typing import Any

from reportlab.lib.units import mm
from reportlab.pdfgen.canvas import Canvas
from reportlab.platypus import BaseDocTemplate, Flowable, Frame, PageTemplate

from hsat import __version__
from hsat.report import _style as st
from hsat.report._fonts import FontSet


@dataclass(frozen=True)
class PageFacts:
    """What every page repeats: who the report is about and what state it is in."""

    clinic: str
    patient_line: str
    status_line: str
    draft: bool
    title: str


def _numbered_canvas(facts: PageFacts, fonts: FontSet) -> type[Canvas]:
    """A canvas that holds pages back until the end so it can print 'page n of N'."""

    class NumberedCanvas(Canvas):
        def __init__(self, *args: Any, **kwargs: Any) -> None:
            super().__init__(*args, **kwargs)
            self._saved: list[dict[str, Any]] = []

        def showPage(self) -> None:  # noqa: N802 (ReportLab's name)
            self._saved.append(dict(self.__dict__))
            self._startPage()

        def save(self) -> None:
            total = len(self._saved)
            for state in self._saved:
                self.__dict__.update(state)
                self._draw_footer(total)
                super().showPage()
            super().save()

        def _draw_footer(self, total: int) -> None:
            w, _h = self._pagesize
            self.saveState()
            self.setStrokeColor(st.RULE)
            self.setLineWidth(0.5)
            self.line(st.MARGIN_X, 12 * mm, w - st.MARGIN_X, 12 * mm)
            self.setFillColor(st.MUTED)
            self.setFont(fonts.regular, 6.8)
            self.drawString(st.MARGIN_X, 8.5 * mm, facts.patient_line)
            self.drawRightString(w - st.MARGIN_X, 8.5 * mm,
                                 f"page {self._pageNumber} of {total}")
            self.setFont(fonts.bold if facts.draft else fonts.regular, 6.8)
            self.setFillColor(st.WARN if facts.draft else st.MUTED)
            self.drawString(st.MARGIN_X, 5.2 * mm, facts.status_line)
            self.setFillColor(st.MUTED)
            self.setFont(fonts.regular, 6.2)
            self.drawRightString(w - st.MARGIN_X, 5.2 * mm, f"hsat {__version__}")
            self.restoreState()

    return NumberedCanvas


def _on_page(facts: PageFacts, fonts: FontSet):  # type: ignore[no-untyped-def]
    def draw(canvas: Canvas, doc: BaseDocTemplate) -> None:
        w, h = canvas._pagesize
        canvas.saveState()
        if facts.draft:
            canvas.setFillColor(st.WATERMARK)
            canvas.setFont(fonts.bold, 96)
            canvas.translate(w / 2, h / 2)
            canvas.rotate(35 if w < h else 20)
            canvas.drawCentredString(0, -30, "DRAFT")
            canvas.rotate(-(35 if w < h else 20))
            canvas.translate(-w / 2, -h / 2)
        if doc.page == 1:  # page 1 carries the full header as part of its content
            canvas.restoreState()
            return
        top = h - 10 * mm
        canvas.setFillColor(st.ACCENT)
        canvas.rect(st.MARGIN_X, top - 1.2 * mm, 2.2 * mm, 5.2 * mm, stroke=0, fill=1)
        canvas.setFillColor(st.INK)
        canvas.setFont(fonts.bold, 8.5)
        canvas.drawString(st.MARGIN_X + 4 * mm, top, facts.clinic)
        canvas.setFont(fonts.regular, 7.2)
        canvas.setFillColor(st.MUTED)
        canvas.drawRightString(w - st.MARGIN_X, top, facts.title)
        canvas.setStrokeColor(st.RULE)
        canvas.setLineWidth(0.5)
        canvas.line(st.MARGIN_X, top - 3.2 * mm, w - st.MARGIN_X, top - 3.2 * mm)
        if facts.draft:
            canvas.setFillColor(st.WARN)
            canvas.setFont(fonts.bold, 7.2)
            canvas.drawRightString(w - st.MARGIN_X, top - 7 * mm, "DRAFT \u2013 NOT SIGNED")
        canvas.restoreState()

    return draw


def build_pdf(story: list[Flowable], facts: PageFacts, fonts: FontSet, meta: dict[str, str]
              ) -> bytes:
    """Lay the story out on portrait pages (and landscape ones where it asks) -> PDF bytes."""
    buf = io.BytesIO()
    doc = BaseDocTemplate(
        buf, pagesize=st.PAGE, leftMargin=st.MARGIN_X, rightMargin=st.MARGIN_X,
        topMargin=st.MARGIN_TOP, bottomMargin=st.MARGIN_BOTTOM,
        title=meta.get("title", ""), author=meta.get("author", ""),
        subject=meta.get("subject", ""), creator=f"hsat {__version__}",
    )
    pw, ph = st.PAGE
    lw, lh = st.PAGE_LANDSCAPE
    portrait = Frame(st.MARGIN_X, st.MARGIN_BOTTOM, pw - 2 * st.MARGIN_X,
                     ph - st.MARGIN_TOP - st.MARGIN_BOTTOM, id="portrait",
                     leftPadding=0, rightPadding=0, topPadding=0, bottomPadding=0)
    landscape = Frame(st.MARGIN_X, st.MARGIN_BOTTOM, lw - 2 * st.MARGIN_X,
                      lh - st.MARGIN_TOP - st.MARGIN_BOTTOM, id="landscape",
                      leftPadding=0, rightPadding=0, topPadding=0, bottomPadding=0)
    on_page = _on_page(facts, fonts)
    doc.addPageTemplates([
        PageTemplate(id="portrait", frames=[portrait], pagesize=st.PAGE, onPage=on_page),
        PageTemplate(id="landscape", frames=[landscape], pagesize=st.PAGE_LANDSCAPE,
                     onPage=on_page),
    ])
    doc.build(story, canvasmaker=_numbered_canvas(facts, fonts))
    return buf.getvalue()


def frame_width(landscape: bool = False) -> float:
    w = (st.PAGE_LANDSCAPE if landscape else st.PAGE)[0]
    return w - 2 * st.MARGIN_X


def frame_height(landscape: bool = False) -> float:
    h = (st.PAGE_LANDSCAPE if landscape else st.PAGE)[1]
    return h - st.MARGIN_TOP - st.MARGIN_BOTTOM
