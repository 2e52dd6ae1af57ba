"""TOML values checked against a settings field's annotated type, strictly: no string → number, no float → int.

`coerce(value, hint)` returns the value as the field holds it (arrays → tuples, integers → floats where a float
is declared) or raises `Mismatch`; `describe(hint)` and `kind_of(value)` word the message.
"""
from __future__ import annotations

import datetime
import types
import typing
from pathlib import Path

from sensemble.contract.constraints import format_value


class Mismatch(Exception):
    """The value does not have the annotated type."""


def _union_args(hint) -> tuple | None:
    if typing.get_origin(hint) in (typing.Union, types.UnionType):
        return typing.get_args(hint)
    return None


def describe(hint) -> str:
    """The annotated type in words: "an integer", "an array of 2 integers", "a string or none"…"""
    args = _union_args(hint)
    if args is not None:
        return " or ".join(describe(a) for a in args if a is not type(None))
    if typing.get_origin(hint) is typing.Literal:
        return "one of " + ", ".join(format_value(v) for v in typing.get_args(hint))
    simple = {bool: "true or false", int: "an integer", float: "a number", str: "a string", Path: "a path (string)"}
    if hint in simple:
        return simple[hint]
    if hint is dict or typing.get_origin(hint) is dict:
        return "a table"
    if typing.get_origin(hint) is tuple:
        args = typing.get_args(hint)
        if len(args) == 2 and args[1] is Ellipsis:
            element = describe(args[0])
            plural = {"an integer": "integers", "a number": "numbers", "a string": "strings",
                      "a table": "tables", "true or false": "booleans"}.get(element, element)
            return "an array of tables" if plural == "tables" else f"an array of {plural}"
        if all(a is int for a in args):
            return f"an array of {len(args)} integers"
        return f"an array of {len(args)} values"
    return getattr(hint, "__name__", str(hint))


def kind_of(value) -> str:
    """What a TOML value is, in words: "a string", "an array", "a date"…"""
    for kind, words in ((bool, "a boolean"), (int, "an integer"), (float, "a number"), (str, "a string"),
                        ((list, tuple), "an array"), (dict, "a table")):
        if isinstance(value, kind):
            return words
    if isinstance(value, (datetime.date, datetime.time)):
        return f"a {type(value).__name__}"
    return type(value).__name__


def freeze(value):
    """Nested TOML values made immutable and comparable: arrays → tuples, tables → dicts."""
    if isinstance(value, (list, tuple)):
        return tuple(freeze(v) for v in value)
    if isinstance(value, dict):
        return {str(k): freeze(v) for k, v in value.items()}
    if isinstance(value, Path):
        return str(value)
    return value


def coerce(value, hint):
    """`value` as the annotated type, or `Mismatch`."""
    args = _union_args(hint)
    if args is not None:
        if value is None and type(None) in args:
            return None
        for arg in args:
            if arg is type(None):
                continue
            try:
                return coerce(value, arg)
            except Mismatch:
                pass
        raise Mismatch
    if typing.get_origin(hint) is typing.Literal:
        if any(value == allowed and type(value) is type(allowed) for allowed in typing.get_args(hint)):
            return value
        raise Mismatch
    number = isinstance(value, (int, float)) and not isinstance(value, bool)
    if hint is bool and isinstance(value, bool) or hint is str and isinstance(value, str):
        return value
    if hint is int and number and isinstance(value, int):
        return value
    if hint is float and number:
        return float(value)
    if hint is Path and isinstance(value, (str, Path)) and str(value):
        return Path(value)
    if (hint is dict or typing.get_origin(hint) is dict) and isinstance(value, dict):
        return freeze(value)
    if typing.get_origin(hint) is tuple and isinstance(value, (list, tuple)):
        args = typing.get_args(hint)
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(coerce(v, args[0]) for v in value)
        if len(value) == len(args):
            return tuple(coerce(v, a) for v, a in zip(value, args))
        raise Mismatch
    if hint is typing.Any or hint is object:
        return freeze(value)
    if hint not in (bool, int, float, str, Path) and isinstance(hint, type) and isinstance(value, hint):
        return value
    raise Mismatch
