"""Fonts for the report, and the check that a text can be drawn with them.

Strategy: the report uses DejaVu Sans / DejaVu Sans Mono (free licence, wide Unicode
coverage: Latin, Greek, Cyrillic and more). The TrueType files are taken from the
matplotlib package (installed with neurokit2, a dependency of hsat) or from the system's
``fonts-dejavu`` folder. Every name and text is checked glyph by glyph before anything is
written; a character the font cannot draw is refused with a message naming it, instead of
printing an empty box. Without DejaVu the report falls back to ReportLab's built-in
Helvetica, which draws only the Windows-1252 (Western European) character set.
"""

from __future__ import annotations

import importlib.util
import unicodedata
from dataclasses import dataclass
from pathlib import Path

from reportlab.lib.fonts import addMapping
from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont

_FILES = {
    "regular": "DejaVuSans.ttf",
    "bold": "DejaVuSans-Bold.ttf",
    "italic": "DejaVuSans-Oblique.ttf",
    "bolditalic": "DejaVuSans-BoldOblique.ttf",
    "mono": "DejaVuSansMono.ttf",
}
_SYSTEM_DIRS = (
    Path("/usr/share/fonts/truetype/dejavu"),
    Path("/usr/share/fonts/dejavu"),
    Path("/usr/local/share/fonts"),
)


@dataclass(frozen=True)
class FontSet:
    """Font names registered with ReportLab for one report."""

    regular: str
    bold: str
    italic: str
    mono: str
    family: str
    truetype: bool


def _candidate_dirs() -> list[Path]:
    dirs: list[Path] = []
    spec = importlib.util.find_spec("matplotlib")  # locate only: importing it is slow
    if spec is not None and spec.submodule_search_locations:
        for loc in spec.submodule_search_locations:
            dirs.append(Path(loc) / "mpl-data" / "fonts" / "ttf")
    dirs.extend(_SYSTEM_DIRS)
    return dirs


def _find_dejavu() -> dict[str, Path] | None:
    for folder in _candidate_dirs():
        found = {k: folder / f for k, f in _FILES.items()}
        if all(p.is_file() for p in found.values()):
            return found
    return None


def load_fonts() -> FontSet:
    """Register the report fonts with ReportLab (once per process) and name them."""
    if "HsatSans" in pdfmetrics.getRegisteredFontNames():
        return FontSet("HsatSans", "HsatSans-Bold", "HsatSans-Italic", "HsatMono",
                       "HsatSans", True)
    files = _find_dejavu()
    if files is None:
        return FontSet("Helvetica", "Helvetica-Bold", "Helvetica-Oblique", "Courier",
                       "Helvetica", False)
    names = {"regular": "HsatSans", "bold": "HsatSans-Bold", "italic": "HsatSans-Italic",
             "bolditalic": "HsatSans-BoldItalic", "mono": "HsatMono"}
    for key, name in names.items():
        pdfmetrics.registerFont(TTFont(name, str(files[key])))
    addMapping("HsatSans", 0, 0, "HsatSans")
    addMapping("HsatSans", 1, 0, "HsatSans-Bold")
    addMapping("HsatSans", 0, 1, "HsatSans-Italic")
    addMapping("HsatSans", 1, 1, "HsatSans-BoldItalic")
    return FontSet("HsatSans", "HsatSans-Bold", "HsatSans-Italic", "HsatMono", "HsatSans", True)


def undrawable(text: str, fonts: FontSet) -> list[str]:
    """Characters of ``text`` that the report's fonts cannot draw (empty when all can).

    Whitespace and control characters are ignored (line breaks are layout, not glyphs).
    """
    missing: list[str] = []
    if fonts.truetype:
        faces = [pdfmetrics.getFont(n).face.charToGlyph for n in (fonts.regular, fonts.bold)]
    for ch in dict.fromkeys(text):  # unique, in order
        if ch.isspace() or unicodedata.category(ch).startswith("C"):
            continue
        if fonts.truetype:
            if not all(ord(ch) in face for face in faces):
                missing.append(ch)
        else:
            try:
                ch.encode("cp1252")
            except UnicodeEncodeError:
                missing.append(ch)
    return missing


def describe_chars(chars: list[str]) -> str:
    """``'中' (U+4E2D CJK UNIFIED IDEOGRAPH-4E2D)`` for a message."""
    return ", ".join(
        f"'{c}' (U+{ord(c):04X} {unicodedata.name(c, 'unnamed character')})" for c in chars
    )
