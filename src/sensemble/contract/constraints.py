"""Declared parameter constraints: allowed types, ranges and choices, each able to say in one phrase what is wrong.

The scikit-learn way: a class declares its rules once, beside its parameters, as

    _parameter_constraints = {"n_restarts_optimizer": [Interval(Integral, 0, None, closed="left")],
                              "smoothing": [Options("auto", "response", "gaussian", "none")],
                              "forcing_file": [str, None]}

and a value is valid when it satisfies any constraint of its list. A constraint is a type (`int`, `float`, `str`,
`bool`, `numbers.Integral`, `numbers.Real`; booleans are not numbers here), `None`, or one of the classes below.
Whoever reads the parameters (an estimator's `fit`, the TOML config reader) calls `problem` or `check_parameters`
and gets one line naming the parameter, what it must be, the value given and, where one exists, the closest valid
value. This module imports nothing of ours.

>>> from numbers import Integral
>>> problem(-3, [Interval(Integral, 0, None, closed="left")])
'must be >= 0, got -3; the closest valid value is 0'
>>> problem("gausian", [Options("auto", "gaussian")])
'must be one of "auto", "gaussian", got "gausian"; the closest valid value is "gaussian"'
>>> problem(None, [str, None]) is None
True
"""
from __future__ import annotations

import datetime
import difflib
import json
import math
import re
from numbers import Integral, Real

__all__ = [
    "Interval", "Options", "Elements", "YearWindow", "MemorySize", "TimeLimit",
    "ConstraintError", "problem", "check_parameters", "format_value",
]


class ConstraintError(ValueError):
    """A parameter value outside its declared constraints (one line)."""


def format_value(value) -> str:
    """A value as a TOML literal would spell it (`"rbf"`, `true`, `[1, 150]`), for messages."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str) or type(value).__name__.endswith("Path"):
        return json.dumps(str(value), ensure_ascii=False)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(format_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {format_value(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (datetime.date, datetime.time)):
        return value.isoformat()
    return repr(value)


def _number(value) -> str:
    return str(int(value)) if float(value).is_integer() else repr(float(value))


def _is_number(value, kind=Real) -> bool:
    return isinstance(value, kind) and not isinstance(value, bool)


class Interval:
    """Numbers of `kind` (`Integral` or `Real`) between `low` and `high` (None: unbounded on that side).

    `closed` says which ends belong to the interval: "left", "right", "both" or "neither".
    """

    def __init__(self, kind, low, high, *, closed: str = "left"):
        if closed not in ("left", "right", "both", "neither"):
            raise ValueError(f"closed must be left, right, both or neither, got {closed!r}")
        self.kind, self.low, self.high, self.closed = kind, low, high, closed

    def __repr__(self) -> str:
        return f"Interval({self.kind.__name__}, {self.low}, {self.high}, closed={self.closed!r})"

    def applies_to(self, value) -> bool:
        return _is_number(value)

    def is_satisfied_by(self, value) -> bool:
        if not _is_number(value, self.kind) or (isinstance(value, float) and math.isnan(value)):
            return False
        low_in = self.closed in ("left", "both")
        high_in = self.closed in ("right", "both")
        if self.low is not None and (value < self.low if low_in else value <= self.low):
            return False
        return self.high is None or (value <= self.high if high_in else value < self.high)

    def describe(self) -> str:
        low_in = self.closed in ("left", "both")
        if self.high is None and self.low is not None:
            return f"must be {'>=' if low_in else '>'} {_number(self.low)}"
        if self.low is None and self.high is not None:
            return f"must be {'<=' if self.closed in ('right', 'both') else '<'} {_number(self.high)}"
        if self.low is None:
            return "must be an integer" if self.kind is Integral else "must be a number"
        left = "[" if low_in else "("
        right = "]" if self.closed in ("right", "both") else ")"
        return f"must be in {left}{_number(self.low)}, {_number(self.high)}{right}"

    def closest(self, value):
        """The valid value nearest to `value` where there is one (integers, or a closed end); else None."""
        if not _is_number(value) or (isinstance(value, float) and math.isnan(value)):
            return None
        step = 1 if self.kind is Integral else 0
        if self.low is not None and value <= self.low:
            if self.closed in ("left", "both"):
                return self.low
            return self.low + step if step else None
        if self.high is not None and value >= self.high:
            if self.closed in ("right", "both"):
                return self.high
            return self.high - step if step else None
        if self.kind is Integral and not float(value).is_integer():
            return round(value)
        return None


class Options:
    """One of a fixed set of values (strings or numbers)."""

    def __init__(self, *values):
        self.values = tuple(values)

    def __repr__(self) -> str:
        return f"Options{self.values!r}"

    def applies_to(self, value) -> bool:
        return any(type(value) is type(v) or (_is_number(value) and _is_number(v)) for v in self.values)

    def is_satisfied_by(self, value) -> bool:
        return any(value == v and type(value) is type(v) for v in self.values)

    def describe(self) -> str:
        return f"must be one of {', '.join(format_value(v) for v in self.values)}"

    def closest(self, value):
        if isinstance(value, str):
            texts = [v for v in self.values if isinstance(v, str)]
            close = difflib.get_close_matches(value, texts, n=1, cutoff=0.5)
            if not close:  # case or spacing slips: "RBF", "Matern52"
                close = difflib.get_close_matches(value.lower().strip(), [t.lower() for t in texts], n=1, cutoff=0.5)
                close = [texts[[t.lower() for t in texts].index(close[0])]] if close else []
            return close[0] if close else None
        numbers = [v for v in self.values if _is_number(v)]
        if _is_number(value) and numbers:
            return min(numbers, key=lambda v: abs(v - value))
        return None


class Elements:
    """A sequence (TOML array) whose every element satisfies `constraint`."""

    def __init__(self, constraint):
        self.constraint = constraint

    def __repr__(self) -> str:
        return f"Elements({self.constraint!r})"

    def applies_to(self, value) -> bool:
        return isinstance(value, (list, tuple))

    def is_satisfied_by(self, value) -> bool:
        return isinstance(value, (list, tuple)) and all(_satisfies(self.constraint, v) for v in value)

    def describe(self) -> str:
        return _describe_one(self.constraint)

    def closest(self, value):
        """Each bad element replaced by its closest valid value, where every one has one."""
        if not isinstance(value, (list, tuple)) or not hasattr(self.constraint, "closest"):
            return None
        fixed = [v if _satisfies(self.constraint, v) else self.constraint.closest(v) for v in value]
        return None if any(v is None for v in fixed) else type(value)(fixed)


class YearWindow:
    """A window of years [start, end], both ends inclusive, counted from 1 at the branch."""

    def applies_to(self, value) -> bool:
        return isinstance(value, (list, tuple))

    def is_satisfied_by(self, value) -> bool:
        return (isinstance(value, (list, tuple)) and len(value) == 2 and all(_is_number(v, Integral) for v in value)
                and 1 <= value[0] <= value[1])

    def describe(self) -> str:
        return "must be [start, end] with 1 <= start <= end (years count from 1 at the branch)"

    def closest(self, value):
        return None


class MemorySize:
    """A memory size dask understands ("4GiB", "500MB")."""

    def applies_to(self, value) -> bool:
        return isinstance(value, str)

    def is_satisfied_by(self, value) -> bool:
        from dask.utils import parse_bytes  # dask is a core dependency; imported only when a size is checked

        try:
            return isinstance(value, str) and parse_bytes(value) > 0
        except (ValueError, TypeError):
            return False

    def describe(self) -> str:
        return 'must be a memory size such as "4GiB" or "500MB"'

    def closest(self, value):
        return None


class TimeLimit:
    """A job time limit as batch queues write it: [days-]hours[:minutes[:seconds]]."""

    def applies_to(self, value) -> bool:
        return isinstance(value, str)

    def is_satisfied_by(self, value) -> bool:
        return isinstance(value, str) and re.fullmatch(r"(\d+-)?\d+(:[0-5]\d){0,2}", value) is not None

    def describe(self) -> str:
        return 'must be a time limit such as "02:00:00" (hours:minutes:seconds)'

    def closest(self, value):
        return None


_TYPE_NAMES = {bool: "true or false", int: "an integer", Integral: "an integer", float: "a number",
               Real: "a number", str: "a string", type(None): "none"}


def _satisfies(constraint, value) -> bool:
    if constraint is None:
        return value is None
    if isinstance(constraint, type):
        if constraint in (int, float, Integral, Real):
            return _is_number(value, Integral if constraint in (int, Integral) else Real)
        return isinstance(value, constraint)
    return constraint.is_satisfied_by(value)


def _describe_one(constraint) -> str:
    if constraint is None or isinstance(constraint, type):
        return "must be " + _TYPE_NAMES.get(constraint if constraint is not None else type(None),
                                            getattr(constraint, "__name__", str(constraint)))
    return constraint.describe()


def problem(value, constraints) -> str | None:
    """None when `value` satisfies one of `constraints`; else the phrase for a message.

    The phrase reads "must be …, got <value>" and ends with "; the closest valid value is …" where one exists,
    e.g. ``must be an integer >= 0, got -3; the closest valid value is 0``.
    """
    constraints = list(constraints)
    if any(_satisfies(c, value) for c in constraints):
        return None
    fitting = [c for c in constraints if c is not None and not isinstance(c, type) and c.applies_to(value)]
    if fitting:
        rule = fitting[0]
        text = f"{rule.describe()}, got {format_value(value)}"
        closest = rule.closest(value)
        if closest is not None:
            text += f"; the closest valid value is {format_value(closest)}"
        return text
    phrases = [_describe_one(c).removeprefix("must be ") for c in constraints]
    return f"must be {' or '.join(phrases)}, got {format_value(value)}"


def check_parameters(values: dict, declared: dict, *, owner: str = "") -> None:
    """Raise `ConstraintError` (one line) for the first value of `values` outside its `declared` constraints.

    Names not declared are not checked. `owner` prefixes the message (e.g. the class name).
    """
    for name, value in values.items():
        if name not in declared:
            continue
        phrase = problem(value, declared[name])
        if phrase:
            prefix = f"{owner}: " if owner else ""
            raise ConstraintError(f"{prefix}{name} {phrase}")
