"""Turn pydantic validation errors into messages a technician can act on."""

from __future__ import annotations

import difflib
import re
import types
from typing import Annotated, Any, Union, get_args, get_origin

from pydantic import BaseModel, ValidationError

from probeflow.config.fields import describe_value
from probeflow.config.yamlfile import KeyPath

__all__ = ["fields_of", "problems_from_validation"]

_SECRET_NAME = re.compile(r"pass|token|secret|credential|(^|_)key$", re.IGNORECASE)
_NO_DATA = object()


def _unwrap(tp: Any) -> Any:
    for _ in range(8):
        origin = get_origin(tp)
        if origin is Annotated:
            tp = get_args(tp)[0]
        elif origin is Union or origin is types.UnionType:
            args = [a for a in get_args(tp) if a is not type(None)]
            tp = args[0] if args else tp
        else:
            return tp
    return tp


def _model_at(model: type[BaseModel], parts: KeyPath) -> type[BaseModel] | None:
    tp: Any = model
    for part in parts:
        tp = _unwrap(tp)
        if isinstance(part, int):
            if get_origin(tp) in (list, tuple) and get_args(tp):
                tp = get_args(tp)[0]
            else:
                return None
        elif isinstance(tp, type) and issubclass(tp, BaseModel) and part in tp.model_fields:
            tp = tp.model_fields[part].annotation
        else:
            return None
    tp = _unwrap(tp)
    return tp if isinstance(tp, type) and issubclass(tp, BaseModel) else None


def fields_of(model: type[BaseModel]) -> set[str]:
    """Key names a model accepts (field names and aliases)."""
    names = set(model.model_fields)
    names.update(f.alias for f in model.model_fields.values() if f.alias)
    return names


def _is_secret(path: KeyPath, sensitive: set[KeyPath]) -> bool:
    if path in sensitive:
        return True
    return any(isinstance(p, str) and _SECRET_NAME.search(p) for p in path)


def _message(err: Any, model: type[BaseModel] | None, loc: KeyPath, secret: bool) -> str:
    kind = err["type"]
    value = err.get("input")
    ctx = err.get("ctx") or {}
    got = "" if secret else f", got {describe_value(value)}"
    if kind == "number_range":
        return f"{ctx['expected']}{got}"
    if kind == "missing":
        return "this key is required but missing"
    if kind == "extra_forbidden":
        parent = _model_at(model, loc[:-1]) if model is not None and loc else None
        if parent is None:
            return "unknown key"
        allowed = sorted(fields_of(parent))
        close = difflib.get_close_matches(str(loc[-1]), allowed, n=1)
        hint = f'; did you mean "{close[0]}"?' if close else ""
        return f"unknown key{hint} (allowed here: {', '.join(allowed)})"
    if kind == "literal_error":
        return f"expected {ctx.get('expected', 'one of the allowed values')}{got}"
    if kind in ("string_type", "string_unicode"):
        return f"expected text{got}"
    if kind in ("bool_type", "bool_parsing"):
        return f"expected true or false{got}"
    if kind in ("list_type", "tuple_type"):
        return f"expected a list{got}"
    if kind in ("dict_type", "model_type", "model_attributes_type"):
        return f"expected a mapping of keys and values{got}"
    if kind in ("int_type", "int_parsing", "int_from_float"):
        return f"expected a whole number{got}"
    if kind in ("float_type", "float_parsing", "finite_number"):
        return f"expected a number{got}"
    if kind == "value_error":
        return str(ctx.get("error", err["msg"]))
    if kind in ("string_too_short", "too_short"):
        return "this must not be empty"
    msg = str(err["msg"])
    return (msg[:1].lower() + msg[1:]) + got


def _user_key_path(loc: tuple[Any, ...], data: Any) -> KeyPath:
    """The parts of a pydantic error location that name the user's keys and
    list items.  Pydantic also puts names of its own in a location (union
    members and validators such as ``function-after[...]``); a part that is not
    a key or index of ``data`` at that point and holds a ``[`` is one of those
    and is left out.  A user's key holding ``[`` (``slope[2]``) is kept."""
    out: list[str | int] = []
    node = data
    for part in loc:
        in_data = (part in node) if isinstance(node, dict) else (
            isinstance(node, list) and isinstance(part, int) and 0 <= part < len(node))
        if in_data:
            node = node[part]
        elif not isinstance(part, int) and "[" in str(part):
            continue
        out.append(part)
    return tuple(out)


def problems_from_validation(exc: ValidationError, prefix: KeyPath,
                             model: type[BaseModel] | None,
                             sensitive: set[KeyPath], data: Any = _NO_DATA) -> list[tuple[KeyPath, str]]:
    """``(key path, message)`` for every error in ``exc`` (paths start with
    ``prefix``).  ``data`` is what was validated: with it, a key of the user's
    that holds ``[`` is told apart from pydantic's own names in a location."""
    out: list[tuple[KeyPath, str]] = []
    for err in exc.errors(include_url=False):
        if data is _NO_DATA:
            loc: KeyPath = tuple(p for p in err["loc"] if isinstance(p, int) or "[" not in str(p))
        else:
            loc = _user_key_path(err["loc"], data)
        full = prefix + loc
        out.append((full, _message(err, model, loc, _is_secret(full, sensitive))))
    return out
