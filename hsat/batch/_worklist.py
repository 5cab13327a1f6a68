"""The morning worklist: one row per recording of a batch, as CSV and printable HTML.

The HTML page is meant for one landscape sheet: what each study is, its REI under each
rule set, whether it is adequate, what happened to it, and where its draft report is.
"""

from __future__ import annotations

import csv
import html
import io
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from hsat.batch._registry import RunRow
from hsat.outputs import atomic_write_text, ensure_dir

WORKLISTS_DIR = "worklists"
CAUTION = (
    "Automated scoring must be reviewed against the raw signals by a qualified clinician "
    "before a report is signed. HSAT can underestimate severity; a negative, inconclusive "
    "or technically inadequate HSAT does not exclude sleep apnea and calls for "
    "polysomnography. Results do not replace clinical judgement; follow local regulations "
    "and licensed practice."
)


@dataclass(frozen=True)
class WorklistItem:
    """One recording of the batch: its status and, when it was analysed, its run."""

    file_name: str
    status: str
    run: RunRow | None = None
    reason: str = ""
    source: str = ""

    @property
    def failed(self) -> bool:
        return self.status == "failed"


def _number(value: float | None, digits: int = 1) -> str:
    return "" if value is None else f"{value:.{digits}f}"


def recorded_text(iso: str) -> str:
    """``2024-03-05T22:41:00`` -> ``2024-03-05 22:41`` (as written in the header)."""
    try:
        return datetime.fromisoformat(iso).strftime("%Y-%m-%d %H:%M")
    except ValueError:
        return iso


def _adequacy(run: RunRow | None) -> str:
    if run is None or run.status == "failed":
        return ""
    if run.status == "inadequate":
        return "inadequate: " + (run.adequacy_reasons or "reason not given")
    return "adequate"


#: Worklist order: what needs someone's action first.
_ORDER = ("failed", "inadequate - repeat study", "new", "done earlier")


def _rank(item: WorklistItem) -> tuple[int, str]:
    position = _ORDER.index(item.status) if item.status in _ORDER else len(_ORDER)
    return position, item.file_name


def short_reason(reason: str, source: str) -> str:
    """A failure reason without the leading ``<path>: `` (the file is named beside it)."""
    for prefix in (f"{source}: ",):
        if source and reason.startswith(prefix):
            return reason[len(prefix):]
    return reason


def _rows(items: tuple[WorklistItem, ...], rule_names: list[str]) -> list[dict[str, str]]:
    rows = []
    for item in sorted(items, key=_rank):
        run = item.run
        done = run is not None and run.status != "failed"
        row = {
            "file": item.file_name,
            "patient": (run.patient_name if done else "") if run else "",
            "patient_code": (run.patient_code if done else "") if run else "",
            "recorded": recorded_text(run.recorded_at) if done and run else "",
            "kit": run.kit if done and run else "",
            "monitoring_time_h": _number(run.monitoring_time_h, 2) if done and run else "",
        }
        for name in rule_names:
            result = run.results.get(name) if done and run else None
            row[f"rei_{name}"] = _number(result.rei) if result else ""
            row[f"severity_{name}"] = result.severity if result else ""
        row["adequacy"] = _adequacy(run)
        row["status"] = item.status
        row["reason"] = short_reason(item.reason, item.source) if item.failed else ""
        row["report"] = (run.report_path or "") if done and run else ""
        row["signed"] = (f"v{run.signed[-1].version} by {run.signed[-1].signed_by}"
                         if run and run.signed else "")
        rows.append(row)
    return rows


def worklist_csv(items: tuple[WorklistItem, ...], rule_names: list[str]) -> str:
    rows = _rows(items, rule_names)
    buffer = io.StringIO()
    columns = list(rows[0]) if rows else ["file", "status"]
    writer = csv.DictWriter(buffer, fieldnames=columns, lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    return buffer.getvalue()


_STYLE = """
@page { size: A4 landscape; margin: 10mm; }
body { font-family: "DejaVu Sans", Arial, sans-serif; font-size: 9pt; color: #111; margin: 0; }
h1 { font-size: 14pt; margin: 0 0 2pt 0; }
.meta { color: #444; margin-bottom: 6pt; }
table { border-collapse: collapse; width: 100%; }
th, td { border-bottom: 0.5pt solid #999; padding: 3pt 4pt; text-align: left;
         vertical-align: top; }
th { border-bottom: 1pt solid #111; font-size: 8pt; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.small, .small { font-size: 7.5pt; color: #333; }
tr { page-break-inside: avoid; }
tr.failed td.status b, tr.inadequate td.status b { font-weight: bold; }
td.status b { font-weight: normal; }
td.who { min-width: 38mm; }
.name { white-space: nowrap; }
th.rei, td.rei { white-space: nowrap; }
.caution { margin-top: 8pt; font-size: 7.5pt; color: #333; }
"""


def worklist_html(items: tuple[WorklistItem, ...], rule_names: list[str], batch_id: int,
                  out_dir: Path, generated: datetime) -> str:
    """The printable page (self-contained: inline style, no scripts, no images)."""
    esc = html.escape
    rows = _rows(items, rule_names)
    counts: dict[str, int] = {}
    for item in items:
        counts[item.status] = counts.get(item.status, 0) + 1
    heads = [("#", ""), ("Patient", ""), ("Recorded", ""), ("Kit", ""),
             ("Monitoring (h)", "")]
    heads += [(f"REI {name}", "rei") for name in rule_names]
    heads += [("Adequacy", ""), ("Status", ""), ("Study folder (draft report)", "")]
    body = []
    for n, row in enumerate(rows, start=1):
        css = ("failed" if row["status"] == "failed"
               else "inadequate" if row["status"].startswith("inadequate") else "")
        who = f'<span class="name">{esc(row["patient"] or row["file"])}</span>'
        if row["patient_code"]:
            who += f'<br><span class="small">{esc(row["patient_code"])}</span>'
        if row["patient"]:
            who += f'<br><span class="small">{esc(row["file"])}</span>'
        cells = [f'<td class="num">{n}</td>', f'<td class="who">{who}</td>',
                 f'<td class="small">{esc(row["recorded"])}</td>',
                 f"<td>{esc(row['kit'])}</td>",
                 f'<td class="num">{esc(row["monitoring_time_h"])}</td>']
        for name in rule_names:
            rei, severity = row[f"rei_{name}"], row[f"severity_{name}"]
            cells.append(f'<td class="num rei">{esc(rei)}'
                         + (f'<br><span class="small">{esc(severity)}</span>' if rei else "")
                         + "</td>")
        cells.append(f'<td class="small">{esc(row["adequacy"])}</td>')
        status = f"<b>{esc(row['status'])}</b>"
        if row["reason"]:
            status += f'<br><span class="small">{esc(row["reason"])}</span>'
        if row["signed"]:
            status += f'<br><span class="small">signed {esc(row["signed"])}</span>'
        cells.append(f'<td class="status">{status}</td>')
        link = esc(row["report"])
        folder = esc(row["report"].split("/")[-2]) if link.count("/") >= 2 else link
        cells.append(f'<td class="small"><a href="{link}">{folder.replace("_", "_<wbr>")}'
                     "</a></td>" if link else "<td></td>")
        body.append(f'<tr class="{css}">' + "".join(cells) + "</tr>")
    summary = ", ".join(f"{v} {esc(k)}" for k, v in counts.items()) or "no recordings"
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<title>Worklist, batch {batch_id}</title><style>{_STYLE}</style></head><body>"
        f"<h1>Worklist &mdash; batch {batch_id}</h1>"
        f'<div class="meta">{esc(generated.strftime("%A %d %B %Y, %H:%M"))} &middot; '
        f"{len(items)} recording(s): {summary} &middot; output folder "
        f"{esc(str(out_dir))}</div>"
        "<table><thead><tr>" + "".join(f'<th class="{css}">{esc(h)}</th>'
                                       for h, css in heads)
        + "</tr></thead><tbody>" + "".join(body) + "</tbody></table>"
        f'<p class="caution">REI = (apneas + hypopneas) per hour of monitoring time. '
        f"{esc(CAUTION)}</p></body></html>\n"
    )


def write_worklist(out_dir: Path, items: tuple[WorklistItem, ...],
                   rule_sets: tuple[tuple[str, str], ...], batch_id: int, *,
                   mode: int = 0o600, dir_mode: int = 0o700) -> tuple[Path, Path]:
    """Write ``OUT/worklist.csv`` and ``OUT/worklist.html`` (the latest batch) and a copy
    of each under ``OUT/worklists/``; return the two latest paths."""
    names = [name for name, _ in rule_sets]
    csv_text = worklist_csv(items, names)
    html_text = worklist_html(items, names, batch_id, out_dir, datetime.now())
    history = ensure_dir(out_dir / WORKLISTS_DIR, dir_mode)
    atomic_write_text(history / f"worklist-batch-{batch_id:04d}.csv", csv_text, mode=mode)
    atomic_write_text(history / f"worklist-batch-{batch_id:04d}.html", html_text, mode=mode)
    csv_path = atomic_write_text(out_dir / "worklist.csv", csv_text, mode=mode)
    html_path = atomic_write_text(out_dir / "worklist.html", html_text, mode=mode)
    return csv_path, html_path
