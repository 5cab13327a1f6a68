"""Errors a user can meet, each with its exit code.

Every error names the file it concerns and the problem in one line. The CLI prints
``hsat: <message>`` and exits with ``exit_code``; a user never sees a traceback.

Exit codes (documented in the README):

====  ==========================================================
0     success (``hsat check``: the study is technically adequate)
1     internal error (a bug: please report it)
2     usage error (bad option or argument)
3     the study is technically inadequate (``hsat check``/``analyze`` still write results)
4     unreadable input: missing file, not EDF, truncated, corrupt header
5     unusable channels: missing airflow/SpO2, ambiguous labels, no valid data
6     bad configuration: rule set, channel profile, site settings or intake file
7     output problem: folder not writable, refusing to overwrite a signed report
8     a signed report failed verification (``hsat verify``)
9     some studies in a batch failed (``hsat batch``)
====  ==========================================================
"""

from __future__ import annotations

EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_USAGE = 2
EXIT_INADEQUATE = 3
EXIT_UNREADABLE = 4
EXIT_CHANNELS = 5
EXIT_CONFIG = 6
EXIT_OUTPUT = 7
EXIT_TAMPERED = 8
EXIT_BATCH_FAILED = 9


class HsatError(Exception):
    """Base of all user-facing errors: ``str(err)`` is the one-line message."""

    exit_code = EXIT_INTERNAL

    def __init__(self, path: object, problem: str) -> None:
        self.path = str(path) if path is not None else ""
        self.problem = problem
        super().__init__(f"{self.path}: {problem}" if self.path else problem)


class UnreadableInput(HsatError):
    """The input file cannot be read as EDF/EDF+ (missing, truncated, corrupt)."""

    exit_code = EXIT_UNREADABLE


class ChannelError(HsatError):
    """Channels are missing, ambiguous or hold no usable data."""

    exit_code = EXIT_CHANNELS


class ConfigError(HsatError):
    """A rule set, channel profile, settings or intake file is invalid."""

    exit_code = EXIT_CONFIG


class OutputError(HsatError):
    """An output cannot be written (permissions, refusal to overwrite a signed report)."""

    exit_code = EXIT_OUTPUT


class VerificationFailed(HsatError):
    """A signed report no longer matches its sign-off record."""

    exit_code = EXIT_TAMPERED
