"""The page's sign action: the same sign-off as ``hsat sign`` (or ``hsat amend``).

The first signature calls ``hsat.signoff.sign``; once a version is signed, signing again
from the page makes the next version with ``hsat.signoff.amend`` and needs a reason,
exactly as on the command line. Signing is refused while edits are missing from the
indices (the reviewer must rescore first), so a signed report never shows numbers that
disagree with the edit log.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from hsat.errors import EXIT_USAGE, HsatError
from hsat.review._edits import read_edit_log
from hsat.review._study import SUMMARY, read_json


class SignRefused(HsatError):
    """The page asked to sign a study whose indices do not yet include every edit."""

    exit_code = EXIT_USAGE


def sign_study(folder: Path, *, physician: str, interpretation: str, reason: str = "",
               acknowledge_inadequate: bool = False, site: str | Path | None = None
               ) -> dict[str, Any]:
    """Sign (or amend) the study's report; return the version and the signed file's name."""
    from hsat.signoff import amend, sign

    summary = read_json(folder / SUMMARY)
    entries = read_edit_log(folder)
    included = int((summary.get("review") or {}).get("log_entries") or 0)
    if len(entries) > included:
        raise SignRefused(folder, f"{len(entries) - included} edit(s) are not yet in the "
                          "indices: recompute the indices before signing")
    signed_before = sorted(folder.glob("report-v*-signed.pdf"))
    if signed_before:
        if not reason.strip():
            raise SignRefused(folder, "the report is already signed; give a reason to sign "
                              "a new version (an amendment)")
        result = amend(folder, reason, interpretation_text=interpretation,
                       physician=physician or None,
                       acknowledge_inadequate=acknowledge_inadequate, site=site)
    else:
        result = sign(folder, None, physician, interpretation_text=interpretation,
                      acknowledge_inadequate=acknowledge_inadequate, site=site)
    return {"version": result.version, "report": result.pdf_path.name,
            "sha256": result.pdf_sha256}
