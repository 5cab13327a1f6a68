"""Sign-off: sign, amend and verify signed reports; the append-only sign-off log.

``sign(study_dir, interpretation, physician)`` writes ``report-v1-signed.pdf``;
``amend(study_dir, reason, ...)`` writes the next version and keeps the earlier ones;
``verify(study_dir)`` checks every signed file against ``signoff-log.jsonl``.
"""

from hsat.signoff._log import LOG_NAME, read_log, signed_pdf_name, signed_record_name
from hsat.signoff._sign import (
    InadequateStudyError,
    SignoffInputError,
    SignResult,
    amend,
    parse_interpretation,
    read_interpretation,
    sign,
    signed_entries,
)
from hsat.signoff._verify import Verification, verify

__all__ = [
    "LOG_NAME", "InadequateStudyError", "SignResult", "SignoffInputError", "Verification",
    "amend", "parse_interpretation", "read_interpretation", "read_log", "sign",
    "signed_entries", "signed_pdf_name", "signed_record_name", "verify",
]
