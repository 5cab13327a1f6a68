"""The command line maps every user-facing error to one line and a documented exit code."""

from __future__ import annotations

from hsat import errors
from hsat.cli import main


def test_help_reads_like_a_manual(capsys):
    assert main(["--help"]) == 0
    out = capsys.readouterr().out
    assert "Exit codes" in out


def test_unknown_option_is_a_usage_error(capsys):
    assert main(["--no-such-option"]) == errors.EXIT_USAGE
