"""Saving a fitted classifier without pickle: skops for the scikit-learn parts, weights-only
torch for any network inside it.

skops (https://skops.readthedocs.io) writes an estimator as a zip of JSON and ``.npy`` files
and, on loading, builds only the types the caller trusts. We trust a type only when it is a
class defined in scikit-learn or semisup, or one skops itself trusts (NumPy / SciPy
containers, scikit-learn's public estimators); functions and every other module's classes are
refused, so a crafted file cannot make the
loader call arbitrary code.

skops cannot store torch networks. Before dumping, every ``torch.nn.Module`` or
``torch.Tensor`` held by a semisup object is replaced by a small JSON description (class,
plain attributes, child modules, parameter names); the tensors go into one file read back
with ``torch.load(..., weights_only=True)``. Rebuilding a module only instantiates
``torch.nn`` or semisup classes.
"""

from __future__ import annotations

import copy
import dataclasses
import importlib
import io
from typing import Any

import numpy as np

from ._errors import ModelFileError

__all__ = ["dump_estimator", "load_estimator", "trusted_type"]

# Beyond the types skops trusts by default (numpy / scipy containers and scikit-learn's public
# estimators), only classes of these packages: private scikit-learn helpers such as
# sklearn.calibration._SigmoidCalibration, and semisup's own estimators.
_TRUSTED_ROOTS = ("sklearn.", "semisup.")
_MODULE_KEY = "__semisup_torch_module__"
_TENSOR_KEY = "__semisup_torch_tensor__"
_TUPLE_KEY = "__tuple__"
_DATACLASS_KEY = "__dataclass__"


def _resolve(path: str) -> Any:
    module_name, _, name = path.rpartition(".")
    try:
        obj: Any = importlib.import_module(module_name)
    except ImportError:
        # a nested name such as package.module.Class.Inner
        head, _, inner = module_name.rpartition(".")
        try:
            obj = getattr(importlib.import_module(head), inner)
        except (ImportError, AttributeError):
            return None
    return getattr(obj, name, None)


def trusted_type(path: str) -> bool:
    """True when ``path`` names a class (not a function) of scikit-learn or semisup."""
    if not path.startswith(_TRUSTED_ROOTS):
        return False
    obj = _resolve(path)
    return isinstance(obj, type) and obj.__module__.startswith(
        tuple(r.rstrip(".") for r in _TRUSTED_ROOTS)
    )


def _ours(obj: Any) -> bool:
    return type(obj).__module__.startswith("semisup.")


# -- torch parts -------------------------------------------------------------------------------


def _plain(value: Any, where: str) -> Any:
    """JSON-ready encoding of a module attribute; anything unknown is refused."""
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, tuple):
        return {_TUPLE_KEY: [_plain(v, where) for v in value]}
    if isinstance(value, list):
        return [_plain(v, where) for v in value]
    if isinstance(value, dict) and all(isinstance(k, str) for k in value):
        return {k: _plain(v, where) for k, v in value.items()}
    if dataclasses.is_dataclass(value) and not isinstance(value, type) and _ours(value):
        cls = type(value)
        fields = {f.name: _plain(getattr(value, f.name), where) for f in dataclasses.fields(value)}
        return {_DATACLASS_KEY: f"{cls.__module__}.{cls.__qualname__}", "fields": fields}
    raise ModelFileError(
        f"cannot save {where}: values of type {type(value).__name__} are not supported in a "
        "model file (only numbers, text, lists, tuples, dicts and semisup dataclasses)"
    )


def _unplain(value: Any) -> Any:
    if isinstance(value, list):
        return [_unplain(v) for v in value]
    if isinstance(value, dict):
        if set(value) == {_TUPLE_KEY}:
            return tuple(_unplain(v) for v in value[_TUPLE_KEY])
        if set(value) == {_DATACLASS_KEY, "fields"}:
            cls = _resolve(str(value[_DATACLASS_KEY]))
            if not (isinstance(cls, type) and dataclasses.is_dataclass(cls)
                    and cls.__module__.startswith("semisup.")):
                raise ModelFileError(f"model file names {value[_DATACLASS_KEY]!r}, which is not "
                                     "a semisup data class; the file is not trusted")
            return cls(**{k: _unplain(v) for k, v in value["fields"].items()})
        return {k: _unplain(v) for k, v in value.items()}
    return value


def _module_spec(module: Any, tensors: dict, prefix: str) -> dict:
    import torch

    cls = type(module)
    path = f"{cls.__module__}.{cls.__qualname__}"
    base = set(vars(torch.nn.Module()))
    attrs = {k: _plain(v, f"{path}.{k}") for k, v in vars(module).items() if k not in base}
    params = {}
    for name, p in module._parameters.items():
        key = None if p is None else f"{prefix}.p.{name}"
        if p is not None:
            tensors[key] = p.detach().clone()
        params[name] = [key, None if p is None else bool(p.requires_grad)]
    buffers = {}
    for name, b in module._buffers.items():
        key = None if b is None else f"{prefix}.b.{name}"
        if b is not None:
            tensors[key] = b.detach().clone()
        buffers[name] = key
    children = {name: None if child is None else _module_spec(child, tensors, f"{prefix}.{name}")
                for name, child in module._modules.items()}
    return {"class": path, "training": bool(module.training), "attrs": attrs, "params": params,
            "buffers": buffers, "non_persistent": sorted(module._non_persistent_buffers_set),
            "children": children}


def _build_module(spec: dict, tensors: dict) -> Any:
    import torch

    path = str(spec.get("class"))
    cls = _resolve(path)
    if not (isinstance(cls, type) and issubclass(cls, torch.nn.Module)
            and (cls.__module__.startswith("torch.nn.") or cls.__module__.startswith("semisup."))):
        raise ModelFileError(f"model file names network class {path!r}, which is not a torch.nn "
                             "or semisup module; the file is not trusted")
    module = cls.__new__(cls)
    torch.nn.Module.__init__(module)
    for k, v in spec["attrs"].items():
        module.__dict__[k] = _unplain(v)
    for name, (key, grad) in spec["params"].items():
        module._parameters[name] = None if key is None else torch.nn.Parameter(
            tensors[key], requires_grad=bool(grad))
    for name, key in spec["buffers"].items():
        module._buffers[name] = None if key is None else tensors[key]
    module._non_persistent_buffers_set = set(spec["non_persistent"])
    for name, child in spec["children"].items():
        module._modules[name] = None if child is None else _build_module(child, tensors)
    module.train(bool(spec["training"]))
    return module


def _strip(obj: Any, tensors: dict, prefix: str, seen: dict) -> Any:
    """A copy of ``obj`` whose torch parts are replaced by JSON descriptions."""
    torch = _torch_if_loaded()
    if torch is not None:
        if isinstance(obj, torch.nn.Module):
            return {_MODULE_KEY: _module_spec(obj, tensors, prefix)}
        if isinstance(obj, torch.Tensor):
            tensors[prefix] = obj.detach().clone()
            return {_TENSOR_KEY: prefix}
    if isinstance(obj, list):
        return [_strip(v, tensors, f"{prefix}.{i}", seen) for i, v in enumerate(obj)]
    if isinstance(obj, tuple) and type(obj) is tuple:
        return tuple(_strip(v, tensors, f"{prefix}.{i}", seen) for i, v in enumerate(obj))
    if isinstance(obj, dict) and type(obj) is dict:
        return {k: _strip(v, tensors, f"{prefix}.{k}", seen) for k, v in obj.items()}
    if _ours(obj) and hasattr(obj, "__dict__") and not dataclasses.is_dataclass(obj):
        if id(obj) in seen:
            return seen[id(obj)]
        clone = copy.copy(obj)
        seen[id(obj)] = clone
        for k, v in vars(obj).items():
            new = _strip(v, tensors, f"{prefix}.{k}", seen)
            if new is not v:
                clone.__dict__[k] = new
        return clone
    return obj


def _restore(obj: Any, tensors: dict, seen: set) -> Any:
    if isinstance(obj, dict):
        if set(obj) == {_MODULE_KEY}:
            return _build_module(obj[_MODULE_KEY], tensors)
        if set(obj) == {_TENSOR_KEY}:
            return tensors[obj[_TENSOR_KEY]]
        return {k: _restore(v, tensors, seen) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_restore(v, tensors, seen) for v in obj]
    if isinstance(obj, tuple) and type(obj) is tuple:
        return tuple(_restore(v, tensors, seen) for v in obj)
    if _ours(obj) and hasattr(obj, "__dict__") and id(obj) not in seen:
        seen.add(id(obj))
        for k, v in list(vars(obj).items()):
            new = _restore(v, tensors, seen)
            if new is not v:
                obj.__dict__[k] = new
    return obj


def _torch_if_loaded():
    import sys

    return sys.modules.get("torch")


# -- public ------------------------------------------------------------------------------------


def dump_estimator(estimator: Any) -> tuple[bytes, bytes | None]:
    """``(skops bytes, torch tensor bytes or None)`` for a fitted estimator."""
    import skops.io as sio

    tensors: dict[str, Any] = {}
    stripped = _strip(estimator, tensors, "est", {})
    data = sio.dumps(stripped)
    refused = [t for t in sio.get_untrusted_types(data=data) if not trusted_type(t)]
    if refused:
        raise ModelFileError(
            f"cannot save {type(estimator).__name__}: it holds an object of type {refused[0]}, "
            "which a model file may not contain"
        )
    weights = None
    if tensors:
        import torch

        buffer = io.BytesIO()
        torch.save(tensors, buffer)
        weights = buffer.getvalue()
    return data, weights


def load_estimator(data: bytes, weights: bytes | None, *, where: str,
                   weights_where: str | None = None) -> Any:
    """Rebuild what :func:`dump_estimator` wrote; untrusted content raises ModelFileError
    naming ``where`` (the skops file) or ``weights_where`` (the tensor file)."""
    import skops.io as sio

    try:
        types = sio.get_untrusted_types(data=data)
    except Exception as exc:  # noqa: BLE001  (skops raises several types for a bad file)
        raise ModelFileError(f"{where} is not a readable classifier file ({type(exc).__name__}); "
                             "fit the model again with semisup fit") from None
    refused = [t for t in types if not trusted_type(t)]
    if refused:
        raise ModelFileError(f"{where} holds type {refused[0]!r}, which semisup does not trust; "
                             "the file was not written by semisup fit, do not use it")
    try:
        stripped = sio.loads(data, trusted=types)
    except Exception as exc:  # noqa: BLE001
        raise ModelFileError(f"{where} cannot be read ({type(exc).__name__}: {exc}); fit the "
                             "model again with semisup fit") from None
    tensors: dict[str, Any] = {}
    wwhere = weights_where or f"{where} (network weights)"
    if weights is not None:
        import torch

        try:
            tensors = torch.load(io.BytesIO(weights), weights_only=True, map_location="cpu")
        except Exception as exc:  # noqa: BLE001
            raise ModelFileError(f"{wwhere}: network weights cannot be read "
                                 f"({type(exc).__name__}); the file was not written by semisup "
                                 "fit or is damaged, fit the model again") from None
        if not isinstance(tensors, dict):
            raise ModelFileError(f"{wwhere}: network weights are not a table of tensors; the "
                                 "file was not written by semisup fit")
    try:
        return _restore(stripped, tensors, set())
    except KeyError as exc:
        raise ModelFileError(f"{wwhere}: network weights lack tensor {exc}; the file is "
                             "damaged, fit the model again") from None
