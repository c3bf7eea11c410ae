"""The exception tree of fitwatch.

Every error a user can cause derives from :class:`FitwatchError`; the command line catches it,
prints its message on one line and exits with code 1. Anything else is a bug (exit code 2).
Subclasses take the offending values and write their own message, so the text is the same
wherever the error is raised.
"""

from __future__ import annotations

from collections.abc import Iterable


class FitwatchError(Exception):
    """Base of every error caused by input, configuration or state; exit code 1."""

    exit_code = 1


class ConfigError(FitwatchError):
    """A configuration file or value is wrong."""

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


class InputError(FitwatchError):
    """A data file or argument cannot be used as given."""


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


class NotFoundError(FitwatchError):
    """A named model, version or day does not exist."""


class StateError(FitwatchError):
    """The request does not fit the current state (no active version, already promoted...)."""


class DatabaseError(FitwatchError):
    """The database cannot be opened or is not at the expected schema revision."""


class FitwatchWarning(UserWarning):
    """Base of fitwatch's warnings."""


class DegenerateDataWarning(FitwatchWarning):
    """Legal data for which a figure is undefined; the figure is NaN and this warning says why."""
