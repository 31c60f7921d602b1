"""Reading the JSON files the model part depends on, with one-line errors."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

__all__ = ["read_json"]


def read_json(path: Path, error: type[Exception], *, missing: str, damaged: str) -> Any:
    """Parsed JSON of ``path``; ``error(missing)`` when it does not exist, ``error`` naming the
    file, the problem and ``damaged`` (the fix) when it cannot be read or parsed."""
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise error(missing) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise error(f"{path} cannot be read ({type(exc).__name__}); {damaged}") from None
    try:
        return json.loads(text)
    except ValueError as exc:
        raise error(f"{path} is not valid JSON ({str(exc)[:60]}); {damaged}") from None
