"""Declared rules for settings: what values a setting takes, checked by one loop.

A table maps each setting to a :class:`Rule` (in the spirit of scikit-learn's
``_parameter_constraints``): the study's settings (``semisup.study.SETTINGS``), the VAE's and
M2's frozen configs and the mixture-EM classifier declare theirs and call :func:`check_rules`
(or a rule's :meth:`Rule.clean`) instead of writing ``if`` chains. A rule refuses a value by
raising :class:`Refused` with the allowed values; the caller turns that into one
:class:`~semisup.ConfigError` line in its own words (:func:`refusal`).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from ._errors import ConfigError, SemisupError

__all__ = ["Choice", "Integer", "Number", "OfType", "Refused", "Rule", "check_rules",
           "parse_pairs", "refusal"]

_WHOLE = object()


class Refused(Exception):
    """A rule's refusal: ``allowed`` says what to give; ``item`` is the refused element of a
    list or table (the whole value when not given)."""

    def __init__(self, allowed: str, item: Any = _WHOLE) -> None:
        super().__init__(allowed)
        self.allowed = allowed
        self.item = item

    @property
    def whole(self) -> bool:
        return self.item is _WHOLE


class Rule:
    """Checks and cleans one setting's value; ``describe`` is the allowed values in words."""

    def clean(self, value: Any) -> Any:  # pragma: no cover  (abstract)
        raise NotImplementedError

    def describe(self) -> str:  # pragma: no cover  (abstract)
        raise NotImplementedError


def _is_int(value: Any) -> bool:
    return isinstance(value, numbers.Integral) and not isinstance(value, bool)


@dataclass(frozen=True)
class Integer(Rule):
    """A whole number (not a bool) >= ``low``; ``optional``: None passes too."""

    low: int
    optional: bool = False

    def clean(self, value: Any) -> Any:
        if value is None and self.optional:
            return None
        if not _is_int(value) or value < self.low:
            raise Refused(self.describe())
        return int(value)

    def describe(self) -> str:
        return f"give a whole number >= {self.low}"


@dataclass(frozen=True)
class Number(Rule):
    """A finite number in [low, high] ((low, high] with ``low_open``); +inf passes only when
    ``high`` is inf; ``optional``: None passes too."""

    low: float
    high: float = math.inf
    low_open: bool = False
    optional: bool = False

    def clean(self, value: Any) -> Any:
        if value is None and self.optional:
            return None
        ok = isinstance(value, numbers.Real) and not isinstance(value, bool)
        if ok:
            v = float(value)
            ok = math.isfinite(v) or (self.high == math.inf and v == math.inf)
            ok = ok and (v > self.low if self.low_open else v >= self.low) and v <= self.high
        if not ok:
            raise Refused(self.describe())
        return value

    def describe(self) -> str:
        side = ">" if self.low_open else ">="
        upper = "" if self.high == math.inf else f" and <= {self.high}"
        return f"give a number {side} {self.low}{upper}"


@dataclass(frozen=True)
class Choice(Rule):
    """One of ``choices``; ``words`` formats the allowed list (``{}`` = the choices)."""

    choices: tuple[Any, ...]
    words: str = "allowed: {}"
    quote: bool = False

    def clean(self, value: Any) -> Any:
        if value not in self.choices:
            raise Refused(self.describe())
        return value

    def describe(self) -> str:
        shown = map(repr, self.choices) if self.quote else map(str, self.choices)
        return self.words.format(", ".join(shown))


@dataclass(frozen=True)
class OfType(Rule):
    """A value of ``types`` (e.g. ``bool``, ``str``); ``optional``: None passes too."""

    types: type | tuple[type, ...]
    words: str
    optional: bool = False

    def clean(self, value: Any) -> Any:
        if value is None and self.optional:
            return None
        if not isinstance(value, self.types):
            raise Refused(self.words)
        return value

    def describe(self) -> str:
        return self.words


def refusal(name: str, value: Any, refused: Refused) -> ConfigError:
    """The one-line error of a parameter: ``name=value is not allowed; <what to give>``."""
    shown = value if refused.whole else refused.item
    return ConfigError(f"{name}={shown!r} is not allowed; {refused.allowed}")


def check_rules(
    values: Mapping[str, Any] | Any,
    rules: Mapping[str, Rule],
    *,
    error: Callable[[str, Any, Refused], Exception] = refusal,
) -> dict[str, Any]:
    """Check every ``rules`` entry against ``values`` (a mapping, or an object whose
    attributes are read); the cleaned values by name, or ``error(name, value, refusal)``
    raised for the first refused one."""
    get = values.get if isinstance(values, Mapping) else lambda n: getattr(values, n)
    out = {}
    for name, rule in rules.items():
        value = get(name)
        try:
            out[name] = rule.clean(value)
        except Refused as refused:
            raise error(name, value, refused) from None
    return out


def parse_pairs(items: Sequence[str] | None, what: str) -> dict[str, str]:
    """``["a=b", ...]`` (repeated ``NAME=VALUE`` arguments) -> ``{"a": "b"}``; one line
    naming ``what`` for a malformed item."""
    out: dict[str, str] = {}
    for item in items or []:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise SemisupError(f"{what} {item!r} is not of the form NAME=VALUE")
        out[key.strip()] = value.strip()
    return out
