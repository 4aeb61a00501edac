"""One hierarchy of user-facing errors.

Every error a user can cause by a bad file, option or tariff is an ``AuditorError``. The CLI
turns it into a one-line message and an exit code; the web layer into a message on the page. A
traceback reaching the user is a bug.

Messages speak of the data (the meter, the file, the key, the dates), never of command-line
options, because the dashboard shows them too. Where a command would help, ``cli_hint`` carries
it and only the command line shows it (:func:`cli_text`): in parentheses after the message, or,
when the hint begins with ":" or ";", as the sentence's continuation. A located
:class:`Problem` of a file carries its own ``cli_hint`` the same way.
"""
from __future__ import annotations

from dataclasses import dataclass


def cli_text(message: str, hint: str | None) -> str:
    """A message as the command line shows it, with its hint (module docstring)."""
    if not hint:
        return message
    return message + (hint if hint[:1] in ":;" else f" ({hint})")


class AuditorError(Exception):
    """Base class: a problem the user can fix."""

    exit_code = 1

    def __init__(self, message: str, *, cli_hint: str | None = None):
        super().__init__(message)
        self.message = message
        self.cli_hint = cli_hint

    def __str__(self) -> str:
        return self.message


@dataclass(frozen=True)
class Problem:
    """One located problem in an input file (1-based line as a text editor shows it)."""

    message: str
    line: int | None = None
    column: str | None = None
    cli_hint: str | None = None  # the option or command that helps, for the command line only

    def as_dict(self) -> dict:
        out = {"line": self.line, "column": self.column, "message": self.message}
        if self.cli_hint:
            out["cli_hint"] = self.cli_hint
        return out

    def describe(self, file: str | None = None) -> str:
        where = []
        if file:
            where.append(str(file))
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.column:
            where.append(f"column {self.column!r}")
        return (", ".join(where) + ": " if where else "") + self.message


class InputError(AuditorError):
    """A bad input file. Carries every located problem found (the first few dozen)."""

    def __init__(self, file: str | None, problems: list[Problem] | Problem | str, *, cli_hint: str | None = None):
        if isinstance(problems, str):
            problems = [Problem(problems)]
        elif isinstance(problems, Problem):
            problems = [problems]
        self.file = file
        self.problems: list[Problem] = list(problems)
        first = self.problems[0].describe(file) if self.problems else f"{file}: bad input"
        more = len(self.problems) - 1
        super().__init__(first + (f" (and {more} more problem{'s' if more > 1 else ''})" if more > 0 else ""),
                         cli_hint=cli_hint or (self.problems[0].cli_hint if self.problems else None))


class TariffError(AuditorError):
    """A tariff file that does not validate; names the key, what is allowed and, for a file,
    the line that holds the key (``detail`` is the message without file, line and key)."""

    def __init__(self, key: str, message: str, file: str | None = None, line: int | None = None):
        self.key = key
        self.file = file
        self.line = line
        self.detail = message
        where = ", ".join(x for x in (file, f"line {line}" if line else None) if x)
        prefix = f"{where}: " if where else ""
        super().__init__(f"{prefix}tariff key {key!r}: {message}")


class ProfileError(AuditorError):
    """A mapping profile that does not validate; names the key."""

    def __init__(self, key: str, message: str, file: str | None = None):
        self.key = key
        self.file = file
        prefix = f"{file}: " if file else ""
        super().__init__(f"{prefix}profile key {key!r}: {message}")


class NotFoundError(AuditorError):
    """A meter, site, scenario or bill asked for by name that is not in the database."""


class StoreError(AuditorError):
    """The database cannot be opened or written (read-only, disk full, locked, bad URL)."""


class UsageError(AuditorError):
    """Options that contradict each other or are out of range."""

    exit_code = 2

