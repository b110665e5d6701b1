"""Turn fitkit errors into one line on stderr and a documented exit status."""

from __future__ import annotations


import click

from .. import exitcodes
from ..errors import CaptureError, ConditioningError, FitError, FitkitError


def status_for(error: FitkitError) -> int:
    """The exit status for a fitkit error (see fitkit.exitcodes)."""
    if isinstance(error, FitError):
        return exitcodes.ANALYSIS_FAILED
    if isinstance(error, (CaptureError, ConditioningError)):
        return exitcodes.UNUSABLE_INPUT
    return exitcodes.UNUSABLE_INPUT if error.path else exitcodes.USAGE


def run_with_error_handling(command: click.Command, argv: list[str] | None) -> int:
    """Run a click command; return its exit status, never raising a traceback."""
    try:
        result = command.main(args=argv, prog_name="fitkit", standalone_mode=False)
    except FitkitError as err:
        click.echo(f"fitkit: error: {err.one_line()}", err=True)
        return status_for(err)
    except click.exceptions.Abort:
        click.echo("fitkit: aborted", err=True)
        return 130
    except click.ClickException as err:
        err.show()
        return err.exit_code
    except click.exceptions.Exit as err:
        return err.exit_code
    except KeyboardInterrupt:
        click.echo("fitkit: interrupted", err=True)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as err:  # a bug: say so in one line, never a traceback
        click.echo(f"fitkit: internal error: {type(err).__name__}: {err}. "
                   "This is a bug in fitkit; please report it with the input file.", err=True)
        return exitcodes.INTERNAL
    return int(result or 0)
