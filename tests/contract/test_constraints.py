"""Declared parameter constraints: what each accepts, and the one-line phrase it gives for what it refuses.

Ranges and choices are plain set membership (common practice, no source); the closest valid value is the nearest
end of an interval (the next integer for an open integer end) or the nearest option (difflib for strings).
"""
from __future__ import annotations

from numbers import Integral, Real

import pytest

from sensemble.contract.constraints import (
    ConstraintError, Elements, Interval, MemorySize, Options, TimeLimit, YearWindow, check_parameters, problem,
)


@pytest.mark.parametrize("value, ok", [(0, False), (1, True), (10**9, True), (-3, False), (2.5, False),
                                       (True, False), ("3", False)])
def test_integer_interval_open_at_zero(value, ok):
    assert (problem(value, [Interval(Integral, 0, None, closed="neither")]) is None) == ok


@pytest.mark.parametrize("value, ok", [(0.0, False), (1e-12, True), (1.0, True), (1.0000001, False),
                                       (float("nan"), False), (1, True)])
def test_real_interval_open_left_closed_right(value, ok):
    assert (problem(value, [Interval(Real, 0, 1, closed="right")]) is None) == ok


def test_phrases_and_closest_values():
    assert problem(-3, [Interval(Integral, 0, None, closed="left")]) == \
        "must be >= 0, got -3; the closest valid value is 0"
    assert problem(0, [Interval(Integral, 0, None, closed="neither")]) == \
        "must be > 0, got 0; the closest valid value is 1"
    assert problem(1.5, [Interval(Real, 0, 1, closed="right")]) == \
        "must be in (0, 1], got 1.5; the closest valid value is 1"
    # an open real end has no closest value: none is invented
    assert problem(0.0, [Interval(Real, 0, 1, closed="right")]) == "must be in (0, 1], got 0.0"
    assert problem("gausian", [Options("auto", "response", "gaussian", "none")]).endswith(
        'got "gausian"; the closest valid value is "gaussian"')
    assert problem("cubic", [Options("matern52", "rbf")]) == 'must be one of "matern52", "rbf", got "cubic"'
    assert problem(3, [Options(1, 2)]) == "must be one of 1, 2, got 3; the closest valid value is 2"


def test_none_and_types_in_a_list():
    rules = [Interval(Integral, 0, None, closed="neither"), None]
    assert problem(None, rules) is None and problem(4, rules) is None
    assert problem(0, rules).startswith("must be > 0")
    assert problem("x", [str, None]) is None
    assert problem(3, [str, None]) == "must be a string or none, got 3"
    assert problem(True, [int]) == "must be an integer, got true"  # booleans are not numbers here


def test_elements_and_windows():
    rule = [Elements(Interval(Real, 0, None, closed="neither"))]
    assert problem((1.5, 2.0), rule) is None
    assert problem((1.5, -2.0), rule) == "must be > 0, got [1.5, -2.0]"
    assert problem(["tas", "rsdtt"], [Elements(Options("tas", "rsdt"))]).endswith(
        'the closest valid value is ["tas", "rsdt"]')
    assert problem((1, 150), [YearWindow()]) is None
    for bad in ((0, 150), (20, 10), (-5, 10), (1, 2, 3)):
        assert "1 <= start <= end" in problem(bad, [YearWindow()])


def test_memory_sizes_and_time_limits():
    # memory sizes as dask.utils.parse_bytes reads them (reference library)
    assert problem("4GiB", [MemorySize()]) is None and problem("500MB", [MemorySize()]) is None
    assert "memory size" in problem("lots", [MemorySize()])
    for ok in ("02:00:00", "1-12:00:00", "30", "4:30"):
        assert problem(ok, [TimeLimit()]) is None
    assert "time limit" in problem("2 hours", [TimeLimit()])


def test_check_parameters_raises_one_line_naming_the_parameter():
    declared = {"n_restarts_optimizer": [Interval(Integral, 0, None, closed="left")]}
    check_parameters({"n_restarts_optimizer": 2, "undeclared": object()}, declared)
    with pytest.raises(ConstraintError) as caught:
        check_parameters({"n_restarts_optimizer": -3}, declared, owner="PathwayEmulator")
    assert str(caught.value) == ("PathwayEmulator: n_restarts_optimizer must be >= 0, got -3; "
                                 "the closest valid value is 0")
