"""Table building blocks shared by the report sections."""

from __future__ import annotations

from collections.abc import Sequence
from xml.sax.saxutils import escape

from reportlab.platypus import Flowable, Paragraph, Table, TableStyle

from hsat.report import _style as st
from hsat.report._style import Styles

Cell = str | Flowable


def p(text: str, style: object) -> Paragraph:
    """A paragraph of plain text (escaped: user text never becomes markup)."""
    return Paragraph(escape(text), style)  # type: ignore[arg-type]


def data_table(
    styles: Styles,
    header: Sequence[str],
    rows: Sequence[Sequence[Cell]],
    widths: Sequence[float],
    *,
    numeric_from: int = 1,
    numeric_cols: Sequence[int] | None = None,
    center: bool = False,
    emphasis_rows: Sequence[int] = (),
    repeat_header: bool = True,
    pad: float = 2.2,
) -> Table:
    """A ruled table: header in the accent colour, light zebra rows, numbers right-aligned.

    Columns at index >= ``numeric_from`` (or those in ``numeric_cols``) are right-aligned,
    or centred with ``center``.
    """
    numeric = set(numeric_cols) if numeric_cols is not None else set(
        range(numeric_from, len(widths)))
    value_style = styles.cell_center if center else styles.cell_right
    head = [p(h, styles.cell_head_center if center and i in numeric else styles.cell_head)
            for i, h in enumerate(header)]
    body: list[list[Cell]] = []
    for row in rows:
        cells: list[Cell] = []
        for i, cell in enumerate(row):
            if isinstance(cell, str):
                cells.append(p(cell, value_style if i in numeric else styles.cell))
            else:
                cells.append(cell)
        body.append(cells)
    table = Table([head, *body], colWidths=list(widths), repeatRows=1 if repeat_header else 0,
                  hAlign="LEFT")
    cmds: list[tuple[object, ...]] = [
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("LINEBELOW", (0, 0), (-1, 0), 0.8, st.ACCENT),
        ("LINEBELOW", (0, -1), (-1, -1), 0.5, st.RULE),
        ("TOPPADDING", (0, 0), (-1, -1), pad),
        ("BOTTOMPADDING", (0, 0), (-1, -1), pad),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ]
    for r in range(1, len(body) + 1):
        if r % 2 == 0:
            cmds.append(("BACKGROUND", (0, r), (-1, r), st.ZEBRA))
    for r in emphasis_rows:
        cmds.append(("BACKGROUND", (0, r + 1), (-1, r + 1), st.ACCENT_LIGHT))
    table.setStyle(TableStyle(cmds))
    return table


def fact_grid(styles: Styles, facts: Sequence[tuple[str, str]], columns: int, width: float,
              *, value_style: object = None) -> Table:
    """Label-above-value cells in a grid (patient details, headline facts)."""
    value_style = value_style or styles.value
    cells: list[list[Cell]] = []
    row: list[Cell] = []
    for label, value in facts:
        row.append([p(label, styles.label), p(value, value_style)])  # type: ignore[list-item]
        if len(row) == columns:
            cells.append(row)
            row = []
    if row:
        row.extend([""] * (columns - len(row)))
        cells.append(row)
    table = Table(cells, colWidths=[width / columns] * columns, hAlign="LEFT")
    table.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), 3),
        ("RIGHTPADDING", (0, 0), (-1, -1), 4),
        ("TOPPADDING", (0, 0), (-1, -1), 2),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 3),
        ("LINEBELOW", (0, 0), (-1, -1), 0.3, st.RULE),
    ]))
    return table


def boxed(content: Sequence[Flowable], width: float, *, fill: object = None,
          border: object = None, pad: float = 6) -> Table:
    """Flowables inside a single-cell box (caution, verdicts, signature)."""
    table = Table([[list(content)]], colWidths=[width], hAlign="LEFT")
    cmds: list[tuple[object, ...]] = [
        ("LEFTPADDING", (0, 0), (-1, -1), pad),
        ("RIGHTPADDING", (0, 0), (-1, -1), pad),
        ("TOPPADDING", (0, 0), (-1, -1), pad - 1),
        ("BOTTOMPADDING", (0, 0), (-1, -1), pad),
    ]
    if fill is not None:
        cmds.append(("BACKGROUND", (0, 0), (-1, -1), fill))
    if border is not None:
        cmds.append(("BOX", (0, 0), (-1, -1), 0.8, border))
    table.setStyle(TableStyle(cmds))
    return table
