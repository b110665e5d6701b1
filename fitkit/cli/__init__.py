"""The `fitkit` command: a thin click layer over the library.

Each subcommand lives in its own module and is imported only when it runs, so
`fitkit --help` starts fast. Every FitkitError becomes one line on stderr and
a documented exit status (see fitkit.exitcodes); nothing below this package
prints or exits.
"""

from __future__ import annotations

import importlib
import os
import sys

# The fits' linear algebra is on tall, narrow matrices (a few to a few tens of
# columns), where a multi-threaded BLAS gains nothing, and on a busy machine
# its spinning threads made a 40,000 x 27 Gram matrix 500 times slower (1.3 s
# against 2.5 ms measured on the two-core CI machine with one other process
# running). One thread unless the user says otherwise; set before numpy loads,
# and inherited by the batch's worker processes.
for _threads in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_threads, "1")

import click  # noqa: E402


# command name -> (module, attribute, one-line help)
COMMANDS: dict[str, tuple[str, str, str]] = {
    "inspect": ("fitkit.cli.inspect_cmd", "inspect", "Show what fitkit reads and finds in a capture."),
    "fit": ("fitkit.cli.fit_cmd", "fit", "Fit a step response: time constants, f0, Q with 95 % intervals."),
    "forms": ("fitkit.cli.forms_cmd", "forms", "List the step-response forms fitkit can fit."),
    "circuits": ("fitkit.cli.circuits_cmd", "circuits", "List the circuit topologies fitkit knows."),
    "check": ("fitkit.cli.check_cmd", "check", "Check a board's capture against its design file."),
    "batch": ("fitkit.cli.batch_cmd", "batch", "Fit or check a folder of captures."),
    "trend": ("fitkit.cli.trend_cmd", "trend", "Is the line drifting? Charts and capability from a results store."),
}


class LazyGroup(click.Group):
    """A click group whose subcommands are imported on first use."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return [name for name, (mod, _, _) in COMMANDS.items() if _module_exists(mod)]

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name not in COMMANDS or not _module_exists(COMMANDS[name][0]):
            return None
        module, attr, _ = COMMANDS[name]
        return getattr(importlib.import_module(module), attr)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        rows = [(name, COMMANDS[name][2]) for name in self.list_commands(ctx)]
        if rows:
            with formatter.section("Commands"):
                formatter.write_dl(rows)


def _module_exists(module: str) -> bool:
    import importlib.util
    return importlib.util.find_spec(module) is not None


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="fitkit")
def cli() -> None:
    """fitkit: step-response fitting for bench and production-line captures.

    Reads oscilloscope and data-logger CSV exports; finds the step, fits time
    constants, natural frequency, Q and gain with honest 95 % intervals; turns
    them into component values; checks a board against its design.

    Exit statuses: 0 ok/pass, 1 fail, 2 usage error, 3 inconclusive,
    4 unusable input, 5 fit failed, 6 the fit does not describe the capture, 70 internal error,
    73 output not written.
    """


def main(argv: list[str] | None = None) -> None:
    """Entry point of the console script: run the CLI and map errors to exit statuses."""
    from .errors_to_exit import run_with_error_handling
    sys.exit(run_with_error_handling(cli, argv))
