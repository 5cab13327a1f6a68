"""``hsat batch``, ``hsat registry`` and ``hsat export``: the nightly run and its records."""

from __future__ import annotations

import shutil
import sqlite3
import sys
from datetime import date
from pathlib import Path

import click

from hsat.errors import EXIT_BATCH_FAILED, HsatError

_RULES_HELP = ("rule set name or TOML file; repeat or separate with commas "
               "(default: the built-in AASM 3 % and 4 % sets)")


class BatchFailures(HsatError):
    """Some recordings of a batch failed (each is recorded with its reason)."""

    exit_code = EXIT_BATCH_FAILED


def _split_rules(values: tuple[str, ...]) -> tuple[str, ...]:
    return tuple(part.strip() for value in values for part in value.split(",") if part.strip())


@click.command("batch")
@click.argument("inbox", type=click.Path(path_type=Path))
@click.option("--out", "out", required=True, type=click.Path(path_type=Path),
              help="output folder: study folders, registry, worklist and logs")
@click.option("--jobs", type=click.IntRange(1, 512), default=None,
              help="worker processes on this machine (default: the number of cores)")
@click.option("--rules", "rules", multiple=True, help=_RULES_HELP)
@click.option("--profile", default=None, help="channel profile (name or TOML file)")
@click.option("--site", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="site settings for the report header")
@click.option("--rescore", is_flag=True,
              help="analyse again what is already done; the earlier run is kept")
@click.option("--scheduler", metavar="ADDRESS", default=None,
              help="run on a Dask cluster, e.g. tcp://host:8786 (needs hsat[cluster])")
@click.option("--scheduler-timeout", type=click.FloatRange(0.5, 3600), default=20.0,
              show_default=True, metavar="SECONDS",
              help="how long to wait for the Dask scheduler to answer")
@click.option("--no-report", is_flag=True, help="skip the draft PDF (research re-scoring)")
@click.option("--group-readable", is_flag=True,
              help="let the owner's group read outputs (default: owner only)")
def batch(inbox: Path, out: Path, jobs: int | None, rules: tuple[str, ...],
          profile: str | None, site: Path | None, rescore: bool, scheduler: str | None,
          scheduler_timeout: float, no_report: bool, group_readable: bool) -> None:
    """Analyse every recording in INBOX that is not done yet, and write the worklist.

    Each recording gets a study folder under OUT/studies, its run is recorded in
    OUT/registry.sqlite, and OUT/worklist.csv / worklist.html list every recording of the
    batch with its status. A bad recording is recorded with its reason and never stops
    the others. Exit code 9 when any recording failed; inadequate studies are a status,
    not a failure.
    """
    from hsat.batch import BatchOptions, run_batch

    if jobs is not None and scheduler:
        raise click.UsageError("--jobs and --scheduler exclude each other")
    options = BatchOptions(
        inbox=inbox, out=out, jobs=jobs, rules=_split_rules(rules), profile=profile,
        site=str(site) if site else None, rescore=rescore, scheduler=scheduler,
        scheduler_timeout_s=scheduler_timeout,
        pdf=not no_report, file_mode=0o640 if group_readable else 0o600,
        dir_mode=0o750 if group_readable else 0o700)
    report = run_batch(options)
    click.echo(f"worklist: {report.worklist_html}")
    failed = sum(1 for item in report.items if item.failed)
    if failed:
        # An HsatError is how a command ends with its exit code (hsat.cli.main).
        raise BatchFailures(out, f"{failed} of {len(report.items)} recording(s) failed; "
                            f"the reasons are in {report.worklist_html.name} and "
                            f"{report.log_path}")


def _since(value: str | None) -> str:
    if not value:
        return ""
    try:
        return date.fromisoformat(value).isoformat()
    except ValueError:
        raise click.BadParameter(f"{value!r} is not a date (YYYY-MM-DD)",
                                 param_hint="--since") from None


@click.command("registry")
@click.argument("out", type=click.Path(path_type=Path, file_okay=False))
@click.option("--status", "statuses", multiple=True,
              type=click.Choice(["done", "inadequate", "failed", "signed", "unsigned"]),
              help="keep studies with this status (repeatable)")
@click.option("--since", default=None, metavar="DATE",
              help="keep studies recorded on or after DATE (YYYY-MM-DD)")
@click.option("--kit", "kits", multiple=True, help="keep studies from this kit (repeatable)")
@click.option("--all-runs", is_flag=True, help="list every run, not only each study's latest")
@click.option("--csv", "csv_path", type=click.Path(path_type=Path, dir_okay=False),
              default=None, help="also write the rows, with every index, to this CSV file")
@click.option("--by", "group_by", type=click.Choice(["month", "kit"]), default=None,
              help="QA summary instead of the list: per month or kit, the studies, the "
                   "inadequate and failed rates, and the REI median (IQR) and severity "
                   "classes per rule set")
def registry(out: Path, statuses: tuple[str, ...], since: str | None, kits: tuple[str, ...],
             all_runs: bool, csv_path: Path | None, group_by: str | None) -> None:
    """List the studies recorded under OUT (the output folder of `hsat batch`)."""
    from hsat.batch import open_registry
    from hsat.batch._table import registry_csv, registry_groups, registry_table
    from hsat.outputs import atomic_write_text

    with open_registry(out, create=False) as reg:
        try:
            reg.sync_signoffs()
        except sqlite3.OperationalError as exc:  # e.g. a read-only copy of OUT
            click.echo(f"hsat: note: sign-off state not refreshed ({exc})", err=True)
        runs = reg.list_runs(statuses=statuses, since=_since(since), kits=kits,
                             all_runs=all_runs)
    on_terminal = sys.stdout.isatty()
    width = shutil.get_terminal_size((140, 24)).columns if on_terminal else None
    if group_by is not None:
        click.echo(registry_groups(runs, group_by))
    else:
        click.echo(registry_table(runs, width=width))
    if csv_path is not None:
        atomic_write_text(csv_path, registry_csv(runs))
        click.echo(f"wrote {len(runs)} row(s) to {csv_path}")


@click.command("export")
@click.argument("out", type=click.Path(path_type=Path, file_okay=False))
@click.option("--to", "to", required=True, type=click.Path(path_type=Path),
              help="new folder for the research copy")
@click.option("--deidentify", is_flag=True,
              help="remove identifiers, replace patients by keyed pseudonyms (required)")
@click.option("--key-file", type=click.Path(path_type=Path, dir_okay=False), default=None,
              help="file holding the pseudonym key (else $HSAT_EXPORT_KEY)")
def export(out: Path, to: Path, deidentify: bool, key_file: Path | None) -> None:
    """Write a de-identified research copy of the results recorded under OUT."""
    from hsat.batch import export_deidentified, load_key

    if not deidentify:
        raise click.UsageError("export writes de-identified research copies only; "
                               "pass --deidentify")
    key = load_key(key_file)
    if key_file is not None and key_file.stat().st_mode & 0o077:
        click.echo(f"hsat: warning: {key_file} is readable by others than its owner",
                   err=True)
    folder, count = export_deidentified(out, to, key)
    click.echo(f"exported {count} de-identified stud{'y' if count == 1 else 'ies'} "
               f"to {folder}")


__all__ = ["BatchFailures", "batch", "export", "registry"]
