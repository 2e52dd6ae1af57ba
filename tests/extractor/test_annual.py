"""Tests of extractor/annual.py: month lengths per calendar and annual means."""
import datetime

import cftime
import numpy as np
import pytest
import xarray as xr

from sensemble.extractor.annual import annual_means, month_lengths

CALENDARS = ["noleap", "360_day", "all_leap", "standard", "gregorian", "proleptic_gregorian", "julian"]
# month lengths of the fixed-length calendars as the CF conventions define them (§4.4.1)
NOLEAP = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]
ALL_LEAP = [31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]


def monthly_times(calendar, start_year, nmonths, start_month=1):
    first = start_year * 12 + start_month - 1
    out = []
    for k in range(nmonths):
        y, m = divmod(first + k, 12)
        out.append(cftime.datetime(y, m + 1, 15, calendar=calendar))
    return np.array(out)


def series(calendar, start_year, nmonths, values=None, start_month=1, bounds=None, flags=""):
    times = monthly_times(calendar, start_year, nmonths, start_month)
    values = np.arange(nmonths, dtype=float) if values is None else np.asarray(values, float)
    ds = xr.Dataset(
        {"tas": ("time", values, {"units": "K", "cell_methods": "area: mean"})},
        coords={"time": times},
        attrs={"model": "TESTMODEL-1", "calendar": calendar, "flags": flags},
    )
    if bounds is not None:
        ds["time_bnds"] = (("time", "bnds"), bounds)
    return ds


@pytest.mark.parametrize("calendar", CALENDARS)
@pytest.mark.parametrize("year", [1582, 1900, 2000, 2001, 2004])
def test_month_lengths_sum_to_cftime_year_length(calendar, year):
    # reference library: cftime's own date arithmetic for the length of each year
    lengths = month_lengths(monthly_times(calendar, year, 12), calendar)
    days_in_year = (cftime.datetime(year + 1, 1, 1, calendar=calendar) - cftime.datetime(year, 1, 1, calendar=calendar)).days
    assert lengths.sum() == days_in_year
    # reference library: cftime's per-month day counts
    for month, length in enumerate(lengths, start=1):
        nxt = cftime.datetime(year + month // 12, month % 12 + 1, 1, calendar=calendar)
        assert length == (nxt - cftime.datetime(year, month, 1, calendar=calendar)).days


def test_month_lengths_of_fixed_calendars():
    # CF conventions §4.4.1 calendar definitions
    assert list(month_lengths(monthly_times("noleap", 2000, 12), "noleap")) == NOLEAP
    assert list(month_lengths(monthly_times("all_leap", 2001, 12), "all_leap")) == ALL_LEAP
    assert list(month_lengths(monthly_times("360_day", 2000, 12), "360_day")) == [30] * 12
    # Gregorian leap rules: 1900 is not a leap year, 2000 is; Julian: every fourth year (handbook rule)
    assert month_lengths(monthly_times("standard", 1900, 2), "standard")[1] == 28
    assert month_lengths(monthly_times("standard", 2000, 2), "standard")[1] == 29
    assert month_lengths(monthly_times("julian", 1900, 2), "julian")[1] == 29
    # October 1582 lost ten days at the Julian→Gregorian switch in the standard calendar (handbook fact)
    assert month_lengths(monthly_times("standard", 1582, 10), "standard")[9] == 21
    assert month_lengths(monthly_times("proleptic_gregorian", 1582, 10), "proleptic_gregorian")[9] == 31


@pytest.mark.parametrize(
    "calendar, lengths",
    [("noleap", NOLEAP), ("all_leap", ALL_LEAP), ("360_day", [30] * 12)],
)
def test_annual_mean_weights_months_by_their_length(calendar, lengths):
    # month-length weighting: Σ L_m x_m / Σ L_m (common practice, no source), lengths from CF §4.4.1
    values = np.arange(24.0) ** 2
    out = annual_means(series(calendar, 1850, 24, values))
    expected = [np.dot(lengths, values[:12]) / sum(lengths), np.dot(lengths, values[12:]) / sum(lengths)]
    np.testing.assert_allclose(out.tas.values, expected, rtol=1e-14)
    assert list(out.year.values) == [1850, 1851]
    assert out.year.dtype.kind == "i"
    assert out.tas.dtype == np.float64


def test_leap_year_gets_its_february_in_standard_calendar():
    # 2000 is a Gregorian leap year (handbook rule); January=0, February=1, others 0
    values = np.zeros(24)
    values[1] = values[13] = 1.0
    out = annual_means(series("standard", 2000, 24, values))
    assert out.tas.sel(year=2000).item() == pytest.approx(29 / 366, rel=1e-14)
    assert out.tas.sel(year=2001).item() == pytest.approx(28 / 365, rel=1e-14)


def test_partial_years_dropped_with_flag():
    out = annual_means(series("noleap", 1850, 24, start_month=7, flags="cos_weights"))
    assert list(out.year.values) == [1851]
    assert out.attrs["flags"].split(";") == ["cos_weights", "partial_years"]
    assert out.attrs["partial_years_dropped"] == "1850;1852"


def test_complete_years_have_no_flag_and_keep_attributes():
    out = annual_means(series("360_day", 1850, 36))
    assert out.sizes["year"] == 3
    assert out.attrs["flags"] == ""
    assert out.attrs["model"] == "TESTMODEL-1"
    assert out.tas.attrs["units"] == "K"
    assert out.tas.attrs["cell_methods"] == "area: mean time: mean"
    assert "time" not in out.dims


def test_time_bounds_give_the_weights_when_present():
    # bounds that make every month 30 days long turn the annual mean into the plain mean
    calendar = "noleap"
    times = monthly_times(calendar, 1850, 12)
    starts = np.array([t - datetime.timedelta(days=14) for t in times])
    bounds = np.stack([starts, starts + datetime.timedelta(days=30)], axis=1)
    values = np.arange(12.0)
    out = annual_means(series(calendar, 1850, 12, values, bounds=bounds))
    assert out.tas.item() == pytest.approx(values.mean(), rel=1e-14)
    assert out.attrs["annual_weights"] == "time_bounds"
    assert "time_bnds" not in out


def test_years_from_the_first_month_keep_every_whole_block():
    # issue 11: a run starting on 1 July has years July–June; 24 months are two whole years, none dropped.
    # Values 0..23 with noleap month lengths: each block's mean is the length-weighted mean of its months
    # (hand computation with the CF noleap month lengths, §4.4.1).
    out = annual_means(series("noleap", 1850, 24, start_month=7), start="first_month")
    assert list(out["year"].values) == [1850, 1851] and out.attrs["first_month"] == 7
    assert "partial_years" not in out.attrs["flags"]
    lengths = np.array(NOLEAP[6:] + NOLEAP[:6], dtype=float)
    expected = [np.sum(np.arange(12) * lengths) / lengths.sum(), np.sum(np.arange(12, 24) * lengths) / lengths.sum()]
    np.testing.assert_allclose(out["tas"].values, expected, rtol=1e-12)
    # the calendar-year default is unchanged for the same series
    assert list(annual_means(series("noleap", 1850, 24, start_month=7))["year"].values) == [1851]


def test_years_from_the_first_month_of_a_january_series_are_calendar_years():
    # common practice, no source: both conventions agree when a series starts in January
    data = series("360_day", 1850, 36)
    a, b = annual_means(data), annual_means(data, start="first_month")
    xr.testing.assert_identical(a["tas"], b["tas"])


def _loop_year_means(values, weights, years, kept):
    """The plain per-year loop, one year's steps selected and summed alone (common practice, no source)."""
    out = np.empty((kept.size,) + values.shape[1:])
    for k, year in enumerate(kept):
        sel = years == year
        w = weights[sel].reshape((-1,) + (1,) * (values.ndim - 1))
        out[k] = np.sum(values[sel] * w, axis=0) / np.sum(w)
    return out


@pytest.mark.parametrize("extra_dims", [(), (3,)])
def test_year_means_are_bit_for_bit_the_per_year_loop(extra_dims):
    # the grouped sums against a loop over the years; a gap, a duplicated month and an unsorted year included
    from sensemble.extractor.annual import _weighted_year_means, _year_rows

    rng = np.random.default_rng(7)
    years = np.repeat(np.arange(1850, 1900), 12)
    years = np.concatenate([years[:300], years[312:], [1851], [1849] * 12])  # 1875 missing, 1851 has 13 steps
    values = rng.normal(288.0, 3.0, size=(years.size,) + extra_dims) * 10.0 ** rng.integers(-3, 4, years.size).reshape(
        (-1,) + (1,) * len(extra_dims))
    weights = rng.uniform(28.0, 31.0, years.size)
    all_years, counts = np.unique(years, return_counts=True)
    kept = all_years[counts == 12]
    got = _weighted_year_means(values, weights, _year_rows(years, kept))
    want = _loop_year_means(values, weights, years, kept)
    assert got.shape == want.shape and kept[0] == 1849 and 1851 not in kept and 1875 not in kept
    np.testing.assert_array_equal(got, want)


def test_a_year_of_twelve_steps_in_fewer_months_is_not_complete():
    # common practice, no source: twelve steps are a year only when they are twelve distinct months
    data = series("noleap", 1850, 24)
    months = [cftime.datetime(1850, m, 15, calendar="noleap") for m in [1, 1, *range(3, 13)]]
    data = data.assign_coords(time=np.array(months + list(data["time"].values[12:])))
    out = annual_means(data)
    assert list(out["year"].values) == [1851] and out.attrs["partial_years_dropped"] == "1850"
