"""A small Markdown-like markup for the physician's interpretation text.

Enough for a clinical interpretation: paragraphs separated by blank lines, headings
(``# Title`` / ``## Section``), bullets (``-``, ``*`` or ``+`` at line start, or ``1.``
numbered), and inline ``**bold**`` / ``*italic*``. Everything else is printed as written:
no HTML, links or images.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Literal
from xml.sax.saxutils import escape

from reportlab.platypus import Flowable, Paragraph

from hsat.report._style import Styles

BlockKind = Literal["heading", "subheading", "paragraph", "bullet", "numbered"]
_BULLET = re.compile(r"^\s*[-*+]\s+(.*)$")
_NUMBERED = re.compile(r"^\s*(\d{1,3})[.)]\s+(.*)$")
_HEADING = re.compile(r"^\s*(#{1,6})\s+(.*?)\s*#*\s*$")


@dataclass(frozen=True)
class Block:
    kind: BlockKind
    text: str
    number: int = 0


def parse_markup(text: str) -> list[Block]:
    """Split interpretation text into headings, paragraphs and list items."""
    blocks: list[Block] = []
    para: list[str] = []

    def flush() -> None:
        if para:
            blocks.append(Block("paragraph", " ".join(s.strip() for s in para)))
            para.clear()

    for line in text.replace("\r\n", "\n").replace("\r", "\n").split("\n"):
        if not line.strip():
            flush()
            continue
        if m := _HEADING.match(line):
            flush()
            kind: BlockKind = "heading" if len(m.group(1)) == 1 else "subheading"
            blocks.append(Block(kind, m.group(2)))
        elif m := _BULLET.match(line):
            flush()
            blocks.append(Block("bullet", m.group(1).strip()))
        elif m := _NUMBERED.match(line):
            flush()
            blocks.append(Block("numbered", m.group(2).strip(), int(m.group(1))))
        elif blocks and blocks[-1].kind in ("bullet", "numbered") and not para and (
            line.startswith((" ", "\t"))
        ):
            last = blocks.pop()  # an indented continuation of the list item
            blocks.append(Block(last.kind, f"{last.text} {line.strip()}", last.number))
        else:
            para.append(line)
    flush()
    return [b for b in blocks if b.text.strip()]


def inline(text: str) -> str:
    """Escape for ReportLab's paragraph markup, then apply **bold** and *italic*."""
    s = escape(text)
    s = re.sub(r"\*\*(.+?)\*\*", r"<b>\1</b>", s)
    s = re.sub(r"(?<![\w*])\*(?!\s)(.+?)(?<!\s)\*(?![\w*])", r"<i>\1</i>", s)
    return s


def plain_text(blocks: list[Block]) -> str:
    """The visible text of the blocks (what glyph checks and emptiness checks look at)."""
    return "\n".join(b.text for b in blocks)


def to_flowables(blocks: list[Block], styles: Styles) -> list[Flowable]:
    out: list[Flowable] = []
    for b in blocks:
        if b.kind == "heading":
            out.append(Paragraph(inline(b.text), styles.h2))
        elif b.kind == "subheading":
            out.append(Paragraph(inline(b.text), styles.h3))
        elif b.kind == "bullet":
            out.append(Paragraph(inline(b.text), styles.bullet, bulletText="\u2022"))
        elif b.kind == "numbered":
            out.append(Paragraph(inline(b.text), styles.bullet, bulletText=f"{b.number}."))
        else:
            out.append(Paragraph(inline(b.text), styles.body))
    return out
