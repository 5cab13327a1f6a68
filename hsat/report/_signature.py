"""The interpretation page of a signed report: amendment note, the physician's text, the
inadequacy acknowledgement and the signature block."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from xml.sax.saxutils import escape

from reportlab.platypus import CondPageBreak, Flowable, KeepTogether, Paragraph, Spacer

from hsat.report import _style as st
from hsat.report._document import frame_width
from hsat.report._markup import Block, to_flowables
from hsat.report._style import Styles
from hsat.report._tables import boxed, fact_grid

ACKNOWLEDGEMENT_TEXT = (
    "The interpreting physician acknowledges that this study did not meet the technical "
    "adequacy criteria stated in the technical section, and signs it knowing that its "
    "results may be unreliable."
)


@dataclass(frozen=True)
class Amendment:
    """What a new version says about the one it replaces."""

    previous_version: int
    previous_signed_at: str
    previous_physician: str
    reason: str
    changes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Signature:
    """A signing: who, when, which version, and the interpretation text."""

    version: int
    physician: str
    signed_at: datetime  # UTC
    interpretation: tuple[Block, ...]
    acknowledged_inadequate: bool = False
    amendment: Amendment | None = None
    fingerprints: dict[str, str] = field(default_factory=dict)


def signature_block(sig: Signature, styles: Styles, width: float) -> Flowable:
    when = sig.signed_at.strftime("%Y-%m-%d %H:%M:%S UTC")
    facts = [
        ("Interpreted and signed by", sig.physician),
        ("Signed at", when),
        ("Report version", str(sig.version)),
    ]
    items: list[Flowable] = [
        Paragraph("<b>Signature</b>", styles.h3),
        fact_grid(styles, facts, 3, width - 14),
        Spacer(1, 3),
        Paragraph(
            "Electronically signed in hsat. The SHA-256 of this file is recorded in the "
            "study's sign-off log; <i>hsat verify</i> checks it.", styles.tiny),
    ]
    if sig.fingerprints:
        lines = "<br/>".join(f"{escape(k)}: {escape(v)}" for k, v in sig.fingerprints.items())
        items.append(Paragraph(f"Rendered from {lines}", styles.mono))
    return boxed(items, width, border=st.ACCENT, pad=7)


def interpretation_page(sig: Signature, styles: Styles) -> list[Flowable]:
    width = frame_width()
    story: list[Flowable] = [Paragraph("Interpretation", styles.h1)]
    if sig.amendment is not None:
        a = sig.amendment
        lines = [
            Paragraph(
                f"<b>Amendment: version {sig.version} replaces version {a.previous_version}</b> "
                f"(signed by {escape(a.previous_physician)} at {escape(a.previous_signed_at)}; "
                "that version is kept unchanged).", styles.small),
            Paragraph(f"<b>Reason:</b> {escape(a.reason)}", styles.small),
        ]
        if a.changes:
            lines.append(Paragraph("<b>What changed:</b>", styles.small))
            lines.extend(Paragraph(escape(c), styles.small, bulletText="\u2013")
                         for c in a.changes)
        story.append(boxed(lines, width, fill=st.ACCENT_LIGHT, pad=5))
        story.append(Spacer(1, 6))
    story.extend(to_flowables(list(sig.interpretation), styles))
    story.append(Spacer(1, 8))
    if sig.acknowledged_inadequate:
        story.append(boxed([Paragraph(f"<b>Inadequate study acknowledged.</b> "
                                      f"{ACKNOWLEDGEMENT_TEXT}", styles.small)],
                           width, fill=st.WARN_LIGHT, border=st.WARN, pad=5))
        story.append(Spacer(1, 6))
    story.append(CondPageBreak(120))
    story.append(KeepTogether([signature_block(sig, styles, width)]))
    return story
