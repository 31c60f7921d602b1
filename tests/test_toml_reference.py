"""The study TOML reference covers every key the code accepts, and README carries it."""

from __future__ import annotations

import dataclasses
import inspect
from pathlib import Path

import pytest

from semisup import ConfigError
from semisup.pretrain import MixtureTransformer, VAETransformer
from semisup.study import StudySpec
from semisup.study._reference import BEGIN, END, reference_entries, toml_reference

README = Path(__file__).resolve().parents[1] / "README.md"


def _accepted(cls) -> set[str]:
    # What fit_representation accepts: the estimator's parameters less the two it sets itself.
    return set(inspect.signature(cls.__init__).parameters) - {"self", "random_state", "blocks"}


def test_every_key_has_a_documented_entry():
    entries = reference_entries()
    by_table: dict[str, set[str]] = {}
    for e in entries:
        assert e.meaning.strip(), (e.table, e.key)
        assert e.default.strip(), (e.table, e.key)
        by_table.setdefault(e.table, set()).add(e.key)
    assert by_table[""] == {f.name for f in dataclasses.fields(StudySpec)}
    assert by_table["pretrain.vae"] == _accepted(VAETransformer)
    assert by_table["pretrain.mixture"] == _accepted(MixtureTransformer)


def test_reference_defaults_are_the_code_defaults():
    entries = {(e.table, e.key): e for e in reference_entries()}
    assert entries[("", "repeats")].default == str(StudySpec.__dataclass_fields__["repeats"]
                                                   .default)
    assert entries[("", "data")].default == "required"
    vae = inspect.signature(VAETransformer.__init__).parameters
    assert entries[("pretrain.vae", "latent_dim")].default == str(vae["latent_dim"].default)


def test_readme_holds_the_current_reference():
    text = README.read_text(encoding="utf-8")
    assert BEGIN in text and END in text
    block = text.split(BEGIN, 1)[1].split(END, 1)[0].strip()
    assert block == toml_reference().strip(), (
        "README's study TOML reference is stale: run "
        "'python -m semisup.study._reference --write README.md'")


def test_a_missing_description_is_refused(monkeypatch):
    from semisup.study import _reference

    monkeypatch.setattr(_reference, "_MIXTURE_EXTRA", {})
    with pytest.raises(ConfigError, match="n_components_grid"):
        _reference.toml_reference()
