"""Tests of extractor/runs.py: opening, checking and joining a run's files; lazy global means."""
import hashlib

import dask
import numpy as np
import pytest

from sensemble.extractor.annual import annual_means
from sensemble.extractor.catalog import RunFiles, scan
from sensemble.extractor.errors import ArchiveError
from sensemble.extractor.runs import global_mean_series, open_run

MODEL = "TESTMODEL-1"
MEMBER = "r1i1p1f1"


def the_run(root, experiment="piControl"):
    catalog = scan(root)
    run = catalog.get(MODEL, MEMBER, experiment)
    assert run is not None, catalog.problems
    return run


def single(tmp_path, cmip, var="tas", name=None, **kwargs):
    """A run of one variable in one file, written with `write_monthly_file` options."""
    path = tmp_path / (name or cmip.cmip_file_name(var, MODEL, "piControl", MEMBER, time_range="185001-185112"))
    kwargs.setdefault("attrs", {"source_id": MODEL, "experiment_id": "piControl", "variant_label": MEMBER})
    cmip.write_monthly_file(path, var, **kwargs)
    return RunFiles(MODEL, MEMBER, "piControl", {var: [path]}, grid_label="gn")


def test_series_of_a_run_is_lazy_with_contract_attributes(tmp_path, cmip):
    attrs = {"parent_experiment_id": "piControl", "branch_time_in_parent": 3650.0, "parent_time_units": "days since 1850-01-01"}
    cmip.write_run(tmp_path, MODEL, "abrupt-4xCO2", nyears=2, attrs=attrs, areacella=True)
    run = the_run(tmp_path, "abrupt-4xCO2")
    series = global_mean_series(run)
    assert all(dask.is_dask_collection(series[v]) for v in ("tas", "rsdt", "rsut", "rlut"))
    (series,) = dask.compute(series)
    assert series.sizes["time"] == 24
    for var in ("tas", "rsdt", "rsut", "rlut"):
        assert series[var].dtype == np.float64
    np.testing.assert_allclose(series.tas.values, 287.0)
    np.testing.assert_allclose(series.rlut.values, 239.0)
    a = series.attrs
    assert (a["model"], a["member"], a["experiment_id"]) == (MODEL, MEMBER, "abrupt-4xCO2")
    assert a["calendar"] == "noleap"
    assert a["time_units"].startswith("days since 1850-01-01")
    assert a["parent_experiment_id"] == "piControl"
    assert a["branch_time_in_parent"] == 3650.0
    assert a["parent_time_units"] == "days since 1850-01-01"
    assert a["flags"] == ""
    assert a["weights"] == "areacella"
    assert len(a["files"].split(";")) == 5
    assert series.tas.attrs["units"] == "K" and series.rlut.attrs["units"] == "W m-2"


def test_area_weighted_mean_of_a_latitude_dependent_field(tmp_path, cmip):
    # ∫ sin²φ dA / ∫ dA = 1/3 (analytic); on 4 bands of a 4×8 grid the cell-centre values give
    # Σ A_j sin²φ_j / Σ A_j computed here by hand with the spherical-zone areas (handbook formula)
    run = single(tmp_path, cmip, "rlut", values=lambda lat, lon, k: 200.0 + 100.0 * np.sin(np.deg2rad(lat)) ** 2)
    series = global_mean_series(run, required=()).compute()
    edges = np.deg2rad(np.linspace(-90, 90, 5))
    zone = np.diff(np.sin(edges))
    centres = 0.5 * (edges[:-1] + edges[1:])
    expected = 200.0 + 100.0 * np.sum(zone * np.sin(centres) ** 2) / np.sum(zone)
    np.testing.assert_allclose(series.rlut.values, expected, rtol=1e-6)
    assert series.attrs["weights"] == "lat_lon_bounds"


def test_cos_weights_used_and_flagged_without_bounds(tmp_path, cmip):
    run = single(tmp_path, cmip, "tas", lat_lon_bounds=False)
    series = global_mean_series(run, required=())
    assert series.attrs["flags"] == "cos_weights"
    np.testing.assert_allclose(series.tas.values, 287.0, rtol=1e-7)


def test_multiple_files_per_variable_are_joined(tmp_path, cmip):
    # the value of each month is its index since the start, so the join order is visible
    cmip.write_run(tmp_path, MODEL, "piControl", nyears=3, files_per_variable=3)
    run = the_run(tmp_path)
    assert len(run.files["tas"]) == 3
    ds = open_run(run, required=())
    assert ds.sizes["time"] == 36
    years = [t.year for t in ds.time.values]
    assert years[0] == 1850 and years[-1] == 1852
    assert ds.time_bnds.shape == (36, 2)


def test_join_keeps_values_in_time_order(tmp_path, cmip):
    paths = []
    for i, year in enumerate((1851, 1850)):  # written out of order on purpose
        path = tmp_path / cmip.cmip_file_name("tas", MODEL, "piControl", MEMBER, time_range=f"{year}01-{year}12")
        cmip.write_monthly_file(path, "tas", values=np.full(12, 270.0 + year - 1850), start_year=year, nyears=1)
        paths.append(path)
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": paths}, grid_label="gn")
    out = annual_means(global_mean_series(run, required=()).compute())
    np.testing.assert_allclose(out.tas.values, [270.0, 271.0])


def test_celsius_converted_to_kelvin(tmp_path, cmip):
    # K = °C + 273.15 (SI definition of the Celsius scale; handbook value)
    run = single(tmp_path, cmip, "tas", values=14.0, units="degC")
    series = global_mean_series(run, required=()).compute()
    np.testing.assert_allclose(series.tas.values, 287.15, rtol=1e-7)
    assert series.tas.attrs["units"] == "K"


@pytest.mark.parametrize("units", ["W m-2", "W/m2", "W m^-2", "W.m-2", "W m**-2"])
def test_flux_unit_spellings_accepted(tmp_path, cmip, units):
    run = single(tmp_path, cmip, "rsut", units=units)
    assert open_run(run, required=()).rsut.attrs["units"] == "W m-2"


@pytest.mark.parametrize("var, units", [("rsut", "W"), ("rlut", None), ("rsdt", "erg cm-2 s-1"), ("tas", "C"), ("tas", None)])
def test_wrong_or_missing_units_refused(tmp_path, cmip, var, units):
    run = single(tmp_path, cmip, var, units=units)
    with pytest.raises(ArchiveError) as err:
        open_run(run, required=())
    message = str(err.value)
    assert MODEL in message and run.files[var][0].name in message and "units" in message
    assert "\n" not in message


def test_gap_between_files_detected(tmp_path, cmip):
    a = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185012.nc", "tas", start_year=1850, nyears=1)
    b = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185201-185212.nc", "tas", start_year=1852, nyears=1)
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [a, b]})
    with pytest.raises(ArchiveError, match="gap of 12 month"):
        open_run(run, required=())


def test_overlap_between_files_detected(tmp_path, cmip):
    a = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc", "tas", start_year=1850, nyears=2)
    b = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185101-185212.nc", "tas", start_year=1851, nyears=2)
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [a, b]})
    with pytest.raises(ArchiveError, match="overlaps .*185001-185112.nc by 12 month"):
        open_run(run, required=())


@pytest.mark.parametrize(
    "months, problem",
    [
        ([(1850, 1), (1850, 2), (1850, 2), (1850, 3)], "duplicated time step"),
        ([(1850, 1), (1850, 3), (1850, 2), (1850, 4)], "not monotonic"),
        ([(1850, 1), (1850, 2), (1850, 4), (1850, 5)], "gap of 1 month"),
    ],
)
def test_bad_time_axis_within_a_file_detected(tmp_path, cmip, months, problem):
    run = single(tmp_path, cmip, "tas", months=months)
    with pytest.raises(ArchiveError, match=problem):
        open_run(run, required=())


def test_non_monthly_steps_detected(tmp_path, cmip):
    path = tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185001.nc"
    cmip.write_monthly_file(path, "tas", months=[(1850, 1)] * 3, time_bounds=False)
    # three distinct days in one month: rewrite time to days 0.5, 1.5, 2.5
    import netCDF4

    with netCDF4.Dataset(path, "a") as nc:
        nc["time"][:] = [0.5, 1.5, 2.5]
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [path]})
    with pytest.raises(ArchiveError, match="not monthly"):
        open_run(run, required=())


def test_missing_calendar_defaults_to_standard_with_flag(tmp_path, cmip):
    # CF conventions §4.4.1: no calendar attribute means the standard calendar
    run = single(tmp_path, cmip, "tas", calendar=None)
    series = global_mean_series(run, required=())
    assert series.attrs["calendar"] == "standard"
    assert "calendar_defaulted" in series.attrs["flags"].split(";")


def test_unknown_calendar_refused(tmp_path, cmip):
    path = tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc"
    cmip.write_monthly_file(path, "tas")
    import netCDF4

    with netCDF4.Dataset(path, "a") as nc:
        nc["time"].calendar = "lunar"
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [path]})
    with pytest.raises(ArchiveError, match="unknown calendar 'lunar'"):
        open_run(run, required=())


@pytest.mark.parametrize("calendar", ["noleap", "360_day", "all_leap", "standard", "gregorian", "proleptic_gregorian", "julian"])
def test_every_cf_calendar_opens_and_gives_annual_means(tmp_path, cmip, calendar):
    run = single(tmp_path, cmip, "tas", calendar=calendar, values=lambda lat, lon, k: 280.0 + k)
    annual = annual_means(global_mean_series(run, required=()).compute())
    assert list(annual.year.values) == [1850, 1851]
    assert annual.attrs["calendar"] in {calendar, "standard"}
    # month values 0…11 weighted by month length: the mean lies within a day-weighting of 5.5
    assert abs(annual.tas.values[0] - 285.5) < 0.1


def test_grids_differing_between_variables_refused(tmp_path, cmip):
    a = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc", "tas")
    b = cmip.write_monthly_file(tmp_path / "rlut_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc", "rlut", nlat=6)
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [a], "rlut": [b]})
    with pytest.raises(ArchiveError, match="grid of rlut differs from that of tas"):
        open_run(run, required=())


def test_variables_trimmed_to_common_period_with_flag(tmp_path, cmip):
    a = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185212.nc", "tas", nyears=3)
    b = cmip.write_monthly_file(tmp_path / "rlut_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc", "rlut", nyears=2)
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [a], "rlut": [b]})
    ds = open_run(run, required=())
    assert ds.sizes["time"] == 24
    assert "time_trimmed" in ds.attrs["flags"]


def test_path_names_the_run_and_disagreeing_attributes_are_flagged(tmp_path, cmip):
    # issue 11 (replaces "attributes win"): runs are identified by their DRS path; the file's attribute is
    # recorded with the file's name and the run flagged attribute_mismatch (common practice, no source)
    attrs = {"source_id": "TESTMODEL-9", "experiment_id": "piControl", "variant_label": MEMBER}
    run = single(tmp_path, cmip, "tas", attrs=attrs)
    ds = open_run(run, required=())
    assert ds.attrs["model"] == "TESTMODEL-1"
    assert "attribute_mismatch" in ds.attrs["flags"].split(";")
    assert "TESTMODEL-1" in ds.attrs["attribute_mismatch"] and "TESTMODEL-9" in ds.attrs["attribute_mismatch"]
    assert run.files["tas"][0].name in ds.attrs["attribute_mismatch"]


def test_one_file_disagreeing_on_identity_is_named_not_refused(tmp_path, cmip):
    # issue 11: one file's source_id typo used to fail the model ("the files of one run must agree")
    a = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185012.nc", "tas", nyears=1,
                                attrs={"source_id": MODEL})
    b = cmip.write_monthly_file(tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185101-185112.nc", "tas", nyears=1,
                                start_year=1851, attrs={"source_id": "TESTMODEL-2"})
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [a, b]})
    ds = open_run(run, required=())
    assert ds.attrs["model"] == MODEL and ds.sizes["time"] == 24
    assert "attribute_mismatch" in ds.attrs["flags"].split(";")
    assert b.name in ds.attrs["attribute_mismatch"] and a.name not in ds.attrs["attribute_mismatch"]


def test_corrupt_file_refused_with_one_line_message(tmp_path):
    path = tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc"
    path.write_bytes(b"this is not a netCDF file" * 10)
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [path]})
    with pytest.raises(ArchiveError) as err:
        open_run(run, required=())
    message = str(err.value)
    assert message.startswith(f"model {MODEL} member {MEMBER} piControl: file {path}: cannot be read")
    assert "\n" not in message


def test_run_without_a_required_variable_refused(tmp_path, cmip):
    cmip.write_run(tmp_path, MODEL, "piControl", variables=("tas", "rsdt", "rsut"), nyears=1)
    run = the_run(tmp_path)
    with pytest.raises(ArchiveError, match="required variable.*rlut"):
        global_mean_series(run)
    assert set(open_run(run, required=("tas",)).data_vars) >= {"tas", "rsdt", "rsut"}


def test_file_without_its_variable_refused(tmp_path, cmip):
    path = tmp_path / "tas_Amon_TESTMODEL-1_piControl_r1i1p1f1_gn_185001-185112.nc"
    cmip.write_monthly_file(path, "ts")
    run = RunFiles(MODEL, MEMBER, "piControl", {"tas": [path]})
    with pytest.raises(ArchiveError, match="has no variable 'tas'"):
        open_run(run, required=())


def test_missing_cells_excluded_from_file_means(tmp_path, cmip):
    # NaN written as the _FillValue decode to missing and drop out of both sums (common practice, no source)
    def values(lat, lon, k):
        out = np.where(lat > 0, 300.0, 200.0)
        return np.where((lat < 0) & (lon < 180), np.nan, out)

    run = single(tmp_path, cmip, "tas", values=values)
    series = global_mean_series(run, required=()).compute()
    # per hemisphere the area is equal; the south keeps half its cells: (300·2 + 200·1) / 3
    np.testing.assert_allclose(series.tas.values, (300.0 * 2 + 200.0) / 3, rtol=1e-9)


def test_areacella_in_wrong_units_names_its_file(tmp_path, cmip):
    run = single(tmp_path, cmip, "tas")
    run.areacella = cmip.write_areacella(tmp_path / "areacella_fx_TESTMODEL-1_piControl_r1i1p1f1_gn.nc", units="km2")
    with pytest.raises(ArchiveError) as err:
        global_mean_series(run, required=())
    assert "areacella_fx_TESTMODEL-1" in str(err.value) and "not m2" in str(err.value)


def test_archive_files_are_not_modified(tmp_path, cmip):
    cmip.write_run(tmp_path, MODEL, "piControl", nyears=1, areacella=True)
    digest = {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in tmp_path.rglob("*.nc")}
    dask.compute(global_mean_series(the_run(tmp_path)))
    assert digest == {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in tmp_path.rglob("*.nc")}
