"""TableSource: a table's path and the settings that say how to read it, as one value."""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from pathlib import Path
from types import MappingProxyType
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from ._card import DataCard
    from ._dataset import Dataset

__all__ = ["TableSource"]


@dataclass(frozen=True)
class TableSource:
    """A table and how to read it: what ``load_dataset`` and ``make_card`` take.

    The study spec (``StudySpec``), a study folder's ``study.json``, the model fit and the
    command line hand these settings around as this one frozen value, so a new reading setting
    is one field here (and its row in ``semisup.study.SETTINGS``).

    Parameters
    ----------
    path : path-like
        The table (see :func:`~semisup.data.read_table`).
    label_column : str
        Column holding the class label.
    id_column : str, optional
        Column of unique row ids; default: the 0-based row number.
    unlabeled_markers : tuple of str
        Extra label values that mean unlabeled.
    kinds : mapping of str to str
        Column kind overrides (``KIND_OVERRIDES``); kept read-only.
    delimiter, encoding : str, optional
        For text files; the delimiter is sniffed and the encoding defaults to UTF-8.
    """

    path: Path
    label_column: str
    id_column: str | None = None
    unlabeled_markers: tuple[str, ...] = ()
    kinds: Mapping[str, str] = field(default_factory=dict)
    delimiter: str | None = None
    encoding: str | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "path", Path(self.path))
        object.__setattr__(self, "unlabeled_markers", tuple(self.unlabeled_markers or ()))
        object.__setattr__(self, "kinds", MappingProxyType(dict(self.kinds or {})))

    @classmethod
    def settings(cls) -> tuple[str, ...]:
        """The reading settings (every field but ``path``), by their study option names."""
        return tuple(f.name for f in fields(cls) if f.name != "path")

    @classmethod
    def of(cls, values: Mapping[str, Any] | Any,
           path: str | os.PathLike[str] | None = None) -> TableSource:
        """From a mapping or an object holding the settings by name (a ``StudySpec``, the
        spec recorded in ``study.json``, parsed command-line arguments); the table is
        ``path`` when given, else its ``data``. Settings it lacks (an older study.json) or
        holds as None take the defaults."""
        get = values.get if isinstance(values, Mapping) else \
            (lambda name: getattr(values, name, None))
        given = {name: get(name) for name in cls.settings()}
        given = {name: value for name, value in given.items() if value is not None}
        return cls(path=Path(path if path is not None else get("data")), **given)

    def read_options(self) -> dict[str, Any]:
        """The keyword arguments of ``load_dataset`` / ``make_card`` (besides the path)."""
        out = {name: getattr(self, name) for name in self.settings()}
        out["kinds"] = dict(self.kinds)
        return out

    def load(self) -> Dataset:
        """Read, validate and encode the table (see :func:`~semisup.data.load_dataset`)."""
        from ._load import load_source

        return load_source(self).dataset

    def card(self) -> DataCard:
        """The table's data card (see :func:`~semisup.data.make_card`)."""
        from ._card import card_of

        return card_of(self)
