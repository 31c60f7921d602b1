"""Seeds derived from one study seed with numpy's SeedSequence.

Every random choice in a study takes a seed from :func:`derive_seed`, keyed by a stable tuple
of names and numbers, so the same study run twice (in any order, on any backend) gives the
same numbers.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["derive_seed", "derive_rng", "int_seed"]


def _key_words(key: tuple[object, ...]) -> list[int]:
    words: list[int] = []
    for part in key:
        digest = hashlib.sha256(repr(part).encode("utf-8")).digest()
        words.append(int.from_bytes(digest[:4], "little"))
    return words


def derive_seed(study_seed: int, *key: object) -> int:
    """Return a 32-bit seed for the random choice named by ``key`` within a study.

    ``derive_seed(7, "draw", 3)`` is the same on every machine and run.
    """
    seq = np.random.SeedSequence(entropy=int(study_seed), spawn_key=tuple(_key_words(key)))
    return int(seq.generate_state(1, dtype=np.uint32)[0])


def derive_rng(study_seed: int, *key: object) -> np.random.Generator:
    """A numpy Generator seeded by :func:`derive_seed`."""
    return np.random.default_rng(derive_seed(study_seed, *key))


def int_seed(random_state: object) -> object:
    """An estimator's ``random_state`` as a plain seed: a ``numpy.random.RandomState`` gives
    its next draw below 2**31 (so it advances, as scikit-learn's estimators use one); an
    integer of any numpy type gives a Python int; anything else (None) is returned as is."""
    if isinstance(random_state, np.random.RandomState):
        return int(random_state.randint(2**31))
    if isinstance(random_state, np.integer):
        return int(random_state)
    return random_state
