"""Tests of the fits done inside the batch's graph (`schedule.reduce_and_fit`, `schedule.fit_in_task`).

A unit whose runs all take the fast path is fitted on a worker beside the reading; everything else is fitted by the
main process as before. Where a fit runs changes nothing it computes (common practice, no source): the reference
for every check is the main process's own fit of the same series.
"""
from __future__ import annotations

import functools
import shutil

import numpy as np
import pytest

from sensemble.extractor import schedule
from sensemble.extractor.catalog import scan
from sensemble.extractor.errors import ArchiveError
from sensemble.extractor.science import unit_science
from sensemble.extractor.units import plan_units
from tests.faults.conftest import SETTINGS, TARGET, clean, clean_archive, file_of, run_extract  # noqa: F401


def planned(archive):
    units, failures = plan_units(scan(archive, SETTINGS), SETTINGS)
    assert units and not failures
    runs = list({run.label: run for unit in units for run in unit.runs()}.values())
    return units, runs


def same_science(got, want):
    assert got.row.as_dict() == want.row.as_dict()
    assert set(got.groups) == set(want.groups)
    for key, group in want.groups.items():
        for name in group.variables:
            np.testing.assert_array_equal(got.groups[key][name].values, group[name].values)


def test_every_unit_of_fast_path_runs_is_fitted_in_the_graph_as_the_main_process_fits_it(clean_archive):
    units, runs = planned(clean_archive)
    fit = functools.partial(unit_science, settings=SETTINGS)
    reduced = schedule.reduce_and_fit(runs, SETTINGS.required_variables, False, units=units, fit=fit)
    assert set(reduced.fitted) == {unit.key for unit in units}
    assert not reduced.series and not reduced.errors  # no run left for the main process to fit
    assert set(reduced.attrs) == {run.label for run in runs}
    series, errors = schedule.reduce_runs(runs, SETTINGS.required_variables, False)
    assert not errors
    for unit in units:
        same_science(reduced.fitted[unit.key], unit_science(unit, series, SETTINGS))


def test_a_fit_that_raises_comes_back_as_a_value_and_the_others_are_fitted(clean_archive):
    units, runs = planned(clean_archive)

    def fit(unit, series):
        if unit.model == TARGET:
            raise ArchiveError("invented failure", model=unit.model)
        return unit_science(unit, series, SETTINGS)

    reduced = schedule.reduce_and_fit(runs, SETTINGS.required_variables, False, units=units, fit=fit)
    failed = {key for key, value in reduced.fitted.items() if isinstance(value, schedule.FitFailed)}
    assert failed == {unit.key for unit in units if unit.model == TARGET}
    assert "invented failure" in str(reduced.fitted[failed.pop()].error)
    assert len(reduced.fitted) == len(units)


def test_a_unit_with_a_run_the_fast_path_defers_is_left_to_the_main_process(clean_archive, tmp_path):
    # a month without any valid cell: the fast path leaves the run to the reference path, which names the error
    archive = shutil.copytree(clean_archive, tmp_path / "archive")
    import netCDF4

    with netCDF4.Dataset(file_of(archive), "a") as nc:
        nc["tas"][3] = np.nan
    units, runs = planned(archive)
    fit = functools.partial(unit_science, settings=SETTINGS)
    reduced = schedule.reduce_and_fit(runs, SETTINGS.required_variables, False, units=units, fit=fit)
    target = {unit.key for unit in units if unit.model == TARGET}
    assert set(reduced.fitted) == {unit.key for unit in units} - target
    assert any(TARGET in label for label in reduced.errors)  # the broken run, with the reference path's error
    control = next(unit for unit in units if unit.model == TARGET).control.label
    assert control in reduced.series  # its other runs come back as series for the main process


def test_the_batchs_table_is_the_same_whoever_fits(clean, clean_archive, tmp_path, monkeypatch):
    # the whole extraction with every fit in the main process (the graph given nothing to fit)
    real = schedule.reduce_and_fit
    monkeypatch.setattr("sensemble.extractor.pipeline.reduce_and_fit",
                        lambda *args, **kwargs: real(*args, **{**kwargs, "fit": None}))
    main_only = run_extract(clean_archive, tmp_path / "out")
    assert main_only.rows == clean.rows and not main_only.failures


def test_gregory_plots_drawn_where_the_model_is_fitted_are_the_main_processes(clean_archive, tmp_path, monkeypatch):
    # drawn on a worker and written by the main process, or drawn and written by the main process: the same PNG
    in_graph = run_extract(clean_archive, tmp_path / "graph", figures=True)
    real = schedule.reduce_and_fit
    monkeypatch.setattr("sensemble.extractor.pipeline.reduce_and_fit",
                        lambda *args, **kwargs: real(*args, **{**kwargs, "fit": None}))
    in_main = run_extract(clean_archive, tmp_path / "main", figures=True)
    plots = sorted(p.name for p in (tmp_path / "graph" / "figures").glob("gregory_*.png"))
    assert len(plots) == len(in_graph.rows) == len(in_main.rows) == 2
    for name in plots:
        png = (tmp_path / "graph" / "figures" / name).read_bytes()
        assert png.startswith(b"\x89PNG\r\n\x1a\n")  # the PNG signature (PNG specification)
        assert png == (tmp_path / "main" / "figures" / name).read_bytes()
