"""``hsat registry`` output: an aligned table for the screen and a full CSV for QA."""

from __future__ import annotations

import csv
import io
from pathlib import Path

from hsat.batch._facts import INDEX_KEYS
from hsat.batch._registry import RunRow
from hsat.batch._worklist import recorded_text, short_reason

_MAX_NAME = 26
_MAX_CODE = 14


def _rule_names(runs: list[RunRow]) -> list[str]:
    names: list[str] = []
    for run in runs:
        names.extend(n for n, _ in run.rule_sets if n not in names)
    return names


def _clip(text: str, limit: int) -> str:
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _note(run: RunRow) -> str:
    if run.status == "failed":
        return short_reason(run.error, run.source_path)
    if run.status == "inadequate":
        return run.adequacy_reasons or "technically inadequate"
    return Path(run.folder).name if run.folder else ""


def registry_table(runs: list[RunRow], *, width: int | None = None) -> str:
    """The registry as an aligned text table, one study (or run) per line, plus totals.

    ``width`` clips each line (a terminal's width); ``None`` keeps lines whole (a pipe).
    """
    if not runs:
        return "no studies match"
    names = _rule_names(runs)
    heads = ["Recorded", "Patient", "ID", "Kit", "MT h"] + [f"REI {n}" for n in names]
    heads += ["Status", "Signed", "Study folder / reason"]
    lines = []
    for run in runs:
        done = run.status != "failed"
        cells = [recorded_text(run.recorded_at) if done else "",
                 _clip(run.patient_name if done else run.file_name, _MAX_NAME),
                 _clip(run.patient_code, _MAX_CODE) if done else "",
                 run.kit if done else "",
                 f"{run.monitoring_time_h:.2f}" if run.monitoring_time_h is not None else ""]
        for name in names:
            result = run.results.get(name)
            cells.append(f"{result.rei:5.1f} {result.severity}"
                         if result and result.rei is not None else "")
        status = run.status + ("" if run.current or not done else " (old)")
        cells += [status, f"v{run.signed[-1].version}" if run.signed else "", _note(run)]
        lines.append(cells)
    widths = [max(len(heads[i]), *(len(row[i]) for row in lines)) for i in range(len(heads))]
    right = {4}

    def fmt(row: list[str]) -> str:
        parts = [row[i].rjust(widths[i]) if i in right else row[i].ljust(widths[i])
                 for i in range(len(row) - 1)]
        text = "  ".join(parts + [row[-1]])
        return text if width is None or len(text) <= width else text[: width - 1] + "…"

    out = [fmt(heads), fmt(["-" * w for w in widths[:-1]] + ["-" * len(heads[-1])])]
    out += [fmt(row) for row in lines]
    counts: dict[str, int] = {}
    for run in runs:
        counts[run.status] = counts.get(run.status, 0) + 1
    signed = sum(1 for r in runs if r.signed)
    total = f"{len(runs)} stud{'y' if len(runs) == 1 else 'ies'}: " + ", ".join(
        f"{counts[s]} {s}" for s in ("done", "inadequate", "failed") if s in counts)
    out.append("")
    out.append(f"{total}; {signed} signed")
    return "\n".join(out)


def registry_csv(runs: list[RunRow]) -> str:
    """Every listed run with all its indices per rule set (one row per run)."""
    names = _rule_names(runs)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    head = ["run_id", "study_sha256", "file", "recorded_at", "month", "patient_code",
            "patient_name", "kit", "status", "error", "adequacy_reasons",
            "monitoring_time_h", "t90_pct", "nadir_pct", "hypoxic_burden"]
    for name in names:
        head += [f"{k}_{name}" for k in INDEX_KEYS] + [f"severity_{name}",
                                                      f"rule_set_sha256_{name}"]
    head += ["software_version", "config_hash", "started_at", "finished_at", "duration_s",
             "current", "folder", "report", "signed_versions", "last_signed_by",
             "last_signed_at"]
    writer.writerow(head)
    for run in runs:
        row: list[object] = [
            run.id, run.study_sha256, run.file_name, run.recorded_at, run.recorded_at[:7],
            run.patient_code, run.patient_name, run.kit, run.status, run.error,
            run.adequacy_reasons, run.monitoring_time_h, run.t90_pct, run.nadir_pct,
            run.hypoxic_burden]
        for name in names:
            result = run.results.get(name)
            row += [getattr(result, k) if result else None for k in INDEX_KEYS]
            row += [result.severity if result else "", result.rule_set_sha256 if result
                    else ""]
        last = run.signed[-1] if run.signed else None
        row += [run.software_version, run.config_hash, run.started_at, run.finished_at,
                run.duration_s, int(run.current), run.folder or "", run.report_path or "",
                len(run.signed), last.signed_by if last else "",
                last.signed_at if last else ""]
        writer.writerow(["" if v is None else v for v in row])
    return buffer.getvalue()
