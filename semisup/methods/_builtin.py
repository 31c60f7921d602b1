"""Registers the built-in methods (each module registers itself on import)."""

from __future__ import annotations
