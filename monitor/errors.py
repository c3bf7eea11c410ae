"""The exception tree of fitwatch, and the exit code each error means.

Every error a user can cause derives from :class:`FitwatchError` and carries its exit code; the
command line catches it, prints its message on one line and exits with that code
(:func:`exit_code_for` is the one mapping). Anything else is a bug (exit code 2). Subclasses
take the offending values and write their own message, so the text is the same wherever the
error is raised.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from enum import IntEnum


class ExitCode(IntEnum):
    """The command line's exit codes (documented in the README)."""

    OK = 0
    INPUT = 1  # bad input, usage, configuration, state or database: one line on stderr
    INTERNAL = 2  # a bug: traceback in the log
    THRESHOLD = 3  # ``check --fail-on`` reached its threshold
    INTERRUPTED = 130  # Ctrl-C (128 + SIGINT, the shell's convention)


class FitwatchError(Exception):
    """Base of every error caused by input, configuration or state."""

    exit_code: ExitCode = ExitCode.INPUT


class ConfigError(FitwatchError):
    """A configuration file or value is wrong."""

    exit_code = ExitCode.INPUT

    def __init__(self, message: str, *, source: str | None = None, key: str | None = None):
        where = ""
        if key and source:
            where = f"{source}: key '{key}': "
        elif key:
            where = f"key '{key}': "
        elif source:
            where = f"{source}: "
        super().__init__(f"{where}{message}")
        self.source = source
        self.key = key


class UsageError(FitwatchError):
    """The command line was used wrongly (unknown command, missing or malformed argument)."""

    exit_code = ExitCode.INPUT


class InputError(FitwatchError):
    """A data file or argument cannot be used as given."""

    exit_code = ExitCode.INPUT


class MissingColumnsError(InputError):
    def __init__(self, missing: Iterable[str], found: Iterable[str], source: str):
        missing = list(missing)
        found = list(found)
        noun = "column" if len(missing) == 1 else "columns"
        names = ", ".join(f"'{m}'" for m in missing)
        shown = ", ".join(found) if found else "(none)"
        super().__init__(f"{noun} {names} missing in {source}; found: {shown}")
        self.missing = missing
        self.found = found


class DegenerateDataError(FitwatchError):
    """The data cannot support the requested fit or test (too few rows, collinear columns...)."""

    exit_code = ExitCode.INPUT


class NotFoundError(FitwatchError):
    """A named model, version or day does not exist."""

    exit_code = ExitCode.INPUT


class StateError(FitwatchError):
    """The request does not fit the current state (no active version, already promoted...)."""

    exit_code = ExitCode.INPUT


class DatabaseError(FitwatchError):
    """The database cannot be opened or is not at the expected schema revision."""

    exit_code = ExitCode.INPUT


def exit_code_for(exc: BaseException) -> ExitCode:
    """The exit code the command line returns for ``exc``: its own for a fitwatch error."""
    if isinstance(exc, FitwatchError):
        return exc.exit_code
    if isinstance(exc, KeyboardInterrupt):
        return ExitCode.INTERRUPTED
    if isinstance(exc, BrokenPipeError):  # the reader went away (``| head``): not a failure
        return ExitCode.OK
    return ExitCode.INTERNAL


def describe(exc: BaseException) -> str:
    """One line for a failure: a fitwatch error's own message, else marked as internal."""
    return str(exc) if isinstance(exc, FitwatchError) else f"internal error: {exc!r}"


@dataclass(frozen=True)
class Failure:
    """An error recorded instead of raised (one model's check in a run over several)."""

    message: str
    exit_code: ExitCode

    @classmethod
    def of(cls, exc: BaseException) -> Failure:
        return cls(describe(exc), exit_code_for(exc))

    @property
    def internal(self) -> bool:
        return self.exit_code == ExitCode.INTERNAL


class FitwatchWarning(UserWarning):
    """Base of fitwatch's warnings."""


class DegenerateDataWarning(FitwatchWarning):
    """Legal data for which a figure is undefined; the figure is NaN and this warning says why."""
