"""Reading the project's JSON files (study.json, plan.json, data_card.json, a model's
manifest.json) with one-line errors: the one JSON reader every subpackage uses."""

from __future__ import annotations

import json
import os
from pathlib import Path

__all__ = ["read_json_object"]


def read_json_object(path: str | os.PathLike[str], error: type[Exception], *,
                     fix: str, missing: str | None = None) -> dict:
    """The JSON object in ``path``.

    An absent file gives ``{}``, or ``error(missing)`` when ``missing`` is given. A file that
    cannot be read, is not JSON or holds something other than an object is one ``error`` line
    naming the file and the problem and ending in ``fix``.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        if missing is None:
            return {}
        raise error(missing) from None
    except IsADirectoryError:
        raise error(f"{path} is a folder, not a JSON file; {fix}") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise error(f"{path} cannot be read ({type(exc).__name__}); {fix}") from None
    try:
        data = json.loads(text)
    except ValueError as exc:
        raise error(f"{path} is not valid JSON ({str(exc)[:60]}); {fix}") from None
    if not isinstance(data, dict):
        raise error(f"{path} should hold a JSON object, found {type(data).__name__}; {fix}")
    return data
