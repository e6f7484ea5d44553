"""Error and warning classes shared by every oddsmith stage.

Each error carries a human-readable message that names the column, key or row at fault,
what was expected and what was found. Errors that collect several problems keep them in
``problems`` so the command line can print all of them at once.
"""

from __future__ import annotations

import numbers


class OddsmithError(Exception):
    """Base class of every error oddsmith raises on purpose."""

    def __init__(self, message: str, problems: list[str] | None = None):
        self.problems = list(problems or [])
        if self.problems:
            message = message + "\n" + "\n".join(f"  - {p}" for p in self.problems)
        super().__init__(message)


class ConfigError(OddsmithError):
    """The configuration does not satisfy its schema or its cross-key rules."""


class ContractError(OddsmithError):
    """The data does not satisfy its data contract."""


class DataError(ContractError):
    """The data passes its contract but cannot support what the configuration asks of it
    (the split, the folds, the groups to assess, the fits)."""


class SplitError(OddsmithError):
    """A split or fold assignment cannot be made as configured."""


class RecipeError(OddsmithError):
    """A feature recipe cannot be learned or applied (unseen level, missing column, bad value)."""


class FitError(OddsmithError):
    """A candidate model could not be fitted."""


class CostError(OddsmithError):
    """Costs or operating constraints are invalid or cannot be met."""


class ManifestError(OddsmithError):
    """A manifest is missing, malformed, or does not match the files it describes."""


class ArtifactError(OddsmithError):
    """A required artifact is missing or malformed."""


class InitError(OddsmithError):
    """``oddsmith init`` cannot draft as asked (unknown column, unusable target or level)."""


class ArgumentError(OddsmithError, ValueError):
    """An argument of a package function is not usable as given (its type, shape, values or a
    setting): the message names the argument, what was expected and what was found. Also a
    ValueError, for callers of the library functions that catch that."""


def check_workers(workers) -> None:
    """Refuse a number of worker threads that is not an integer of at least 1.

    >>> check_workers(0)
    Traceback (most recent call last):
    ...
    oddsmith.errors.ArgumentError: workers must be an integer of at least 1, got 0
    """
    if isinstance(workers, bool) or not isinstance(workers, numbers.Integral) or workers < 1:
        raise ArgumentError(f"workers must be an integer of at least 1, got {workers!r}")


class SeparationWarning(UserWarning):
    """Complete or quasi-complete separation was detected in a maximum-likelihood fit."""


class EventsPerVariableWarning(UserWarning):
    """Fewer than 10 events per estimated parameter (Peduzzi et al. 1996)."""


#: Longest quoted value, in characters, before it is cut (a message must stay readable even
#: when a cell holds a whole document).
QUOTE_LIMIT = 60


def quoted(value, *, limit: int = QUOTE_LIMIT) -> str:
    """``repr(value)`` for a message, cut to about ``limit`` characters with the cut marked.

    Every value a message quotes (cells, ids, config values) goes through here.

    Examples
    --------
    >>> quoted("abc")
    "'abc'"
    >>> quoted("x" * 1000, limit=5)
    "'xxxxx'… (cut; 1,000 characters in all)"
    """
    if isinstance(value, str):
        if len(value) <= limit:
            return repr(value)
        return f"{value[:limit]!r}… (cut; {len(value):,} characters in all)"
    text = repr(value)
    if len(text) <= limit:
        return text
    return f"{text[:limit]}… (cut; {len(text):,} characters in all)"
