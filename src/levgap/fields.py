"""Option values checked against their annotations: one rule for every option object.

``config.InputOptions``, ``Units`` and ``ModelSpec`` call :func:`check_fields` first in their
``__post_init__``, so a field added to one of them is checked by its type without new code; the
class then checks ranges and choices.
"""

from __future__ import annotations

import dataclasses
import functools
import math
import types
import typing
from typing import Any

from levgap.errors import ConfigError


def check_fields(obj: Any) -> None:
    """Check every field of an option object against its annotation, where it is built.

    Lists become tuples and whole numbers become floats where the annotation asks for them;
    anything else that does not fit raises one line naming the table and key. Per-field rules
    (ranges, choices) follow in each class's ``__post_init__``.

    Raises
    ------
    ConfigError
        ``[table] key must be <kind>; got <value>.``
    """
    table = getattr(type(obj), "TABLE", type(obj).__name__)
    for name, hint in _hints(type(obj)).items():
        value = getattr(obj, name)
        ok, conformed = _conform(value, hint)
        if not ok:
            raise ConfigError(f"[{table}] {name} must be {_describe(hint)}; got {value!r}.")
        if conformed is not value:
            object.__setattr__(obj, name, conformed)


@functools.cache
def _hints(kind: type) -> dict[str, Any]:
    hints = typing.get_type_hints(kind)
    return {f.name: hints[f.name] for f in dataclasses.fields(kind)}


def _conform(v: Any, hint: Any) -> tuple[bool, Any]:
    """Whether ``v`` fits ``hint``, and the value as stored (tuples, floats)."""
    origin, args = typing.get_origin(hint), typing.get_args(hint)
    if hint is Any:
        return True, v
    if hint is type(None):
        return v is None, v
    if hint is bool:
        return isinstance(v, bool), v
    if hint is int:
        return isinstance(v, int) and not isinstance(v, bool), v
    if hint is float:
        ok = isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
        return ok, float(v) if ok else v
    if hint is str:
        return isinstance(v, str), v
    if origin in (types.UnionType, typing.Union):
        for a in args:
            ok, out = _conform(v, a)
            if ok:
                return True, out
        return False, v
    if origin is typing.Literal:
        return v in args, v
    if origin is tuple:
        if not isinstance(v, list | tuple):
            return False, v
        items = args[:1] * len(v) if len(args) == 2 and args[1] is Ellipsis else args
        if len(items) != len(v):
            return False, v
        out = [_conform(x, a) for x, a in zip(v, items, strict=True)]
        return all(ok for ok, _ in out), tuple(x for _, x in out)
    if origin is dict:
        if not isinstance(v, dict):
            return False, v
        ok = all(_conform(k, args[0])[0] and _conform(x, args[1])[0] for k, x in v.items())
        return ok, v
    return True, v  # a type this check does not know: the class's own checks decide


def _describe(hint: Any) -> str:
    origin, args = typing.get_origin(hint), typing.get_args(hint)
    simple = {bool: "true or false", int: "a whole number", float: "a number", str: "a text",
              type(None): "absent"}
    if hint in simple:
        return simple[hint]
    if origin in (types.UnionType, typing.Union):
        return " or ".join(_describe(a) for a in args)
    if origin is typing.Literal:
        return "one of " + ", ".join(repr(a) for a in args)
    if origin is tuple:
        if len(args) == 2 and args[1] is Ellipsis:
            return f"a list of {_plural(args[0])}"
        if len(set(args)) == 1:
            count = {2: "two", 3: "three"}.get(len(args), str(len(args)))
            return f"a list of {count} {_plural(args[0])}"
        return "a list of " + ", ".join(_describe(a) for a in args)
    if origin is dict:
        return f"a table of {_plural(args[1])}"
    return str(hint)


def _plural(hint: Any) -> str:
    return {bool: "true/false values", int: "whole numbers", float: "numbers",
            str: "texts"}.get(hint, _describe(hint))
