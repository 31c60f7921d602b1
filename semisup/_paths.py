"""The one rule for output paths: no command writes over an input it read, or into a model folder.

Every command that writes calls :func:`check_output` before any work, with the paths it reads
(the table, the returned sheet, the model folder, the study folder's files). Paths are
compared after resolving symlinks and relative parts (``Path.resolve``) and, when both exist,
by file identity (``os.path.samefile``, so a hard link counts as the same file). A refusal is
one line (``ConfigError``, exit 2 on the command line) naming the output, the input it would
destroy and the fix.

A *model folder* (``semisup fit --out``) holds only what ``save_model`` wrote, under its
checksums; nothing else may write into it, and only ``save_model`` may replace it.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterable, Mapping
from pathlib import Path

from ._errors import ConfigError

__all__ = ["MODEL_FORMAT", "check_output", "enclosing_model_folder", "is_model_folder",
           "same_path", "study_inputs"]

#: ``manifest.json``'s ``format`` of a model folder (semisup/model/_file.py writes it).
MODEL_FORMAT = "semisup-model"


def _resolved(path: str | os.PathLike[str]) -> Path:
    return Path(path).expanduser().resolve()


def same_path(a: str | os.PathLike[str], b: str | os.PathLike[str]) -> bool:
    """True when ``a`` and ``b`` name the same file or folder (symlinks and relative parts
    resolved; hard links of one existing file count as the same)."""
    if _resolved(a) == _resolved(b):
        return True
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def _inside(path: Path, folder: Path) -> bool:
    """``path`` is ``folder`` or lies somewhere below it (both resolved)."""
    return path == folder or folder in path.parents


def is_model_folder(path: str | os.PathLike[str]) -> bool:
    """True when ``path`` is a folder with a semisup model manifest."""
    manifest = Path(path) / "manifest.json"
    try:
        if not manifest.is_file() or manifest.stat().st_size > 50_000_000:
            return False
        data = json.loads(manifest.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return isinstance(data, dict) and data.get("format") == MODEL_FORMAT


def enclosing_model_folder(path: str | os.PathLike[str]) -> Path | None:
    """The model folder ``path`` lies in (or is), or None."""
    p = _resolved(path)
    for folder in (p, *p.parents):
        if is_model_folder(folder):
            return folder
    return None


def study_inputs(study_dir: str | os.PathLike[str]) -> dict[str, Path]:
    """The study folder's own files (what study, plan and report wrote), as ``check_output``
    inputs: a command that read the study must not write over them."""
    from .study import OUTPUT_FILES, OUTPUT_FOLDERS

    folder = Path(study_dir)
    return {f"the study's file {name} in {folder}": folder / name
            for name in (*OUTPUT_FILES, *OUTPUT_FOLDERS)}


def check_output(
    out: str | os.PathLike[str],
    *,
    option: str,
    inputs: Mapping[str, str | os.PathLike[str] | None] = {},  # noqa: B006  (read only)
    model_folder_ok: bool = False,
    extra_outputs: Iterable[tuple[str, str | os.PathLike[str] | None]] = (),
    held: Mapping[str, str | os.PathLike[str] | None] = {},  # noqa: B006  (read only)
) -> None:
    """Refuse ``out`` when writing it would destroy something the command read.

    Parameters
    ----------
    out : path
        The file or folder the command is about to write (``option`` names it: ``--out``).
    inputs : mapping of description -> path
        What the command read. ``out`` may be none of them, may not lie inside one that is a
        folder, and, when ``out`` is a folder the command replaces, may not hold one of them.
    model_folder_ok : bool
        ``out`` is itself a model folder that ``save_model`` replaces as a whole (``fit
        --out``); otherwise ``out`` may be neither a model folder nor inside one.
    extra_outputs : pairs of (option, path)
        Other outputs of the same command; ``out`` may be neither one of them nor inside one.
    held : mapping of description -> path
        Inputs that ``out`` (a folder replaced as a whole) may not hold, although ``out`` may
        lie inside them (a model folder inside the study folder is fine; one that holds the
        study folder is not).

    Raises
    ------
    ConfigError
        One line naming ``option``, the path and what it would overwrite.
    """
    target = _resolved(out)
    for what, path in held.items():
        if path is not None and str(path) != "" and same_path(out, path):
            raise ConfigError(f"{option} {out} is {what}; choose another path (inputs are never "
                              "overwritten)")
    for what, path in inputs.items():
        if path is None or str(path) == "":
            continue
        source = _resolved(path)
        if same_path(out, path):
            raise ConfigError(f"{option} {out} is {what} ({path}), which this command reads; "
                              "choose another path (inputs are never overwritten)")
        if _inside(target, source):
            raise ConfigError(f"{option} {out} lies inside {what} ({path}); choose a path "
                              "outside it (inputs are never written into)")
    for what, path in {**inputs, **held}.items():
        if path is not None and str(path) != "" and model_folder_ok \
                and _inside(_resolved(path), target):
            raise ConfigError(f"{option} {out} holds {what} ({path}), which replacing the "
                              "folder would delete; choose another path")
    for other_option, other in extra_outputs:
        if other is None:
            continue
        if same_path(out, other):
            raise ConfigError(f"{option} {out} is also given as {other_option}; give the two "
                              "outputs different paths")
        if _inside(target, _resolved(other)):
            raise ConfigError(f"{option} {out} lies inside {other_option} {other}; write it "
                              "outside that folder")
    folder = enclosing_model_folder(target)
    if folder is not None and not (model_folder_ok and folder == target):
        raise ConfigError(f"{option} {out} lies inside the model folder {folder}, whose files "
                          "are covered by its checksums; write outside it")
    if model_folder_ok:
        # a folder replaced as a whole must not hold a model folder either (it would go too)
        if target.is_dir() and not is_model_folder(target):
            for child in target.iterdir():
                if child.is_dir() and is_model_folder(child):
                    raise ConfigError(f"{option} {out} holds the model folder {child}; choose "
                                      "another path")
