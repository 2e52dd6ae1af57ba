"""Tests of extractor/control.py: branch alignment, drift removal, control residuals, chained runs."""
import cftime
import numpy as np
import pytest
import xarray as xr
from hypothesis import given, settings
from hypothesis import strategies as st

from sensemble.extractor.budget import toa_budget
from sensemble.extractor.control import ControlError, branch_year, control_residuals, drift_corrected, join_chain

VARS = ("tas", "rsdt", "rsut", "rlut")
UNITS = {"tas": "K", "rsdt": "W m-2", "rsut": "W m-2", "rlut": "W m-2"}
BASE = {"tas": 287.0, "rsdt": 340.0, "rsut": 100.0, "rlut": 239.5}


def _series(years, values=None, experiment_id="piControl", calendar="noleap", **attrs):
    years = np.asarray(years)
    values = values or {name: np.full(years.size, BASE[name]) for name in VARS}
    return xr.Dataset(
        {name: ("year", np.asarray(v, dtype=float), {"units": UNITS.get(name, "W m-2")}) for name, v in values.items()},
        coords={"year": years},
        attrs={"model": "ALPHA-1", "member": "r1i1p1f1", "experiment_id": experiment_id, "calendar": calendar, **attrs},
    )


def _control(first=1850, n=500, calendar="noleap"):
    return _series(np.arange(first, first + n), calendar=calendar)


# --- branch_year ------------------------------------------------------------------------------

# Days per year by calendar from the CF conventions (noleap 365, 360_day 360, all_leap 366;
# proleptic Gregorian 1850→1950 holds 24 leap days, 1900 not being one): hand-computed offsets.
@pytest.mark.parametrize(
    "calendar, units, branch_time, expected",
    [
        ("noleap", "days since 1850-01-01", 36500.0, 1950),  # 1 Jan 1950
        ("noleap", "days since 1850-01-01", 36499.5, 1950),  # 31 Dec 1949 12:00: start of 1950
        ("noleap", "days since 1850-01-01", 36498.5, 1949),  # 30 Dec 1949: still 1949
        ("noleap", "days since 1850-01-01", 0.0, 1850),  # branch time 0: the reference year
        ("360_day", "days since 1850-01-01", 36000.0, 1950),
        ("360_day", "days since 1850-01-01", 35999.0, 1950),  # 30 Dec 1949 00:00, the last day
        ("360_day", "days since 1850-01-01", 36180.0, 1950),  # mid-1950
        ("all_leap", "days since 1850-01-01", 36600.0, 1950),
        ("proleptic_gregorian", "days since 1850-01-01", 36524.0, 1950),
        ("proleptic_gregorian", "hours since 1850-01-01 00:00:00", 36524.0 * 24, 1950),
        ("proleptic_gregorian", "days since 1850-01-01", 36523.0, 1950),  # 31 Dec 1949
        ("standard", "days since 1850-01-01", 36524.0 + 181, 1950),
    ],
)
def test_branch_year_decodes_calendar_and_units(calendar, units, branch_time, expected):
    control = _control(calendar=calendar)
    year, flags = branch_year({"branch_time_in_parent": branch_time, "parent_time_units": units}, control)
    assert (year, flags) == (expected, [])


@pytest.mark.parametrize("calendar", ["noleap", "360_day", "all_leap", "proleptic_gregorian", "standard", "julian"])
@pytest.mark.parametrize("month, day, hour, shift", [(1, 1, 0, 0), (7, 15, 6, 0), (12, 31, 12, 1), (12, 30, 18, None)])
def test_branch_year_agrees_with_cftime(calendar, month, day, hour, shift):
    # reference library: cftime encodes the branch date; the decoded year must be the date's year,
    # or the next one when the date falls within the year's last day
    if calendar == "360_day" and day == 31:
        day = 30
    last_day = {"360_day": 30}.get(calendar, 31)
    if shift is None:
        shift = 1 if day == last_day else 0
    date = cftime.datetime(123, month, day, hour, calendar=calendar)
    units = "days since 0001-01-01 00:00:00"
    control = _control(first=1, n=400, calendar=calendar)
    attrs = {"branch_time_in_parent": cftime.date2num(date, units, calendar=calendar), "parent_time_units": units}
    assert branch_year(attrs, control) == (123 + shift, [])


@pytest.mark.parametrize("attrs", [{}, {"branch_time_in_parent": np.nan, "parent_time_units": "days since 1850-01-01"},
                                   {"branch_time_in_parent": 10.0, "parent_time_units": ""}])
def test_missing_branch_information_falls_back_to_control_start(attrs):
    assert branch_year(attrs, _control(first=1850)) == (1850, ["branch_assumed"])


def test_branch_outside_the_control_is_an_error():
    attrs = {"branch_time_in_parent": 365.0 * 600, "parent_time_units": "days since 1850-01-01",
             "model": "ALPHA-1", "experiment_id": "abrupt-4xCO2"}
    with pytest.raises(ControlError, match=r"ALPHA-1.*abrupt-4xCO2.*2450.*1850-2349"):
        branch_year(attrs, _control())


def test_undecodable_units_are_an_error():
    attrs = {"branch_time_in_parent": 3.0, "parent_time_units": "fortnights after lunch"}
    with pytest.raises(ControlError, match="fortnights"):
        branch_year(attrs, _control())


# --- drift_corrected --------------------------------------------------------------------------

def _with_drift(ds, offset_years, slope, curvature=0.0):
    # adds the same polynomial drift, in control years, to each variable
    t = np.asarray(offset_years, dtype=float)
    return ds.assign({name: ds[name] + slope * (t - 100) + curvature * (t - 100) ** 2 for name in VARS})


def _experiment(n=150, first=2000, seed=1):
    rng = np.random.default_rng(seed)
    values = {name: BASE[name] + np.linspace(0, 4, n) + rng.normal(0, 0.3, n) for name in VARS}
    return _series(np.arange(first, first + n), values, experiment_id="abrupt-4xCO2")


@settings(max_examples=30, deadline=None, database=None)
@given(
    slope=st.floats(-0.05, 0.05),
    intercept_year=st.integers(0, 200),
    n=st.integers(30, 120),
    order=st.sampled_from([1, 2]),
)
def test_same_drift_in_control_and_experiment_leaves_anomalies_unchanged(slope, intercept_year, n, order):
    # Property: the drift fit absorbs any polynomial of its order exactly (least squares reproduces
    # polynomials in its span; common practice, no source), so adding one drift to both runs changes nothing.
    control = _control(first=1, n=400)
    control = control.assign({name: control[name] + np.random.default_rng(0).normal(0, 0.2, 400) for name in VARS})
    experiment = _experiment(n=n)
    branch = 1 + intercept_year
    plain, _ = drift_corrected(experiment, control, branch, order=order)
    parallel = np.arange(branch, branch + n)
    drifted, _ = drift_corrected(
        _with_drift(experiment, parallel, slope), _with_drift(control, control["year"].values, slope), branch, order=order
    )
    for name in VARS:
        np.testing.assert_allclose(drifted[name], plain[name], rtol=0, atol=1e-8)


def test_anomalies_count_years_from_the_branch():
    experiment = _experiment(n=150, first=2000)
    control = _with_drift(_control(first=1850), np.arange(1850, 2350), slope=0.01)
    out, flags = drift_corrected(experiment, control, 1900)
    assert flags == []
    np.testing.assert_array_equal(out["year"], np.arange(1, 151))
    np.testing.assert_array_equal(out["calendar_year"], np.arange(2000, 2150))
    # experiment year k runs alongside control year 1900 + k - 1, where the control is BASE + 0.01 (1899 + k - 100)
    expected = experiment["tas"].values - (BASE["tas"] + 0.01 * (np.arange(1900, 2050) - 100))
    np.testing.assert_allclose(out["tas"], expected, atol=1e-9)
    assert out["tas"].attrs["units"] == "K"
    assert out.attrs["branch_year"] == 1900 and out.attrs["drift_order"] == 1
    assert out.attrs["experiment_id"] == "abrupt-4xCO2"
    # the same drift on rsdt, rsut and rlut leaves -1 × drift in N, averaged over the parallel segment
    net = BASE["rsdt"] - BASE["rsut"] - BASE["rlut"] - 0.01 * (np.arange(1900, 2050) - 100).mean()
    assert out.attrs["control_rtnt_mean"] == pytest.approx(net, abs=1e-10)


def test_short_control_is_extrapolated_and_flagged():
    # a linear drift extrapolates exactly, so the anomaly is still the signal
    experiment = _experiment(n=150)
    control = _with_drift(_control(first=1850, n=100), np.arange(1850, 1950), slope=0.02)
    out, flags = drift_corrected(experiment, control, 1900)  # 50 parallel years of 150
    assert flags == ["control_short"]
    parallel = np.arange(1900, 2050)
    expected = experiment["rlut"].values - (BASE["rlut"] + 0.02 * (parallel - 100))
    np.testing.assert_allclose(out["rlut"], expected, atol=1e-8)
    assert out.attrs["control_years"] == "1900-1949"


def test_too_short_parallel_segment_is_an_error():
    with pytest.raises(ControlError, match=r"ALPHA-1.*20 years from branch year 1930.*at least 30"):
        drift_corrected(_experiment(n=150), _control(first=1850, n=100), 1930)


def test_quadratic_drift_needs_order_two():
    experiment = _experiment(n=150)
    control = _with_drift(_control(first=1850), np.arange(1850, 2350), slope=0.0, curvature=1e-4)
    quadratic, _ = drift_corrected(experiment, control, 1900, order=2)
    linear, _ = drift_corrected(experiment, control, 1900, order=1)
    parallel = np.arange(1900, 2050)
    expected = experiment["tas"].values - (BASE["tas"] + 1e-4 * (parallel - 100) ** 2)
    np.testing.assert_allclose(quadratic["tas"], expected, atol=1e-8)
    assert np.abs(linear["tas"] - expected).max() > 0.1


def test_drift_correction_commutes_with_the_budget():
    # the fit is linear in the data: correcting fluxes then forming N equals correcting N (common practice, no source)
    experiment = _experiment(n=80)
    control = _control(first=1850).assign(rsut=lambda d: d["rsut"] + 0.003 * (d["year"] - 1850))
    after, _ = drift_corrected(experiment, control, 1870)
    before, _ = drift_corrected(toa_budget(experiment), toa_budget(control), 1870)
    np.testing.assert_allclose(toa_budget(after)["rtnt"], before["rtnt"], atol=1e-10)


def test_variables_the_control_lacks_are_flagged():
    experiment = _experiment(n=60).assign(rsutcs=lambda d: d["rsut"] * 0.5)
    out, flags = drift_corrected(experiment, _control(), 1850)
    assert flags == ["control_lacks_rsutcs"]
    assert "rsutcs" not in out


# --- control_residuals ------------------------------------------------------------------------

def test_control_residuals_are_detrended_variability():
    # OLS residuals are orthogonal to the regressors (1, t): zero mean and no trend (common practice, no source)
    rng = np.random.default_rng(4)
    control = _series(np.arange(1850, 2050), {name: BASE[name] + 0.004 * np.arange(200) + rng.normal(0, 0.2, 200) for name in VARS})
    res = control_residuals(control, order=1)
    np.testing.assert_array_equal(res["year"], np.arange(1, 201))
    np.testing.assert_array_equal(res["calendar_year"], np.arange(1850, 2050))
    for name in VARS:
        assert abs(float(res[name].mean())) < 1e-10
        assert abs(float((res[name] * (res["year"] - res["year"].mean())).sum())) < 1e-7
    assert float(res["tas"].std()) == pytest.approx(0.2, rel=0.15)


# --- join_chain -------------------------------------------------------------------------------

def _historical():
    return _series(np.arange(1850, 2015), experiment_id="historical", files="a.nc", flags="partial_years",
                   branch_time_in_parent=0.0, parent_time_units="days since 1850-01-01", parent_experiment_id="piControl")


def test_join_chain_concatenates_and_keeps_the_first_branch():
    scenario = _series(np.arange(2015, 2101), experiment_id="ssp-invented", files="b.nc",
                       branch_time_in_parent=60225.0, parent_time_units="days since 1850-01-01", parent_experiment_id="historical")
    joined = join_chain(_historical(), scenario)
    np.testing.assert_array_equal(joined["year"], np.arange(1850, 2101))
    assert joined.attrs["chain"] == "historical;ssp-invented"
    assert joined.attrs["experiment_id"] == "ssp-invented"
    assert joined.attrs["branch_time_in_parent"] == 0.0
    assert joined.attrs["parent_experiment_id"] == "piControl"
    assert joined.attrs["files"] == "a.nc;b.nc"
    assert joined.attrs["flags"] == "partial_years"
    assert joined["tas"].attrs["units"] == "K"


def test_join_chain_with_a_gap_names_both_runs():
    scenario = _series(np.arange(2016, 2101), experiment_id="ssp-invented")
    with pytest.raises(ControlError, match=r"ssp-invented starts in 2016.*historical ends in 2014"):
        join_chain(_historical(), scenario)


def test_join_chain_refuses_mixed_calendars():
    scenario = _series(np.arange(2015, 2101), experiment_id="ssp-invented", calendar="360_day")
    with pytest.raises(ControlError, match="calendar"):
        join_chain(_historical(), scenario)


# --- mid-year branches (issue 11) ---------------------------------------------------------------

def test_branch_point_gives_the_month():
    # noleap: 181 days from 1 Jan to 1 Jul (CF §4.4.1 month lengths); the last day of a month counts as the next
    from sensemble.extractor.control import branch_point
    control = _control()
    for branch_time, expected in ((365 * 10 + 181, (1860, 7)), (365 * 10 + 180.5, (1860, 7)),
                                  (365 * 10 + 170, (1860, 6)), (365 * 10, (1860, 1))):
        attrs = {"branch_time_in_parent": branch_time, "parent_time_units": "days since 1850-01-01"}
        assert branch_point(attrs, control)[:2] == expected, branch_time


def test_cmip5_branch_time_is_in_the_controls_own_units():
    # CMIP5 convention (no parent_time_units): branch_time counts in the control's time units
    from sensemble.extractor.control import branch_point
    control = _control(first=1)
    control.attrs["time_units"] = "days since 0001-01-01"
    attrs = {"branch_time_in_parent": 365.0 * 40, "branch_time_convention": "CMIP5"}
    assert branch_point(attrs, control) == (41, 1, [])
    assert branch_point({"branch_time_in_parent": 365.0 * 40}, control)[2] == ["branch_assumed"]


def test_mid_year_branch_evaluates_the_drift_at_the_matching_months():
    # A control drifting linearly in time, c(t) = a + b t: its annual means are a + b (Y + 1/2). An experiment
    # starting on 1 July of control year B has years whose means are a + b (B + k − 1 + 1/2 + 1/2); with no
    # response its anomalies are zero only if the drift is evaluated half a year later than for a January
    # branch (common practice, no source: the mean of a linear function over a year is its mid-year value).
    b = 0.01
    control = _control(first=1850, n=200)
    control["tas"] = control["tas"] + b * (control["year"] - 1850 + 0.5)
    years = np.arange(1900, 1940)
    values = {name: np.full(years.size, BASE[name]) for name in VARS}
    values["tas"] = BASE["tas"] + b * (years - 1850 + 0.5 + 0.5)
    experiment = _series(years, values, experiment_id="abrupt-4xCO2")
    anomalies, flags = drift_corrected(experiment, control, 1900, branch_month=7)
    np.testing.assert_allclose(anomalies["tas"].values, 0.0, atol=1e-9)
    assert anomalies.attrs["branch_month"] == 7 and flags == []
    january, _ = drift_corrected(experiment, control, 1900)
    np.testing.assert_allclose(january["tas"].values, b / 2, atol=1e-9)  # half a year of drift left over
