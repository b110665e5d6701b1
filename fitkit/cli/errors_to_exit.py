"""Turn fitkit errors into one line on stderr and a documented exit status."""

from __future__ import annotations


import sys
import warnings

import click

from .. import exitcodes
from ..errors import CaptureError, ConditioningError, FitError, FitkitError, OutputError
from .signals import silence


def status_for(error: FitkitError) -> int:
    """The exit status for a fitkit error (see fitkit.exitcodes)."""
    if isinstance(error, OutputError):
        return exitcodes.OUTPUT_FAILED
    if isinstance(error, FitError):
        return exitcodes.ANALYSIS_FAILED
    if isinstance(error, (CaptureError, ConditioningError)):
        return exitcodes.UNUSABLE_INPUT
    return exitcodes.UNUSABLE_INPUT if error.path else exitcodes.USAGE


def run_with_error_handling(command: click.Command, argv: list[str] | None) -> int:
    """Run a click command; return its exit status, never raising a traceback."""
    try:
        with warnings.catch_warnings():
            # numerical libraries' warnings (numpy RuntimeWarning with source paths)
            # are not for the user: what matters is in the result's own warnings
            warnings.simplefilter("ignore")
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
    except BrokenPipeError:  # the reader of our output has gone; the work is done
        silence(sys.stdout)
        return 0
    except OSError as err:  # reads fail as CaptureError: what is left is an output (disk full)
        reason = err.strerror or type(err).__name__
        where = err.filename or "standard output"
        click.echo(f"fitkit: error: cannot write {where} ({reason}); "
                   "free some space or choose a folder you can write to", err=True)
        return exitcodes.OUTPUT_FAILED
    except Exception as err:  # a bug: say so in one line, never a traceback
        click.echo(f"fitkit: internal error: {type(err).__name__}: {err}. "
                   "This is a bug in fitkit; please report it with the input file.", err=True)
        return exitcodes.INTERNAL
    return int(result or 0)
