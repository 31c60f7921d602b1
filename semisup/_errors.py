"""Errors and warnings raised by semisup.

All exceptions derive from one root, so callers can catch everything the toolkit raises on
purpose with ``except SemisupError``::

    SemisupError
    ├── DataError(ValueError)        bad input table, column, label or value
    ├── ConfigError(ValueError)      bad study spec, option or parameter value
    ├── StoreError(RuntimeError)     study folder / result store cannot be used as asked
    └── PlanError(ValueError)        a plan cannot be made from these results

    SemisupWarning(UserWarning)
    ├── DataWarning                  input is usable but suspicious (typo-like labels, ...)
    └── FitWarning                   a model did not converge or was fitted on very little data

Every message is one line that names the bad file, column, key or value and says the fix.
The command line prints ``error: <message>`` and exits with code 2 for these errors.
"""

from __future__ import annotations

__all__ = [
    "ConfigError",
    "DataError",
    "DataWarning",
    "FitWarning",
    "PlanError",
    "SemisupError",
    "SemisupWarning",
    "StoreError",
]


class SemisupError(Exception):
    """Root of every error semisup raises on purpose."""


class DataError(SemisupError, ValueError):
    """The input table, a column, a label or a value cannot be used."""


class ConfigError(SemisupError, ValueError):
    """A study spec key, option or parameter value is not allowed."""


class StoreError(SemisupError, RuntimeError):
    """The study folder or its result store cannot be used as asked."""


class PlanError(SemisupError, ValueError):
    """A plan cannot be made from these study results."""


class SemisupWarning(UserWarning):
    """Root of semisup's warnings."""


class DataWarning(SemisupWarning):
    """The input is usable but looks suspicious."""


class FitWarning(SemisupWarning):
    """A model did not converge, or was fitted on very little data."""
