"""Reading, validating and encoding tables; data cards; the bundled demo table.

:class:`TableSource` is a table and its reading settings (label and id columns, unlabeled
markers, kind overrides, delimiter, encoding) as one frozen value; ``TableSource.load()`` and
``.card()`` are ``load_dataset`` and ``make_card``. :func:`check_kinds` is the one check of
column kind overrides (``KIND_OVERRIDES``).
"""

from __future__ import annotations

from ._card import (
    IMBALANCE_RATIO,
    DataCard,
    card_of,
    imbalance_ratio,
    is_imbalanced,
    make_card,
    write_card,
)
from ._columns import as_text, infer_column_kinds
from ._dataset import UNLABELED, Dataset, FeatureBlock
from ._demo import DEMO_ID_COLUMN, DEMO_LABEL_COLUMN, demo_table, write_demo_table
from ._labels import sort_class_names
from ._load import dataset_from_frame, load_dataset
from ._read import (
    KIND_OVERRIDES,
    check_kinds,
    file_sha256,
    is_text_table,
    read_kind_overrides,
    read_table,
    read_table_chunks,
)
from ._shift import labeled_pool_shift, shift_warning
from ._source import TableSource


def __getattr__(name: str):
    # TableEncoder imports scikit-learn (slow); load it on first use so that bad input is
    # reported without waiting for that import.
    if name == "TableEncoder":
        from ._encoder import TableEncoder

        return TableEncoder
    raise AttributeError(f"module 'semisup.data' has no attribute {name!r}")


__all__ = [
    "DEMO_ID_COLUMN",
    "DEMO_LABEL_COLUMN",
    "IMBALANCE_RATIO",
    "KIND_OVERRIDES",
    "UNLABELED",
    "DataCard",
    "Dataset",
    "FeatureBlock",
    "TableEncoder",
    "TableSource",
    "as_text",
    "card_of",
    "check_kinds",
    "dataset_from_frame",
    "demo_table",
    "file_sha256",
    "imbalance_ratio",
    "infer_column_kinds",
    "is_imbalanced",
    "is_text_table",
    "labeled_pool_shift",
    "load_dataset",
    "make_card",
    "read_kind_overrides",
    "read_table",
    "read_table_chunks",
    "shift_warning",
    "sort_class_names",
    "write_card",
    "write_demo_table",
]
