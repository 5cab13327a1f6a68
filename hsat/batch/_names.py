"""Safe folder names built from EDF header fields.

EDF header fields are free text written by the recording kit or typed by a technician;
a name built from them must never escape the output folder or hide itself, so only
letters, digits, ``.``, ``_`` and ``-`` survive, ``..`` is collapsed and leading dots
are stripped.
"""

from __future__ import annotations

import re
import unicodedata

_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
_DOTS = re.compile(r"\.{2,}")
_UNKNOWN = "unknown"


def safe_name_part(text: str, max_len: int = 40) -> str:
    """Reduce free text to a safe piece of a file name.

    Accents are folded to ASCII (``Müller`` -> ``Muller``); path separators, spaces and
    control characters become ``_``; runs of dots collapse to one; leading and trailing
    ``.``, ``_`` and ``-`` go. An empty result becomes ``unknown``.

    Parameters
    ----------
    text : str
        Free text, e.g. the patient code from the EDF header.
    max_len : int
        Longest piece returned.
    """
    folded = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode("ascii")
    cleaned = _DOTS.sub(".", _UNSAFE.sub("_", folded)).strip("._-")
    cleaned = cleaned[:max_len].strip("._-")
    return cleaned or _UNKNOWN


def study_folder_name(recorded_on: str, patient: str, sha256: str) -> str:
    """The folder name of a study: ``<date>_<patient>_<first 10 hex of SHA-256>``.

    The hash suffix keeps two studies of one patient on one date apart and makes the
    name unique per recording even when the header fields are empty.
    """
    date_part = safe_name_part(recorded_on, 10) if recorded_on else "undated"
    digest = safe_name_part(sha256[:10], 10)
    return f"{date_part}_{safe_name_part(patient, 32)}_{digest}"


def is_safe_name(name: str) -> bool:
    """Whether ``name`` is a single, visible path component hsat would produce."""
    return (
        bool(name)
        and name == safe_name_part(name, max(len(name), 1))
        and name not in (".", "..")
    )
