"""Signing and amending: a new signed file per version, never an overwrite.

``sign`` makes version 1; ``amend`` makes version N+1, stating what changed and why, and
leaves every earlier version as it was. Each version is three things written in order:
the PDF (``report-vN-signed.pdf``), its record (``report-vN-signed.json``: the
interpretation text and the headline numbers it was signed on) and one line in
``signoff-log.jsonl``. If a later step fails, the files this call created are removed, so
nothing is left half-signed.
"""

from __future__ import annotations

import json
import os
import tempfile
import unicodedata
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from hsat import __version__
from hsat.errors import EXIT_INADEQUATE, EXIT_USAGE, HsatError, OutputError, UnreadableInput
from hsat.outputs import atomic_write_bytes, atomic_write_text
from hsat.report import (
    Amendment,
    Block,
    Signature,
    describe_chars,
    fmt,
    load_context,
    load_fonts,
    parse_markup,
    plain_text,
    render_signed,
    undrawable,
)
from hsat.report._context import ReportContext
from hsat.signoff._log import (
    append_entry,
    last_version,
    read_log,
    sha256_file,
    signed_pdf_name,
    signed_record_name,
)

MAX_PHYSICIAN_CHARS = 120
MAX_REASON_CHARS = 600


class SignoffInputError(HsatError):
    """A sign-off argument is unusable (empty interpretation, undrawable name, ...)."""

    exit_code = EXIT_USAGE


class InadequateStudyError(HsatError):
    """Signing a technically inadequate study without acknowledging it."""

    exit_code = EXIT_INADEQUATE


@dataclass(frozen=True)
class SignResult:
    version: int
    pdf_path: Path
    record_path: Path
    pdf_sha256: str
    log_line: str


def parse_interpretation(text: str, source: str | Path | None = None) -> list[Block]:
    """The blocks of an interpretation text; refuses one with nothing to print."""
    blocks = parse_markup(unicodedata.normalize("NFC", text.lstrip("\ufeff")))
    if not plain_text(blocks).strip():
        raise SignoffInputError(
            source, "the interpretation is empty: write the diagnosis, severity statement "
            "and recommendations before signing")
    return blocks


def read_interpretation(path: str | Path) -> tuple[str, list[Block]]:
    """The interpretation file's text and its blocks; refuses an empty file."""
    p = Path(path)
    try:
        text = p.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise SignoffInputError(p, "interpretation file not found") from None
    except IsADirectoryError:
        raise SignoffInputError(p, "interpretation must be a text file, not a folder") from None
    except UnicodeDecodeError:
        raise SignoffInputError(p, "interpretation file is not UTF-8 text") from None
    except OSError as exc:
        raise SignoffInputError(p, f"cannot read interpretation file ({exc.strerror})") from None
    text = unicodedata.normalize("NFC", text.lstrip("\ufeff"))
    return text, parse_interpretation(text, p)


def _interpretation(path: str | Path | None, text: str | None) -> tuple[str, list[Block], Path]:
    if (path is None) == (text is None):
        raise SignoffInputError(None, "give the interpretation either as a file or as text")
    if path is not None:
        t, blocks = read_interpretation(path)
        return t, blocks, Path(path)
    assert text is not None
    clean = unicodedata.normalize("NFC", text)
    return clean, parse_interpretation(clean, "interpretation text"), Path("interpretation.md")


def _check_physician(name: str) -> str:
    clean = unicodedata.normalize("NFC", " ".join(name.split()))
    if not clean:
        raise SignoffInputError(None, "--physician is empty: give the name and credentials")
    if len(clean) > MAX_PHYSICIAN_CHARS:
        raise SignoffInputError(None, f"--physician is longer than {MAX_PHYSICIAN_CHARS} "
                                "characters")
    bad = undrawable(clean, load_fonts())
    if bad:
        raise SignoffInputError(
            None, f"the physician name {clean!r} contains characters the report font cannot "
            f"draw: {describe_chars(bad)}; nothing was written. Give the name in Latin, "
            "Greek or Cyrillic script (a transliteration)")
    return clean


def _check_text_drawable(path: Path, text: str) -> None:
    bad = undrawable(text, load_fonts())
    if bad:
        raise SignoffInputError(
            path, f"the interpretation contains characters the report font cannot draw: "
            f"{describe_chars(bad)}; nothing was written")


def _probe_writable(folder: Path) -> None:
    """Fail early, before rendering, when the study folder cannot take new files."""
    if not folder.is_dir():
        raise UnreadableInput(folder, "study folder not found")
    try:
        fd, tmp = tempfile.mkstemp(prefix=".hsat-probe-", dir=folder)
    except OSError as exc:
        raise OutputError(folder, f"study folder is not writable ({exc.strerror}); "
                          "nothing was signed") from None
    os.close(fd)
    os.unlink(tmp)


def headline(ctx: ReportContext) -> dict[str, str]:
    """The numbers a version was signed on, as printed (to say later what changed)."""
    s = ctx.summary
    out = {"Monitoring time": fmt.hours(s.get("monitoring_time_h"))}
    for n in ctx.rule_names:
        ix = s["indices"][n]
        out[f"REI ({n})"] = fmt.index(ix.get("rei"))
        out[f"Severity ({n})"] = fmt.severity(ix.get("severity"))
        out[f"ODI ({n})"] = fmt.index(ix.get("odi"))
    spo2 = s.get("spo2", {}) or {}
    out["SpO2 nadir"] = fmt.pct(spo2.get("nadir_pct"))
    out["T90"] = fmt.pct(spo2.get("t90_pct"))
    out["Hypoxic burden"] = fmt.burden(spo2.get("hypoxic_burden"))
    rv = ctx.review
    out["Event review"] = (f"reviewed by {rv.reviewer or fmt.MISSING}, {rv.edited} edited "
                           f"({rv.edit_breakdown()})" if rv.reviewed else "not reviewed")
    return out


def _require_edits_in_the_numbers(ctx: ReportContext) -> None:
    """A signed report must show the numbers of every review edit made so far."""
    pending = ctx.review.pending_edits
    if pending:
        raise SignoffInputError(
            ctx.study_dir / "review-edits.jsonl",
            f"{pending} review edit(s) are not yet in the indices; run `hsat rescore "
            f"{ctx.study_dir}` and check the new draft before signing; nothing was signed")


def _require_adequate_or_acknowledged(ctx: ReportContext, acknowledged: bool) -> bool:
    adequate = bool((ctx.summary.get("adequacy") or {}).get("adequate"))
    if not adequate and not acknowledged:
        reasons = "; ".join(ctx.summary.get("adequacy", {}).get("reasons", []))
        raise InadequateStudyError(
            ctx.study_dir, f"the study is technically inadequate ({reasons or 'see report'}); "
            "sign it only with --acknowledge-inadequate, which prints that acknowledgement "
            "on the report")
    return adequate


def _write_version(folder: Path, version: int, pdf: bytes, record: dict[str, Any],
                   entry: dict[str, Any]) -> SignResult:
    pdf_path = folder / signed_pdf_name(version)
    record_path = folder / signed_record_name(version)
    created: list[Path] = []
    try:
        atomic_write_bytes(pdf_path, pdf, overwrite=False)
        created.append(pdf_path)
        pdf_sha = sha256_file(pdf_path)
        record = {**record, "report_file": pdf_path.name, "pdf_sha256": pdf_sha}
        atomic_write_text(record_path, json.dumps(record, ensure_ascii=False, indent=1),
                          overwrite=False)
        created.append(record_path)
        line = append_entry(folder, {**entry, "pdf_sha256": pdf_sha,
                                     "record_sha256": sha256_file(record_path)})
    except BaseException:
        for p in created:  # only what this call created; never an earlier version
            p.unlink(missing_ok=True)
        raise
    return SignResult(version, pdf_path, record_path, pdf_sha, line)


def _make_version(
    folder: Path, *, version: int, physician: str, interpretation_path: Path, text: str,
    blocks: list[Block], acknowledge_inadequate: bool, amendment: Amendment | None,
    site: str | Path | None, now: datetime | None, ctx: ReportContext | None = None,
) -> SignResult:
    signed_at = (now or datetime.now(UTC)).astimezone(UTC).replace(microsecond=0)
    ctx = ctx or load_context(folder, site=site)
    _require_edits_in_the_numbers(ctx)
    adequate = _require_adequate_or_acknowledged(ctx, acknowledge_inadequate)
    sig = Signature(
        version=version, physician=physician, signed_at=signed_at,
        interpretation=tuple(blocks),
        acknowledged_inadequate=(not adequate) and acknowledge_inadequate,
        amendment=amendment,
        fingerprints={"summary.json SHA-256": ctx.summary_sha256,
                      f"{ctx.events_file} SHA-256": ctx.events_sha256},
    )
    pdf, ctx = render_signed(folder, sig, context=ctx)
    when = signed_at.strftime("%Y-%m-%dT%H:%M:%SZ")
    record = {
        "version": version, "physician": physician, "signed_at": when,
        "interpretation_file": interpretation_path.name, "interpretation": text,
        "acknowledged_inadequate": sig.acknowledged_inadequate, "study_adequate": adequate,
        "headline": headline(ctx), "summary_sha256": ctx.summary_sha256,
        "events_sha256": ctx.events_sha256,
        "amendment": None if amendment is None else {
            "previous_version": amendment.previous_version, "reason": amendment.reason,
            "changes": list(amendment.changes)},
    }
    entry = {
        "study": folder.resolve().name, "version": version,
        "report_file": signed_pdf_name(version), "record_file": signed_record_name(version),
        "physician": physician, "signed_at": when,
        "kind": "sign" if amendment is None else "amend",
        "amends_version": None if amendment is None else amendment.previous_version,
        "reason": None if amendment is None else amendment.reason,
        "acknowledged_inadequate": sig.acknowledged_inadequate, "study_adequate": adequate,
        "input_sha256": str(ctx.summary.get("study", {}).get("input_sha256", "")),
        "summary_sha256": ctx.summary_sha256, "events_sha256": ctx.events_sha256,
        "software": f"hsat {__version__}",
    }
    return _write_version(folder, version, pdf, record, entry)


def sign(
    study_dir: str | Path, interpretation: str | Path | None, physician: str, *,
    interpretation_text: str | None = None, acknowledge_inadequate: bool = False,
    site: str | Path | None = None, now: datetime | None = None,
) -> SignResult:
    """Sign a study: render version 1 with the interpretation and a signature block.

    The interpretation comes from a file (``interpretation``) or, for the review page,
    as text (``interpretation_text``).

    Raises
    ------
    OutputError
        The study is already signed (use ``amend``) or its folder is not writable.
    InadequateStudyError
        The study is technically inadequate and ``acknowledge_inadequate`` is False.
    SignoffInputError
        Empty or unreadable interpretation, or a name/text the font cannot draw.
    """
    folder = Path(study_dir)
    _probe_writable(folder)
    name = _check_physician(physician)
    text, blocks, source = _interpretation(interpretation, interpretation_text)
    _check_text_drawable(source, plain_text(blocks))
    existing = last_version(folder)
    if existing:
        raise OutputError(
            folder / signed_pdf_name(existing),
            f"the study is already signed (version {existing}); a signed report is never "
            "overwritten: use `hsat amend` to make the next version")
    return _make_version(folder, version=1, physician=name,
                         interpretation_path=source, text=text, blocks=blocks,
                         acknowledge_inadequate=acknowledge_inadequate, amendment=None,
                         site=site, now=now)


def _previous_record(folder: Path, version: int) -> dict[str, Any]:
    path = folder / signed_record_name(version)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise UnreadableInput(path, f"cannot read the record of version {version} ({exc}); "
                              "run `hsat verify`") from None
    return data if isinstance(data, dict) else {}


def describe_changes(previous: dict[str, Any], ctx: ReportContext, text: str, physician: str
                     ) -> list[str]:
    """What differs between the previous version and the one being made."""
    changes = []
    if previous.get("interpretation", "").strip() != text.strip():
        changes.append("The interpretation text was revised.")
    else:
        changes.append("The interpretation text is unchanged.")
    if previous.get("physician") != physician:
        changes.append(f"Signed by {physician} (version {previous.get('version')} was signed "
                       f"by {previous.get('physician')}).")
    old = previous.get("headline") or {}
    for key, value in headline(ctx).items():
        if key in old and old[key] != value:
            changes.append(f"{key}: {old[key]} \u2192 {value}.")
    if previous.get("summary_sha256") and previous["summary_sha256"] != ctx.summary_sha256:
        changes.append("The scoring was re-run or edited since the previous version "
                       "(summary.json differs).")
    elif previous.get("events_sha256") and previous["events_sha256"] != ctx.events_sha256:
        changes.append("The scored events were edited since the previous version "
                       f"({ctx.events_file} differs).")
    if len(changes) == 1 and changes[0].endswith("unchanged."):
        changes.append("No number in the report changed.")
    return changes


def amend(
    study_dir: str | Path, reason: str, *, interpretation: str | Path | None = None,
    interpretation_text: str | None = None,
    physician: str | None = None, acknowledge_inadequate: bool = False,
    site: str | Path | None = None, now: datetime | None = None,
) -> SignResult:
    """Make the next signed version, stating what changed and why; keep every earlier one.

    Without ``interpretation`` the previous version's text is carried over; without
    ``physician`` the previous signer signs again.
    """
    folder = Path(study_dir)
    _probe_writable(folder)
    clean_reason = " ".join(reason.split())
    if not clean_reason:
        raise SignoffInputError(None, "--reason is empty: say what changed and why")
    if len(clean_reason) > MAX_REASON_CHARS:
        raise SignoffInputError(None, f"--reason is longer than {MAX_REASON_CHARS} characters")
    bad = undrawable(clean_reason, load_fonts())
    if bad:
        raise SignoffInputError(None, f"the reason contains characters the report font cannot "
                                f"draw: {describe_chars(bad)}; nothing was written")
    previous_version = last_version(folder)
    if not previous_version:
        raise SignoffInputError(folder, "nothing to amend: the study has no signed version "
                                "yet (use `hsat sign`)")
    previous = _previous_record(folder, previous_version)
    name = _check_physician(physician if physician is not None
                            else str(previous.get("physician", "")))
    if interpretation is not None or interpretation_text is not None:
        text, blocks, source = _interpretation(interpretation, interpretation_text)
    else:
        text = str(previous.get("interpretation", ""))
        blocks = parse_markup(text)
        source = Path(str(previous.get("interpretation_file", "interpretation.md")))
        if not plain_text(blocks).strip():
            raise SignoffInputError(folder, "the previous version has no interpretation text "
                                    "to carry over: give --interpretation FILE")
    _check_text_drawable(source, plain_text(blocks))
    ctx = load_context(folder, site=site)
    amendment = Amendment(
        previous_version=previous_version,
        previous_signed_at=str(previous.get("signed_at", "")),
        previous_physician=str(previous.get("physician", "")),
        reason=clean_reason,
        changes=tuple(describe_changes(previous, ctx, text, name)),
    )
    return _make_version(folder, version=previous_version + 1, physician=name,
                         interpretation_path=source, text=text, blocks=blocks,
                         acknowledge_inadequate=acknowledge_inadequate, amendment=amendment,
                         site=site, now=now, ctx=ctx)


def signed_entries(folder: Path) -> list[dict[str, Any]]:
    """The parsed log entries (for listing; verification is in ``verify``)."""
    return [line.entry for line in read_log(folder) if line.entry]
