"""Classifiers behind one contract (fit with y == -1 for unlabeled rows) and their registry."""

from __future__ import annotations

from ._registry import MethodSpec, MethodUnavailable, get_method, list_methods, register

__all__ = ["MethodSpec", "MethodUnavailable", "get_method", "list_methods", "register"]
