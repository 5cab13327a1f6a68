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


def _group_key(run: RunRow, by: str) -> str:
    if by == "month":
        return run.recorded_at[:7] if run.recorded_at else "unknown"
    return run.kit or "unknown"


def _quartiles(values: list[float]) -> str:
    if not values:
        return ""
    ordered = sorted(values)

    def q(p: float) -> float:  # linear interpolation between order statistics
        pos = p * (len(ordered) - 1)
        lo = int(pos)
        hi = min(lo + 1, len(ordered) - 1)
        return ordered[lo] + (ordered[hi] - ordered[lo]) * (pos - lo)

    return f"{q(0.5):.1f} ({q(0.25):.1f}-{q(0.75):.1f})"


def registry_groups(runs: list[RunRow], by: str) -> str:
    """QA summary per month or per kit: studies, inadequate and failed rates, REI spread.

    One line per group: how many studies, how many (and what share) were technically
    inadequate or failed, and per rule set the median REI with its interquartile range
    and the count in each AASM severity class, over the adequate studies only (an
    inadequate study's REI is not a finding).
    """
    if by not in ("month", "kit"):
        raise ValueError(f"cannot group by {by!r}: choose month or kit")
    if not runs:
        return "no studies match"
    names = _rule_names(runs)
    groups: dict[str, list[RunRow]] = {}
    for run in runs:
        groups.setdefault(_group_key(run, by), []).append(run)
    heads = [by.capitalize(), "Studies", "Inadequate", "Failed"]
    heads += [f"REI {n} median (IQR)" for n in names]
    heads += [f"none/mild/mod/severe {n}" for n in names]
    rows = []
    for key in sorted(groups):
        members = groups[key]
        n = len(members)
        inadequate = sum(r.status == "inadequate" for r in members)
        failed = sum(r.status == "failed" for r in members)
        row = [key, str(n), f"{inadequate} ({100 * inadequate / n:.0f} %)",
               f"{failed} ({100 * failed / n:.0f} %)"]
        adequate = [r for r in members if r.status == "done"]
        spreads, classes = [], []
        for name in names:
            results = [r.results[name] for r in adequate if name in r.results]
            spreads.append(_quartiles([x.rei for x in results if x.rei is not None]))
            counts = [sum(x.severity == s for x in results)
                      for s in ("none", "mild", "moderate", "severe")]
            classes.append("/".join(str(c) for c in counts))
        rows.append(row + spreads + classes)
    widths = [max(len(heads[i]), *(len(r[i]) for r in rows)) for i in range(len(heads))]
    out = ["  ".join(h.ljust(widths[i]) for i, h in enumerate(heads)).rstrip(),
           "  ".join("-" * w for w in widths)]
    out += ["  ".join(c.ljust(widths[i]) for i, c in enumerate(r)).rstrip() for r in rows]
    out.append("")
    out.append("REI spread and severity classes over technically adequate studies only.")
    return "\n".join(out)
