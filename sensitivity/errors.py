"""The error hierarchy for user mistakes.

Every class inherits both ``TrapbudgetError`` and the matching built-in, keeps
its context as attributes, and pickles. The command line catches only
``TrapbudgetError`` and prints ``ErrorName: message`` on one line.
"""

from __future__ import annotations

__all__ = [
    "CalibrationWarning",
    "ConvergenceWarning",
    "DataError",
    "DataWarning",
    "ScenarioError",
    "TrapbudgetError",
    "TrapbudgetWarning",
    "UsageError",
]


class TrapbudgetError(Exception):
    """Base class of every error trapbudget raises for a user's mistake."""

    exit_code = 1


def _where(path: object | None, key: str | None) -> str:
    parts = [str(p) for p in (path, key) if p]
    return ": ".join(parts)


class ScenarioError(ValueError, TrapbudgetError):
    """A scenario (file or mapping) that cannot be used as written.

    Parameters
    ----------
    message : str
        What is wrong and how to fix it.
    path : str or os.PathLike, optional
        The scenario file.
    key : str, optional
        Dotted key inside the file, e.g. ``"inputs.beam_power.tolerance"``.
    """

    def __init__(self, message: str, *, path: object | None = None, key: str | None = None):
        self.message = message
        self.path = None if path is None else str(path)
        self.key = key
        where = _where(self.path, key)
        super().__init__(f"{where}: {message}" if where else message)

    def __reduce__(self):
        return (_rebuild, (type(self), self.message, self.path, self.key))


class DataError(ScenarioError):
    """A measurement or log file that cannot be read as written."""


class UsageError(TrapbudgetError):
    """Bad command-line usage (exit code 2)."""

    exit_code = 2


def _rebuild(cls, message, path, key):
    return cls(message, path=path, key=key)


class TrapbudgetWarning(UserWarning):
    """Base class of every warning trapbudget gives (filter them by this category)."""


class ConvergenceWarning(TrapbudgetWarning):
    """An iterative procedure stopped at its limit before meeting its tolerance."""


class DataWarning(TrapbudgetWarning):
    """Some rows of a data file were skipped (counted and said so)."""


class CalibrationWarning(TrapbudgetWarning):
    """A fit finished but its statistics say the model does not describe the data."""
