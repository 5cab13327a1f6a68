"""``hsat check``: is a returned kit's recording readable and technically adequate?"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import click

from hsat.errors import EXIT_INADEQUATE, HsatError


class StudyInadequate(HsatError):
    """The study is technically inadequate: the account is printed, then exit code 3.

    Raised rather than ``ctx.exit(3)`` because ``hsat.cli.main`` runs click with
    ``standalone_mode=False``, where click returns (not raises) an ``Exit`` code.
    """

    exit_code = EXIT_INADEQUATE


#: Exclusions listed one by one before the text account switches to totals.
MAX_ROWS = 40


def _clock(seconds: float) -> str:
    s = int(round(seconds))
    return f"{s // 3600:d}:{s % 3600 // 60:02d}:{s % 60:02d}"


def _table(rows: list[list[str]]) -> list[str]:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return ["  " + "  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
            for r in rows]


def render_text(d: dict[str, Any]) -> str:
    """The human-readable account of ``describe()`` output."""
    lines = [
        f"{d['file']}",
        f"  {d['file_type']}, start {d['start']}, {d['duration_h']:.2f} h recorded"
        + (f", equipment {d['equipment']!r}" if d["equipment"] else "")
        + f"; channel profile {d['profile']}",
        "",
        "Channels",
    ]
    rows = [["role", "label", "rate", "unit", "valid", "why"]]
    for role, r in d["roles"].items():
        rows.append([role, r["label"], f"{r['fs']:g} Hz", r["unit"] or "-",
                     f"{r['valid_h']:.2f} h", r["reason"]])
    lines += _table(rows)
    if d["unused_labels"]:
        lines.append("  not used: " + ", ".join(d["unused_labels"]))
    lines += ["", "Excluded"]
    if d["exclusions"]:
        rows = [["from", "to", "minutes", "channel", "reason"]]
        for e in d["exclusions"][:MAX_ROWS]:
            rows.append([_clock(e["start_s"]), _clock(e["end_s"]), f"{e['duration_s'] / 60:.1f}",
                         e["role"] or "all", e["reason"]])
        lines += _table(rows)
        if len(d["exclusions"]) > MAX_ROWS:
            lines.append(f"  ... {len(d['exclusions']) - MAX_ROWS} more (see --json); totals:")
            lines += [f"    {k}: {v:.1f} min" for k, v in d["exclusion_minutes"].items()]
    else:
        lines.append("  nothing")
    lines += ["", "Judged awake"]
    if d["wake"]:
        rows = [["from", "to", "minutes", "why"]]
        for w in d["wake"]:
            rows.append([_clock(w["start_s"]), _clock(w["end_s"]),
                         f"{(w['end_s'] - w['start_s']) / 60:.1f}", w["reason"]])
        lines += _table(rows)
    else:
        lines.append("  nothing")
    lines.append(f"  (how: {d['wake_judged_by']})")
    lines += [
        "",
        f"Recording time {d['recording_time_h']:.2f} h (lights off {_clock(d['lights_off_s'])}, "
        f"lights on {_clock(d['lights_on_s'])}); monitoring time {d['monitoring_time_h']:.2f} h",
    ]
    if d["warnings"]:
        lines += ["", "Warnings"] + [f"  - {w}" for w in d["warnings"]]
    verdict = "PASS" if d["adequate"] else "FAIL"
    lines += ["", f"{verdict}: technically {'adequate' if d['adequate'] else 'inadequate'}: "
              + "; ".join(d["adequacy"]["reasons"]), d["caution"]]
    return "\n".join(lines)


@click.command("check")
@click.argument("path", type=click.Path(path_type=Path))
@click.option("--profile", default=None, metavar="NAME_OR_TOML",
              help="channel profile: a built-in name or a TOML file "
                   "(default: automatic label matching)")
@click.option("--json", "as_json", is_flag=True, help="print the account as one JSON object")
def check(path: Path, profile: str | None, as_json: bool) -> None:
    """Check the HSAT recording PATH (EDF/EDF+): channels, exclusions, monitoring time.

    Says which channel plays each role and why, each channel's rate, unit and valid
    hours, what was excluded and why, the monitoring time, and whether the study is
    technically adequate (at least 4 h of valid airflow and oximetry together).

    Exit codes: 0 adequate, 3 inadequate (the reason also goes to stderr), 4 unreadable
    file, 5 unusable channels, 6 bad channel profile.
    """
    from hsat import api

    described = api.check(path, profile=profile)
    if as_json:
        click.echo(json.dumps(described, ensure_ascii=False))
    else:
        click.echo(render_text(described))
    if not described["adequate"]:
        raise StudyInadequate(path, "technically inadequate: "
                              + "; ".join(described["adequacy"]["reasons"]))
