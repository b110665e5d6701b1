"""The line-store options of `fitkit batch` and `fitkit check` (see fitkit.line_store).

``@store_options`` adds them to a command; ``StoreRequest.pop(kwargs)`` takes
them back out. Without ``--store`` nothing is stored and nothing of the
store is imported.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import click

_OPTIONS: list[tuple[str, str, dict[str, Any]]] = [
    ("--store", "store", dict(metavar="FILE|URL",
                              help="Append every capture's outcome to this results store: a SQLite file "
                                   "(e.g. line.sqlite, created if needed) or a postgresql:// URL. "
                                   "Storing the same file again adds nothing.")),
    ("--serial-pattern", "serial_pattern",
     dict(metavar="REGEX", help="Regular expression finding the board serial in the file name: its group "
                                "'serial', else its first group [default: the last group of 3 or more digits].")),
    ("--serial-field", "serial_field",
     dict(metavar="NAME", help="Header field holding the board serial (used before the file name).")),
    ("--time-field", "time_field",
     dict(metavar="NAME", default="Date", show_default=True,
          help="Header field holding the capture's date and time; else the file's modification time.")),
    ("--fixture", "fixture",
     dict(metavar="NAME", help="Name of the test fixture [default: the header field Fixture or Bench].")),
]


def store_options(command: Callable) -> Callable:
    """Decorate a click command with the store options."""
    for decl, name, kwargs in reversed(_OPTIONS):
        command = click.option(decl, name, **kwargs)(command)
    return command


@dataclass(frozen=True)
class StoreRequest:
    """The store options as given on the command line."""

    store: str | None
    serial_pattern: str | None
    serial_field: str | None
    time_field: str
    fixture: str | None

    @classmethod
    def pop(cls, kwargs: dict[str, Any]) -> "StoreRequest":
        return cls(**{name: kwargs.pop(name) for _, name, _ in _OPTIONS})

    def open(self):
        """The opened store (None without --store); checks the serial pattern first."""
        if not self.store:
            return None
        self.facts_maker()  # a bad pattern is one error before anything runs
        from ..line_store import open_store
        return open_store(self.store)

    def facts_maker(self) -> Callable[[str, str], Any]:
        """facts(path, file_sha256) -> CaptureFacts, with these options."""
        from ..line_store.capture_facts import capture_facts, compile_serial_pattern
        pattern = compile_serial_pattern(self.serial_pattern)

        def facts(path: str, digest: str):
            return capture_facts(path, digest, serial_pattern=pattern, serial_field=self.serial_field,
                                 time_field=self.time_field, fixture=self.fixture)
        return facts


def store_check(request: StoreRequest, file: str, design_path: str, result) -> None:
    """`fitkit check --store`: append the check's result (its to_dict() JSON) to the store."""
    if not request.store:
        return
    from ..batch.discover import content_hash
    from ..line_store import entry_from_result
    with request.open() as store:
        entry = entry_from_result(result.to_dict(), request.facts_maker()(file, content_hash(file)),
                                  design_sha256=content_hash(design_path))
        added = store.append([entry])
    click.echo(f"store: {'added to' if added else 'already in'} {store.name}", err=True)
