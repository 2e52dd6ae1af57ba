"""Faults of issue 6, injected one at a time into a copy of a good archive (tests/faults/conftest.py).

Each test asserts the whole outcome: the broken run fails (or is flagged) with a one-line message that
names the file, the model and the problem and says what to do; the other model's row is exactly that of
the clean extraction; no temporary file is left behind. Expected values follow from how the archive is
built (exact Gregory line after drift removal, Gregory et al. 2004; common practice, no source).
"""
from __future__ import annotations

import dataclasses

import netCDF4
import numpy as np
import pytest

from tests.faults.conftest import (
    F4X,
    FEEDBACK,
    MODELS,
    SETTINGS,
    TARGET,
    assert_others_unchanged,
    corrupt_data,
    file_of,
    files_of,
    read_file,
    rewrite,
    rows_by_model,
    run_extract,
    set_attrs,
    the_failure,
    write_model,
)
from tests.extractor.conftest import write_monthly_file

FLUXES = ("tas", "rsdt", "rsut", "rlut")


def extract_broken(archive, tmp_path, settings=SETTINGS):
    return run_extract(archive, tmp_path / "out", settings)


def assert_fails(result, clean, path, *fragments, what="abrupt-4xCO2"):
    """The target's run ``what`` failed with a message naming ``path`` and holding ``fragments``."""
    failure = the_failure(result)
    assert failure.what == what
    assert f"file {path}" in failure.message, failure.message
    for fragment in fragments:
        assert fragment in failure.message, failure.message
    assert TARGET not in rows_by_model(result)
    assert_others_unchanged(result, clean)
    return failure


def assert_flagged(result, clean, flag):
    """The target's row is there, carries ``flag``, and no failure was recorded."""
    assert result.failures == []
    row = rows_by_model(result)[TARGET]
    assert flag in row["flags"].split(";")
    assert_others_unchanged(result, clean)
    return row


def same_numbers(row, reference, abs_tol=1e-6):
    for key in ("erf_4x", "feedback", "ecs_eff", "n_years"):
        assert row[key] == pytest.approx(reference[key], abs=abs_tol), key


# 1 ------------------------------------------------------------------------------- unreadable files


def test_truncated_file_fails_its_run(clean, broken_copy, tmp_path):
    path = file_of(broken_copy)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    result = extract_broken(broken_copy, tmp_path)
    failure = assert_fails(result, clean, path, "cannot be read", "truncated or not NetCDF: replace it")
    assert failure.message.count(str(path)) == 1  # the path once, not repeated from the library's error


def test_damaged_values_found_at_compute_time_name_the_file(clean, broken_copy, tmp_path):
    # the header is intact, so the file opens; only reading its values fails (HDF5 checksum)
    path = corrupt_data(file_of(broken_copy, variable="rsut"))
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "values of rsut cannot be read", "the file is damaged: replace it")


# 2 ------------------------------------------------------------------------------- missing variable


def test_missing_required_variable_fails_its_run(clean, broken_copy, tmp_path):
    for path in files_of(broken_copy, variable="rlut"):
        path.unlink()
    folder = file_of(broken_copy, variable="tas").parent
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, folder, "no files of required variable(s) rlut",
                 "add the missing variables to the archive or leave this run out")
    assert any("abrupt-4xCO2 has no rlut" in p for p in result.problems)


# 3 ------------------------------------------------------------------------------- units


def test_celsius_is_converted_to_kelvin(clean, broken_copy, tmp_path):
    with netCDF4.Dataset(file_of(broken_copy), "a") as nc:
        nc["tas"][:] = nc["tas"][:] - 273.15  # CF/UDUNITS: K = degC + 273.15
        nc["tas"].units = "degC"
    result = extract_broken(broken_copy, tmp_path)
    row = rows_by_model(result)[TARGET]
    assert result.failures == [] and row["flags"] == rows_by_model(clean)[TARGET]["flags"]
    same_numbers(row, rows_by_model(clean)[TARGET], abs_tol=1e-4)  # float32 storage of both
    assert_others_unchanged(result, clean)


@pytest.mark.parametrize("units, fragment, hint", [
    ("W", "rlut units 'W' are not W m-2", "give fluxes in W m-2 (fix the units attribute)"),
    (None, "rlut has no units attribute", "add CF units; units are never guessed"),
])
def test_wrong_or_missing_flux_units_are_refused(clean, broken_copy, tmp_path, units, fragment, hint):
    path = file_of(broken_copy, variable="rlut")
    set_attrs(path, "rlut", units=units)
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, fragment, hint)


# 4 ------------------------------------------------------------------------------- missing values


def test_nan_and_fill_values_in_some_cells_drop_out(clean, broken_copy, tmp_path):
    # the fields are uniform over the grid, so any subset of cells has the same mean: the result must not move
    with netCDF4.Dataset(file_of(broken_copy, variable="rlut"), "a") as nc:
        rlut = nc["rlut"]
        rlut[3, 1, 2] = np.ma.masked  # written as the _FillValue
        rlut[7, 0, :] = np.ma.masked
        rlut.set_auto_mask(False)
        rlut[100, 2, 5] = np.nan  # a NaN that is not the fill value
        rlut[200, :, 3] = np.nan
    result = extract_broken(broken_copy, tmp_path)
    row = rows_by_model(result)[TARGET]
    assert result.failures == []
    same_numbers(row, rows_by_model(clean)[TARGET])
    assert_others_unchanged(result, clean)


def test_month_without_any_valid_cell_fails_naming_file_and_month(clean, broken_copy, tmp_path):
    path = file_of(broken_copy, variable="rlut")
    with netCDF4.Dataset(path, "a") as nc:
        nc["rlut"][30, :, :] = np.ma.masked  # July of the third year
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "rlut has no valid value in any grid cell in 1 month(s), the first 1852-07",
                 "replace the file with a complete one, or leave this run out")


# 5–7 ----------------------------------------------------------------------------- time axis


def test_gap_between_files(clean, broken_copy, tmp_path):
    first, second = rewrite(file_of(broken_copy), [range(0, 240), range(252, 480)])
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, second, f"gap of 12 month(s) after {first.name}", "supply the missing file")


def test_overlapping_files(clean, broken_copy, tmp_path):
    first, second = rewrite(file_of(broken_copy), [range(0, 240), range(228, 480)])
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, second, f"overlaps {first.name} by 12 month(s)",
                 "remove the duplicate or overlapping file")


def test_duplicated_time_step(clean, broken_copy, tmp_path):
    (path,) = rewrite(file_of(broken_copy), [[*range(0, 100), 99, *range(100, 479)]])
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "duplicated time step 1858-04-16",
                 "monthly fields with one step per month, in order, are needed")


def test_non_monotonic_time(clean, broken_copy, tmp_path):
    (path,) = rewrite(file_of(broken_copy), [[*range(0, 100), 101, 100, *range(102, 480)]])
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "time is not monotonic (1858-06-16",
                 "monthly fields with one step per month, in order, are needed")


# 8 ------------------------------------------------------------------------------- calendar


def test_unknown_calendar_is_refused(clean, broken_copy, tmp_path):
    path = file_of(broken_copy)
    set_attrs(path, "time", calendar="lunar")
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "unknown calendar 'lunar'", "use a CF calendar name (360_day")


def test_calendar_missing_from_every_file_of_a_run_is_read_as_standard_and_flagged(clean, broken_copy, tmp_path):
    # CF conventions §4.4.1: no calendar attribute means the standard calendar
    for variable in FLUXES:
        set_attrs(file_of(broken_copy, variable=variable), "time", calendar=None)
    result = extract_broken(broken_copy, tmp_path)
    row = assert_flagged(result, clean, "calendar_defaulted")
    same_numbers(row, rows_by_model(clean)[TARGET])  # values constant within a year: any calendar gives them


def test_calendar_missing_from_one_file_names_that_file(clean, broken_copy, tmp_path):
    path = file_of(broken_copy)
    set_attrs(path, "time", calendar=None)
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "time has no calendar attribute (read as CF's default 'standard') but rsdt_",
                 "uses 'noleap' — add calendar = 'noleap' to the time variable of this file")


# 9 ------------------------------------------------------------------------------- short control


def shorten_control(archive, years):
    return [rewrite(file_of(archive, experiment="piControl", variable=v), [range(0, years * 12)])[0] for v in FLUXES]


def test_control_shorter_than_experiment_is_flagged(clean, broken_copy, tmp_path):
    shorten_control(broken_copy, 45)  # branch at year 10: 35 control years for a 40-year experiment
    result = extract_broken(broken_copy, tmp_path)
    row = assert_flagged(result, clean, "control_short")
    # the drift is linear, so fitting it over the 35 years that exist still removes it exactly
    same_numbers(row, rows_by_model(clean)[TARGET], abs_tol=1e-4)


def test_control_shorter_than_30_years_fails(clean, broken_copy, tmp_path):
    (tas, *_) = shorten_control(broken_copy, 25)
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, tas, "for abrupt-4xCO2: the control", "has 15 years from branch year 1860",
                 "at least 30 are needed for the drift fit",
                 "supply a longer control run, or lower [extraction] min_control_years (now 30) in the config",
                 what="piControl")


# 10 ------------------------------------------------------------------------------ branch information


def test_missing_branch_time_falls_back_to_control_start_with_flag(clean, broken_copy, tmp_path):
    for variable in FLUXES:
        set_attrs(file_of(broken_copy, variable=variable), branch_time_in_parent=None)
    result = extract_broken(broken_copy, tmp_path)
    row = assert_flagged(result, clean, "branch_assumed")
    assert row["ecs_eff"] is not None and row["n_years"] == 40


@pytest.mark.parametrize("units, fragment", [
    ("days since 2400-01-01", "branches in control year 2410"),
    ("fortnights after lunch", "cannot decode branch_time_in_parent=3650.0 in 'fortnights after lunch'"),
])
def test_inconsistent_parent_time_units_fail(clean, broken_copy, tmp_path, units, fragment):
    for variable in FLUXES:
        set_attrs(file_of(broken_copy, variable=variable), parent_time_units=units)
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, file_of(broken_copy), fragment,
                 "fix branch_time_in_parent and parent_time_units in the global attributes of the abrupt-4xCO2 files")


# 11 ------------------------------------------------------------------------------ grids


def test_grids_differing_between_variables_of_a_run(clean, broken_copy, tmp_path):
    path = file_of(broken_copy, variable="rlut")
    _, data, attrs, _ = read_file(path)
    path.unlink()
    write_monthly_file(path, "rlut", data[:, :3, :], nyears=40, attrs=attrs, nlat=3)  # 3 latitudes, not 4
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, path, "grid of rlut differs from that of tas",
                 "regrid or use the variables of one grid_label")


# 12 ------------------------------------------------------------------------------ identity


def test_attributes_disagreeing_with_the_path_are_flagged(clean, broken_copy, tmp_path):
    # issue 11: the DRS path names the run (the files' attributes are reported); the disagreement is a flag
    for variable in FLUXES:
        set_attrs(file_of(broken_copy, variable=variable), source_id="CEDAR-9", experiment_id="abrupt-5xCO2")
    result = extract_broken(broken_copy, tmp_path)
    row = assert_flagged(result, clean, "attribute_mismatch")
    same_numbers(row, rows_by_model(clean)[TARGET])


# 13 ------------------------------------------------------------------------------ short abrupt run


def test_abrupt_run_shorter_than_fit_window(clean, broken_copy, tmp_path):
    first = [rewrite(file_of(broken_copy, variable=v), [range(0, 30 * 12)])[0] for v in FLUXES][0]
    result = extract_broken(broken_copy, tmp_path)
    assert_fails(result, clean, first, "Gregory fit needs years 1-40 (40 years)", "the run has years 1-30, 30 years",
                 "set [extraction] fit_years (now 1-40) in the config to what the run has, or supply a longer run")


def test_window_past_a_short_run_in_the_config_names_its_key(clean, clean_archive, tmp_path):
    settings = dataclasses.replace(SETTINGS, early_years=(1, 50))  # early segment longer than the run
    result = run_extract(clean_archive, tmp_path / "out", settings)
    assert result.rows == [] and sorted(f.model for f in result.failures) == sorted(MODELS)
    for failure in result.failures:
        assert failure.message.startswith(f"model {failure.model} member r1i1p1f1 abrupt-4xCO2: file ")
        assert "needs years 1-50" in failure.message
        assert "set [extraction] early_years (now 1-50) and [extraction] late_years (now 11-40)" in failure.message


# 14 ------------------------------------------------------------------------------ non-physical run


@pytest.mark.parametrize("feedback", [0.3, -0.15], ids=["positive_feedback", "ecs_above_20K"])
def test_nonphysical_run_is_flagged_and_reported(clean, broken_copy, tmp_path, feedback):
    for path in list(broken_copy.rglob(f"*_{TARGET}_*.nc")):
        path.unlink()
    write_model(broken_copy, TARGET, feedback=feedback)
    result = extract_broken(broken_copy, tmp_path)
    row = assert_flagged(result, clean, "nonphysical")
    # values are reported, not hidden: ecs_eff = -F / (2 λ) (Gregory et al. 2004): -11.7 K or 23.3 K here
    assert row["feedback"] == pytest.approx(feedback, abs=1e-4)
    assert row["ecs_eff"] == pytest.approx(-F4X / (2 * feedback), rel=1e-4)
    assert not 0 < row["ecs_eff"] <= SETTINGS.ecs_max
    assert FEEDBACK < 0  # the clean models are stable


# 15 ------------------------------------------------------------------------------ nothing to extract


def test_empty_archive_is_a_failure_not_a_crash(tmp_path):
    (tmp_path / "archive").mkdir()
    result = run_extract(tmp_path / "archive", tmp_path / "out")
    assert not result.ok and result.rows == []
    (failure,) = result.failures
    assert failure.what == "archive" and "\n" not in failure.message
    assert "holds no monthly files of tas" in failure.message
    assert "nothing to extract — check the path" in failure.message
    assert failure.message in (tmp_path / "out" / "report.md").read_text()
    assert (tmp_path / "out" / "sensitivity.csv").read_text().count("\n") == 1  # the header only


def test_empty_archive_gives_exit_status_1_on_the_command_line(tmp_path, capsys):
    from sensemble.cli import main

    (tmp_path / "archive").mkdir()
    assert main(["extract", str(tmp_path / "archive"), "--out", str(tmp_path / "out")]) == 1
    captured = capsys.readouterr()
    assert "nothing to extract" in captured.out + captured.err


def test_archive_without_matching_runs(clean_archive, broken_copy, tmp_path):
    result = run_extract(clean_archive, tmp_path / "out", dataclasses.replace(SETTINGS, include_models=("OAK-7",)))
    (failure,) = result.failures
    assert not result.ok
    assert "of the models OAK-7" in failure.message
    assert "include_models / exclude_models in the config" in failure.message
    roles = run_extract(clean_archive, tmp_path / "out2", dataclasses.replace(SETTINGS, control="control-1950"))
    assert not roles.ok and roles.rows == [] and sorted(f.model for f in roles.failures) == sorted(MODELS)
    for failure in roles.failures:
        assert "no control-1950 run — add the control run or map the control role in the config" in failure.message
    for path in broken_copy.rglob("*.nc"):
        if "_piControl_" not in path.name:
            path.unlink()
    only_controls = run_extract(broken_copy, tmp_path / "out3")
    (failure,) = only_controls.failures
    assert "has runs of piControl but none besides a control run of 'piControl'" in failure.message
    assert "map the experiment roles" in failure.message


def test_missing_archive_folder(tmp_path):
    result = run_extract(tmp_path / "nowhere", tmp_path / "out")
    (failure,) = result.failures
    assert "is not a folder" in failure.message and "give the folder that holds the archive" in failure.message
