"""The ``hsat`` command line: a thin layer over ``hsat.api``.

Each command lives in its own module and only parses options, calls the API and prints.
Every ``HsatError`` becomes one line on stderr and its exit code; a user never sees a
traceback (set ``HSAT_DEBUG=1`` to see one when reporting a bug).
"""

from __future__ import annotations

import os

import click

from hsat import __version__
from hsat.errors import EXIT_INTERNAL, EXIT_USAGE, HsatError

EPILOG = (
    "Exit codes: 0 ok, 2 usage, 3 study technically inadequate, 4 unreadable input, "
    "5 unusable channels, 6 bad configuration, 7 output problem, 8 signed report altered, "
    "9 batch had failures, 1 internal error."
)


@click.group(epilog=EPILOG, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="hsat")
def cli() -> None:
    """Score home sleep apnea test (HSAT) recordings from EDF/EDF+ files.

    A typical day: `hsat check` a returned kit, `hsat analyze` it into a study folder,
    the physician reviews it (`hsat review`), then `hsat sign`s the report.

    Automated scoring must be reviewed against the raw signals by a qualified clinician.
    """


def _register() -> None:
    # Imported here so each command module stays independent of the others.
    from hsat.cli import _commands

    for command in _commands.all_commands():
        cli.add_command(command)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``hsat`` console script."""
    _register()
    try:
        # With standalone_mode=False click returns the code a command passed to ctx.exit().
        code = cli.main(args=argv, prog_name="hsat", standalone_mode=False)
    except click.exceptions.Exit as done:
        return int(done.exit_code or 0)
    except click.exceptions.Abort:
        click.echo("hsat: aborted", err=True)
        return EXIT_USAGE
    except click.ClickException as exc:
        exc.show()
        return EXIT_USAGE if exc.exit_code == 2 else int(exc.exit_code)
    except HsatError as exc:
        click.echo(f"hsat: {exc}", err=True)
        return exc.exit_code
    except KeyboardInterrupt:
        click.echo("hsat: interrupted", err=True)
        return 130
    except Exception as exc:  # a bug: one line for the user, the traceback on request
        if os.environ.get("HSAT_DEBUG"):
            raise
        click.echo(
            f"hsat: internal error ({type(exc).__name__}: {exc}); "
            "re-run with HSAT_DEBUG=1 and report it",
            err=True,
        )
        return EXIT_INTERNAL
    return int(code) if isinstance(code, int) else 0

