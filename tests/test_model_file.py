"""The model folder: bit-identical round trip for every registered method, and refusal of
damaged, edited or foreign files (nothing is ever unpickled)."""

from __future__ import annotations

import hashlib
import io
import json
import os
import stat
import warnings

import numpy as np
import pytest
from _model_support import ID, LABEL, wine_frame

from semisup.methods import get_method, list_methods
from semisup.model import FittedModel, ModelFileError, load_model, save_model
from semisup.model._file import manifest_digest


@pytest.fixture(scope="module")
def parts():
    from semisup.data import dataset_from_frame
    from semisup.pretrain import fit_representation

    frame, _ = wine_frame()
    ds = dataset_from_frame(frame, label_column=LABEL, id_column=ID)
    stages = {
        "vae": fit_representation("vae", ds.X, blocks=ds.blocks,
                                  params={"max_epochs": 5, "latent_dim": 4}, seed=1)[0],
        "mixture": fit_representation("mixture", ds.X, seed=1)[0],
    }
    return frame, ds, stages


def _model(parts, name):
    frame, ds, stages = parts
    m = get_method(name)
    stage = stages.get(m.representation)
    X = ds.X if stage is None else np.asarray(stage.transform(ds.X), dtype=np.float32)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = m.build(dict(m.default_params), 3).fit(X, ds.y)
    density = stage if stage is not None else stages["mixture"]
    manifest = {
        "method": name, "classes": list(ds.class_names), "id_column": ID, "label_column": LABEL,
        "features": [{"column": c, "kind": k} for c, k in ds.encoder.kinds_.items()
                     if k in ("numeric", "categorical")],
        "density": {"threshold": -50.0},
    }
    manifest["encoder"] = ds.encoder.to_state()
    return FittedModel(manifest, ds.encoder, est, stage, density)


@pytest.mark.parametrize("name", [m.name for m in list_methods()])
def test_round_trip_is_bit_identical_for_every_method(parts, name, tmp_path):
    frame = parts[0]
    model = _model(parts, name)
    before = model.predict_proba(frame)
    scores = model.density_scores(model.encode(frame))
    save_model(model, tmp_path / "m")
    back = load_model(tmp_path / "m")
    after = back.predict_proba(frame)
    assert after.dtype == before.dtype and after.shape == (len(frame), 3)
    assert np.array_equal(before, after)  # bit-identical, not just close
    assert np.array_equal(scores, back.density_scores(back.encode(frame)))
    assert list(back.predict(frame)) == list(model.predict(frame))
    # the encoder's state is JSON in the manifest and rebuilds to the same encoding
    assert np.array_equal(back.encoder.transform(frame.drop(columns=[ID, LABEL])),
                          model.encoder.transform(frame.drop(columns=[ID, LABEL])))


def _saved(parts, tmp_path, name="latent-logreg"):
    path = tmp_path / "m"
    save_model(_model(parts, name), path)
    return path


def _rewrite(path, fname, data: bytes):
    """Replace a file and fix its checksum, as a forger who also edits the manifest would."""
    (path / fname).write_bytes(data)
    manifest = json.loads((path / "manifest.json").read_text())
    manifest["files"][fname] = hashlib.sha256(data).hexdigest()
    manifest["manifest_sha256"] = manifest_digest(manifest)  # the forger recomputes it too
    (path / "manifest.json").write_text(json.dumps(manifest))


def test_edited_file_fails_its_checksum(parts, tmp_path):
    path = _saved(parts, tmp_path)
    data = bytearray((path / "classifier.skops").read_bytes())
    data[len(data) // 2] ^= 0xFF
    (path / "classifier.skops").write_bytes(bytes(data))
    with pytest.raises(ModelFileError, match="does not match its checksum"):
        load_model(path)


def test_unreadable_encoder_state_is_one_clear_line(parts, tmp_path):
    # The encoder's state is TableEncoder.to_state(); a layout from_state cannot read (here:
    # one without "blocks") is refused with one line naming the manifest and the fix.
    path = _saved(parts, tmp_path)
    manifest = json.loads((path / "manifest.json").read_text())
    del manifest["encoder"]["blocks"]
    (path / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(ModelFileError, match="manifest.json") as info:
        load_model(path)
    assert "\n" not in str(info.value) and "fit the model again" in str(info.value)


def test_untrusted_type_in_skops_file_is_refused(parts, tmp_path):
    # skops (https://skops.readthedocs.io) records a FunctionTransformer's func by name; a
    # builtin function is exactly what a crafted file would smuggle in.
    import skops.io as sio
    from sklearn.preprocessing import FunctionTransformer

    path = _saved(parts, tmp_path)
    _rewrite(path, "classifier.skops", sio.dumps(FunctionTransformer(func=eval)))
    with pytest.raises(ModelFileError, match="does not trust"):
        load_model(path)


class _Payload:
    """Pickling this object would call print at load time; weights_only must refuse it."""

    def __reduce__(self):
        return (print, ("unpickled!",))


def test_pickled_object_in_torch_weights_is_refused(parts, tmp_path, capsys):
    import torch

    path = _saved(parts, tmp_path)
    buffer = io.BytesIO()
    torch.save({"x": _Payload()}, buffer)
    _rewrite(path, "representation.pt", buffer.getvalue())
    with pytest.raises(ModelFileError, match="network weights cannot be read"):
        load_model(path)
    assert "unpickled!" not in capsys.readouterr().out


def test_network_class_outside_torch_and_semisup_is_refused():
    from semisup.model._persist import _build_module

    spec = {"class": "collections.OrderedDict", "training": False, "attrs": {}, "params": {},
            "buffers": {}, "non_persistent": [], "children": {}}
    with pytest.raises(ModelFileError, match="not a torch.nn or semisup module"):
        _build_module(spec, {})


def test_foreign_folders_and_files(tmp_path):
    with pytest.raises(ModelFileError, match="no such model folder"):
        load_model(tmp_path / "absent")
    (tmp_path / "plain").mkdir()
    with pytest.raises(ModelFileError, match="no manifest.json"):
        load_model(tmp_path / "plain")
    (tmp_path / "file.bin").write_bytes(b"\x80\x04K\x01.")  # a pickle of the number 1
    with pytest.raises(ModelFileError, match="is a file, not a semisup model folder"):
        load_model(tmp_path / "file.bin")
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "manifest.json").write_text('{"name": "something else"}')
    with pytest.raises(ModelFileError, match="not a semisup model manifest"):
        load_model(tmp_path / "other")
    odd = {"format": "semisup-model", "format_version": 2, "method": "x", "classes": [],
           "features": [], "encoder": {}, "files": "classifier.skops"}
    (tmp_path / "other" / "manifest.json").write_text(json.dumps(
        {**odd, "manifest_sha256": manifest_digest(odd)}))
    with pytest.raises(ModelFileError, match="not a table of file checksums"):
        load_model(tmp_path / "other")
    (tmp_path / "other" / "manifest.json").write_text(json.dumps({
        "format": "semisup-model", "format_version": 99}))
    with pytest.raises(ModelFileError, match="newer than this semisup"):
        load_model(tmp_path / "other")


def test_save_replaces_an_old_model_but_not_other_folders(parts, tmp_path):
    path = _saved(parts, tmp_path)
    save_model(_model(parts, "supervised-logreg"), path)
    assert load_model(path).method == "supervised-logreg"
    assert not any(p.name.startswith(".") for p in tmp_path.iterdir())  # no temp leftovers
    (tmp_path / "work").mkdir()
    (tmp_path / "work" / "notes.txt").write_text("mine")
    with pytest.raises(ModelFileError, match="not a semisup model folder"):
        save_model(_model(parts, "supervised-logreg"), tmp_path / "work")
    assert (tmp_path / "work" / "notes.txt").read_text() == "mine"


@pytest.mark.parametrize("umask", [0o022, 0o077, 0o002])
def test_model_folder_mode_follows_the_umask(parts, tmp_path, umask):
    # POSIX: a folder made by mkdir(0o777) gets 0o777 & ~umask (what `mkdir` in a shell does)
    old = os.umask(umask)
    try:
        path = _saved(parts, tmp_path, "supervised-logreg")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o777 & ~umask
    for f in path.iterdir():
        assert stat.S_IMODE(f.stat().st_mode) == 0o666 & ~umask


def test_leftovers_of_killed_saves_are_removed_by_the_next_save(parts, tmp_path):
    import subprocess
    import sys

    path = _saved(parts, tmp_path, "supervised-logreg")
    # a save killed mid-way: its temporary folder names a process that no longer exists
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True).stdout.strip()
    dead = tmp_path / f".m.tmp-{gone}-0a1b2c3d"
    dead.mkdir()
    (dead / "classifier.skops").write_bytes(b"partial")
    old_style = tmp_path / ".m.k2j4_x9q"  # an earlier release's mkdtemp name
    old_style.mkdir()
    (old_style / "manifest.json").write_text("{}")
    alive = tmp_path / f".m.tmp-{os.getpid()}-ffffffff"  # a save running now: kept
    alive.mkdir()
    mine = tmp_path / ".m.notes"  # not a save's folder name: kept
    mine.mkdir()
    save_model(_model(parts, "supervised-logreg"), path)
    assert not dead.exists() and not old_style.exists()
    assert alive.exists() and mine.exists()
    assert load_model(path).method == "supervised-logreg"


def test_any_manifest_edit_is_refused_naming_the_manifest(parts, tmp_path):
    path = _saved(parts, tmp_path, "supervised-logreg")
    text = (path / "manifest.json").read_text()
    manifest = json.loads(text)
    swapped = dict(manifest, classes=manifest["classes"][::-1])
    (path / "manifest.json").write_text(json.dumps(swapped))
    with pytest.raises(ModelFileError, match=r"manifest.json does not match its own checksum"):
        load_model(path)
    # key order and white space are not content: the same manifest re-indented still loads
    (path / "manifest.json").write_text(json.dumps(manifest, indent=4, sort_keys=False))
    assert load_model(path).classes == manifest["classes"]


def test_malicious_tensor_file_is_named_by_its_own_name(parts, tmp_path):
    import pickle

    path = _saved(parts, tmp_path, "latent-logreg")  # a VAE: representation.pt exists
    evil = pickle.dumps({"x": eval})  # weights_only refuses any callable (torch docs)
    _rewrite(path, "representation.pt", evil)
    with pytest.raises(ModelFileError, match=r"representation\.pt: network weights cannot"):
        load_model(path)
