"""``hsat report`` (re-render the draft), ``hsat sign``, ``hsat amend`` and ``hsat verify``."""

from __future__ import annotations

import click

from hsat.errors import VerificationFailed

_STUDY = click.argument("study_dir", type=click.Path(file_okay=False, path_type=str))
_SITE = click.option("--site", type=click.Path(dir_okay=False, path_type=str), default=None,
                     help="Site settings file (clinic name, address, phone) for the header; "
                          "the one used before is kept when omitted.")
_ACK = click.option("--acknowledge-inadequate", is_flag=True,
                    help="Sign although the study is technically inadequate; the report then "
                         "states this acknowledgement.")


@click.command("report")
@_STUDY
@_SITE
@click.option("--intake", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="Intake file with patient and kit details (default: the one beside the "
                   "recording, or the one used before).")
@click.option("--recording", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="The night's EDF, for the overnight graphs, when it is no longer where "
                   "the study says.")
def report(study_dir: str, site: str | None, intake: str | None, recording: str | None
           ) -> None:
    """Render STUDY_DIR's draft report (report-draft.pdf) again from its summary.

    The draft is marked DRAFT on every page until it is signed with `hsat sign`.
    """
    from hsat.report import render_draft

    path = render_draft(study_dir, site=site, intake=intake, recording=recording)
    click.echo(str(path))


@click.command("sign")
@_STUDY
@click.option("--interpretation", "interpretation", required=True,
              type=click.Path(dir_okay=False, path_type=str),
              help="Text file with the interpretation (paragraphs, # headings, - bullets).")
@click.option("--physician", required=True, help='Signing physician, e.g. "A. Name, MD".')
@_ACK
@_SITE
def sign(study_dir: str, interpretation: str, physician: str, acknowledge_inadequate: bool,
         site: str | None) -> None:
    """Sign STUDY_DIR's report: writes report-v1-signed.pdf and logs its SHA-256.

    A signed report is never overwritten; use `hsat amend` for a new version.
    """
    from hsat.signoff import sign as do_sign

    result = do_sign(study_dir, interpretation, physician,
                     acknowledge_inadequate=acknowledge_inadequate, site=site)
    click.echo(str(result.pdf_path))
    click.echo(f"hsat sign: version {result.version} signed, SHA-256 {result.pdf_sha256}",
               err=True)


@click.command("amend")
@_STUDY
@click.option("--reason", required=True, help="What changed and why (printed on the report).")
@click.option("--interpretation", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="New interpretation file (default: the previous version's text).")
@click.option("--physician", default=None,
              help="Signing physician (default: whoever signed the previous version).")
@_ACK
@_SITE
def amend(study_dir: str, reason: str, interpretation: str | None, physician: str | None,
          acknowledge_inadequate: bool, site: str | None) -> None:
    """Make the next signed version of STUDY_DIR's report; earlier versions are kept."""
    from hsat.signoff import amend as do_amend

    result = do_amend(study_dir, reason, interpretation=interpretation, physician=physician,
                      acknowledge_inadequate=acknowledge_inadequate, site=site)
    click.echo(str(result.pdf_path))
    click.echo(f"hsat amend: version {result.version} signed, SHA-256 {result.pdf_sha256}",
               err=True)


@click.command("verify")
@_STUDY
def verify(study_dir: str) -> None:
    """Check every signed report in STUDY_DIR against the sign-off log.

    Exits with 8 when any signed file was altered, is missing, or is not in the log.
    """
    from hsat.signoff import verify as do_verify

    result = do_verify(study_dir)
    for name in result.verified:
        click.echo(f"ok       {name}")
    for problem in result.problems:
        click.echo(f"FAILED   {problem}")
    if result.nothing_signed:
        click.echo(f"hsat verify: {study_dir} has no signed report", err=True)
    if not result.ok:
        raise VerificationFailed(
            study_dir, f"{len(result.problems)} problem(s): "
            + "; ".join(result.problems))
