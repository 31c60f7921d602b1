"""The model folder: manifest.json + skops files + weights-only torch tensors; never pickle.

Layout of a folder written by :func:`save_model`::

    manifest.json            what the model is (see FittedModel.manifest), the SHA-256 of
                             every other file, and ``manifest_sha256``: a SHA-256 of the
                             manifest's own content (checked first, so an edited manifest
                             is refused before anything in it is used)
    classifier.skops         the fitted classifier (skops; only trusted classes are rebuilt)
    classifier.pt            tensors of any network inside it (torch, weights_only=True)
    representation.skops/.pt the unsupervised stage the classifier reads, when it has one
    density.skops/.pt        the model whose density / ELBO flags unfamiliar rows

A changed, missing or foreign file raises :class:`ModelFileError` with one line naming it.
The checksums catch damage and edits, not a forger who recomputes them; the trust rules
of the loaders (skops' trusted types, ``weights_only``) are what keep a crafted file from
running code.
"""

from __future__ import annotations

import errno
import hashlib
import json
import logging
import os
import re
import secrets
import shutil
from pathlib import Path
from typing import Any

from .. import __version__
from .._atomic import _current_umask, atomic_write_bytes, atomic_write_text
from .._jsonio import read_json_object
from ._errors import ModelFileError
from ._model import FittedModel
from ._persist import dump_estimator, load_estimator

__all__ = ["FORMAT", "FORMAT_VERSION", "load_model", "manifest_digest", "save_model"]

log = logging.getLogger(__name__)

FORMAT = "semisup-model"
#: 2: the manifest carries ``manifest_sha256`` (version 1 folders cannot be checked).
FORMAT_VERSION = 2
_PARTS = ("classifier", "representation", "density")
_SELF_KEY = "manifest_sha256"
#: Temporary and set-aside folders of save_model: ``.<name>.tmp-<pid>-<hex>`` and
#: ``.<name>.old-<pid>``; releases before 2 used ``.<name>.<8 random characters>``.
_TMP_RE = r"\.{name}\.(?:(?:tmp|old)-(?P<pid>\d+)(?:-[0-9a-f]+)?|[a-z0-9_]{{8}})"


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _is_model_folder(path: Path) -> bool:
    from .._paths import is_model_folder

    return is_model_folder(path)


def manifest_digest(manifest: dict[str, Any]) -> str:
    """SHA-256 of a manifest's content without its own ``manifest_sha256`` key (keys sorted,
    compact JSON, ASCII), so an edit of any value, the class names or the flag threshold
    included, changes it."""
    body = {k: v for k, v in manifest.items() if k != _SELF_KEY}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      default=_json_default)
    return _sha256(text.encode("ascii"))


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError as exc:  # EPERM: alive, another user's
        return exc.errno == errno.EPERM
    return True


def _leftover_files(folder: Path) -> bool:
    """Only files a model save writes (manifest, parts, atomic temporaries)."""
    try:
        names = [p.name for p in folder.iterdir()]
    except OSError:
        return False
    return all(n == "manifest.json" or n.endswith((".skops", ".pt", ".json"))
               or ".tmp" in n for n in names)


def remove_leftovers(target: Path) -> list[Path]:
    """Remove the temporary folders that killed saves of ``target`` left beside it (their
    process is gone, or they come from a release that did not record it)."""
    pattern = re.compile(_TMP_RE.format(name=re.escape(target.name)))
    removed = []
    try:
        siblings = list(target.parent.iterdir())
    except OSError:
        return removed
    for path in siblings:
        m = pattern.fullmatch(path.name)
        if m is None or not path.is_dir() or path.is_symlink():
            continue
        pid = m.group("pid")
        if pid is not None and _pid_alive(int(pid)):
            continue
        if pid is None and not _leftover_files(path):
            continue
        shutil.rmtree(path, ignore_errors=True)
        removed.append(path)
    if removed:
        log.info("removed %d temporary folder(s) of interrupted saves beside %s", len(removed),
                 target)
    return removed


def save_model(model: FittedModel, path: str | os.PathLike[str]) -> Path:
    """Write ``model`` to the folder ``path`` (replacing an older model folder there).

    The folder is assembled under a temporary name beside ``path`` and renamed into place,
    so an interrupted save leaves the old model (or nothing).
    """
    from .._paths import check_output

    target = Path(path)
    if target.exists() and not (target.is_dir() and (_is_model_folder(target)
                                                     or not any(target.iterdir()))):
        raise ModelFileError(f"{target} exists and is not a semisup model folder; choose another "
                             "--out (an older model folder there would be replaced)")
    training = model.manifest.get("training_data") or {}
    check_output(target, option="--out", model_folder_ok=True,
                 inputs={"the training table": training.get("source")},
                 held={"the study folder": training.get("study_dir")})
    parts = {"classifier": model.estimator, "representation": model.representation}
    if model.density is not None and model.density is not model.representation:
        parts["density"] = model.density
    files: dict[str, bytes] = {}
    for name, obj in parts.items():
        if obj is None:
            continue
        data, weights = dump_estimator(obj)
        files[f"{name}.skops"] = data
        if weights is not None:
            files[f"{name}.pt"] = weights
    manifest = dict(model.manifest)
    manifest.update({"format": FORMAT, "format_version": FORMAT_VERSION,
                     "semisup_version": __version__})
    manifest["density"] = dict(manifest.get("density") or {})
    if model.density is not None:
        manifest["density"]["part"] = "density" if "density" in parts else "representation"
    manifest["files"] = {name: _sha256(data) for name, data in sorted(files.items())}
    manifest.pop(_SELF_KEY, None)
    manifest = json.loads(json.dumps(manifest, default=_json_default))  # as a reader sees it
    manifest[_SELF_KEY] = manifest_digest(manifest)
    target.parent.mkdir(parents=True, exist_ok=True)
    remove_leftovers(target)
    tmp = target.with_name(f".{target.name}.tmp-{os.getpid()}-{secrets.token_hex(4)}")
    # the user's umask decides the folder's mode, as for any folder they make (mkdtemp's
    # 0700 made every model folder private)
    tmp.mkdir(mode=0o777 & ~_current_umask())
    try:
        for name, data in files.items():
            atomic_write_bytes(tmp / name, data)
        atomic_write_text(tmp / "manifest.json", json.dumps(manifest, indent=1, sort_keys=True)
                          + "\n")
        old = None
        if target.exists():
            old = target.with_name(f".{target.name}.old-{os.getpid()}")
            os.replace(target, old)
        os.replace(tmp, target)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)
    log.info("model written to %s", target)
    return target


def _json_default(value: Any) -> Any:
    import numpy as np

    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (set, tuple)):
        return list(value)
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"not JSON: {type(value).__name__}")


def read_manifest(path: str | os.PathLike[str]) -> dict[str, Any]:
    """The manifest of the model folder ``path``; foreign paths raise ModelFileError."""
    folder = Path(path)
    if not folder.exists():
        raise ModelFileError(f"{folder}: no such model folder; give the folder that "
                             "'semisup fit --out' wrote")
    if not folder.is_dir():
        raise ModelFileError(f"{folder} is a file, not a semisup model folder; give the folder "
                             "that 'semisup fit --out' wrote")
    manifest_path = folder / "manifest.json"
    manifest = read_json_object(
        manifest_path, ModelFileError, fix="the folder is damaged, fit the model again",
        missing=f"{folder} is not a semisup model folder (no manifest.json); give the folder "
                "that 'semisup fit --out' wrote")
    if manifest.get("format") != FORMAT:
        raise ModelFileError(f"{manifest_path} is not a semisup model manifest; give the folder "
                             "that 'semisup fit --out' wrote")
    version = manifest.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION:
        raise ModelFileError(f"{folder} has model format {version!r}, newer than this semisup "
                             f"{__version__} reads ({FORMAT_VERSION}); upgrade semisup")
    recorded = manifest.get(_SELF_KEY)
    if recorded is None:
        why = (f"model format {version}, written by an older semisup" if version < 2 else
               f"its {_SELF_KEY} was removed")
        raise ModelFileError(f"{manifest_path} carries no checksum of itself ({why}), so an "
                             "edit cannot be ruled out; fit the model again")
    try:
        actual = manifest_digest(manifest)
    except TypeError:
        actual = None
    if recorded != actual:
        raise ModelFileError(f"{manifest_path} does not match its own checksum "
                             f"({_SELF_KEY}): it was edited after it was written; fit the model "
                             "again (or restore the folder from a copy)")
    for key in ("method", "classes", "features", "encoder", "files"):
        if key not in manifest:
            raise ModelFileError(f"{manifest_path} lacks {key!r}; the folder is damaged, fit the "
                                 "model again")
    files = manifest["files"]
    if not isinstance(files, dict) or not all(isinstance(k, str) and isinstance(v, str)
                                              for k, v in files.items()):
        raise ModelFileError(f"{manifest_path}: 'files' is not a table of file checksums; the "
                             "folder is damaged, fit the model again")
    if not isinstance(manifest["classes"], list) or not isinstance(manifest["features"], list):
        raise ModelFileError(f"{manifest_path}: 'classes' / 'features' are not lists; the "
                             "folder is damaged, fit the model again")
    return manifest


def _read_part(folder: Path, name: str, manifest: dict) -> Any:
    files = manifest["files"]
    blobs: dict[str, bytes] = {}
    for suffix in (".skops", ".pt"):
        fname = name + suffix
        if fname not in files:
            continue
        try:
            data = (folder / fname).read_bytes()
        except FileNotFoundError:
            raise ModelFileError(f"{folder}: {fname} is missing; the folder is incomplete, fit "
                                 "the model again") from None
        if _sha256(data) != files[fname]:
            raise ModelFileError(f"{folder / fname} does not match its checksum in manifest.json "
                                 "(changed after it was written); fit the model again")
        blobs[suffix] = data
    if ".skops" not in blobs:
        raise ModelFileError(f"{folder}: manifest.json lists no {name}.skops; the folder is "
                             "damaged, fit the model again")
    return load_estimator(blobs[".skops"], blobs.get(".pt"), where=str(folder / f"{name}.skops"),
                          weights_where=str(folder / f"{name}.pt"))


def load_model(path: str | os.PathLike[str]) -> FittedModel:
    """Read a model folder written by ``semisup fit`` (or :func:`save_model`).

    Nothing is unpickled: the classifier is rebuilt by skops from trusted classes only, and
    network weights are read with ``torch.load(..., weights_only=True)``.

    Returns
    -------
    FittedModel
        With ``predict(frame)`` and ``predict_proba(frame)`` on a pandas DataFrame.

    Raises
    ------
    ModelFileError
        A missing, damaged, changed or foreign file (one line naming it).
    """
    folder = Path(path)
    manifest = read_manifest(folder)
    unknown = [f for f in manifest["files"] if f.rsplit(".", 1)[0] not in _PARTS
               or not f.endswith((".skops", ".pt"))]
    if unknown:
        raise ModelFileError(f"{folder}/manifest.json lists unknown file {unknown[0]!r}; the "
                             "folder was not written by semisup fit")
    try:
        from ..data import TableEncoder

        encoder = TableEncoder.from_state(manifest["encoder"])
    except (KeyError, TypeError, ValueError) as exc:
        raise ModelFileError(f"{folder}/manifest.json has a damaged encoder state "
                             f"({type(exc).__name__}: {exc}); fit the model again") from None
    estimator = _read_part(folder, "classifier", manifest)
    names = {f.rsplit(".", 1)[0] for f in manifest["files"]}
    representation = _read_part(folder, "representation", manifest) \
        if "representation" in names else None
    part = (manifest.get("density") or {}).get("part")
    density = None
    if part == "representation":
        density = representation
    elif part == "density":
        density = _read_part(folder, "density", manifest)
    if not hasattr(estimator, "predict_proba") or not hasattr(estimator, "classes_"):
        raise ModelFileError(f"{folder}/classifier.skops is not a fitted classifier; fit the "
                             "model again")
    model = FittedModel(manifest, encoder, estimator, representation, density)
    model.path = folder  # where it was read from: outputs may not go inside it
    return model
