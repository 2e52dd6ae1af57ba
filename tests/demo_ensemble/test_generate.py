"""The demo archive: files average to the models' series, calendars, branches, CF metadata, truth."""
from __future__ import annotations

import csv
import subprocess
import sys
from pathlib import Path

import cftime
import netCDF4
import numpy as np
import pytest
from scipy import stats

from sensemble import demo as demo_ensemble
from sensemble.demo.calendar import annual_mean
from sensemble.demo.models import draw_models
from sensemble.demo.series import simulate

# Tiny archives: four models (one per calendar), 6 x 12 grid, shortened runs. The control is long
# enough for a 50-year file split (Cobble-3 writes 50-year files) and the 1 % run reaches year 80 (TCR).
YEARS = {"control": 130, "abrupt": 40, "onepct": 80, "historical": 20, "scenario": 10}
GRID = (6, 12)
N_MODELS = 4
SEED = 3
FLUXES = ("rsdt", "rsut", "rlut", "rsutcs", "rlutcs")

# CF standard name table, for the variables the archive carries.
CF_STANDARD_NAMES = {
    "tas": "air_temperature",
    "rsdt": "toa_incoming_shortwave_flux",
    "rsut": "toa_outgoing_shortwave_flux",
    "rlut": "toa_outgoing_longwave_flux",
    "rsutcs": "toa_outgoing_shortwave_flux_assuming_clear_sky",
    "rlutcs": "toa_outgoing_longwave_flux_assuming_clear_sky",
    "areacella": "cell_area",
}


@pytest.fixture(scope="module")
def noisy(tmp_path_factory):
    root = tmp_path_factory.mktemp("demo_noisy")
    assert demo_ensemble.generate(root, n_models=N_MODELS, seed=SEED, grid=GRID, years=YEARS) == root
    return root, root / "archive"


@pytest.fixture(scope="module")
def noise_free(tmp_path_factory):
    root = tmp_path_factory.mktemp("demo_noise_free")
    demo_ensemble.generate(root, n_models=N_MODELS, seed=SEED, grid=GRID, years=YEARS, internal_variability=False)
    return root, root / "archive"


@pytest.fixture(scope="module")
def models():
    return draw_models(N_MODELS, SEED, YEARS)


def read_truth(root: Path) -> dict:
    with open(root / "truth.csv", newline="") as fh:
        return {(r["model"], r["member"]): r for r in csv.DictReader(fh)}


def run_files(archive: Path, model: str, experiment: str, member: str, variable: str) -> list[Path]:
    files = sorted((archive / model / experiment / member / "Amon" / variable / "gn").glob("*/*.nc"))
    assert files, f"no files for {model} {experiment} {member} {variable}"
    return files


def read_run(archive: Path, model: str, experiment: str, member: str, variable: str):
    """Values (time, lat, lon) float64 and time bounds of one run, its files joined along time."""
    values, bounds, calendar, units = [], [], None, None
    for path in run_files(archive, model, experiment, member, variable):
        with netCDF4.Dataset(path) as ds:
            values.append(ds[variable][:].filled(np.nan).astype(np.float64))
            bounds.append(ds["time_bnds"][:])
            calendar, units = ds["time"].calendar, ds["time"].units
    return np.concatenate(values), np.concatenate(bounds), calendar, units


def read_area(archive: Path, model: str) -> np.ndarray:
    path = next((archive / model / "piControl" / "r1i1p1f1" / "fx" / "areacella" / "gn").glob("*/*.nc"))
    with netCDF4.Dataset(path) as ds:
        return ds["areacella"][:].astype(np.float64)


def days_of(bounds: np.ndarray, units: str) -> np.ndarray:
    scale = 24.0 if units.startswith("hours") else 1.0
    return (bounds[:, 1] - bounds[:, 0]) / scale


def weighted_annual(archive, model, experiment, member, variable):
    values, bounds, _, units = read_run(archive, model, experiment, member, variable)
    area = read_area(archive, model)
    monthly = (values * area).sum(axis=(1, 2)) / area.sum()
    return annual_mean(monthly, days_of(bounds, units)), values, bounds


def test_area_weighted_annual_means_equal_the_model_series(noisy, models):
    # The generator's contract (common practice, no source): the areacella-weighted global mean of each
    # field is the model's series, so the only error is float32 storage, at most half a unit in the last
    # place of the largest value (IEEE 754 single precision, eps from numpy.finfo).
    _, archive = noisy
    eps = np.finfo(np.float32).eps
    for model in models:
        series = simulate(model)
        for (experiment, member), run_series in series.items():
            for var in ("tas",) + FLUXES:
                annual, values, _ = weighted_annual(archive, model.source_id, experiment, member, var)
                expected = annual_mean(run_series.values[var], run_series.days)
                tolerance = eps * np.abs(values).max()
                assert values.min() > 0  # kelvin and radiative fluxes are positive everywhere
                np.testing.assert_allclose(annual, expected, rtol=0, atol=tolerance,
                                           err_msg=f"{model.source_id} {experiment} {member} {var}")


def test_unweighted_mean_of_tas_is_visibly_wrong(noisy, models):
    # Warm tropics, cold poles: an unweighted lat-lon mean over-counts the poles (common practice, no source).
    _, archive = noisy
    for model in models:
        annual, values, bounds = weighted_annual(archive, model.source_id, "piControl", "r1i1p1f1", "tas")
        unweighted = values.mean(axis=(1, 2))
        assert np.all(np.abs(unweighted.mean() - annual.mean()) > 1.0)


def _month_days_by_rule(calendar: str, year: int, month: int) -> int:
    # Calendar definitions of the CF conventions (section 4.4.1): 360_day has 30-day months; noleap
    # never has 29 February; proleptic_gregorian and standard (for dates after 1582-10-15) follow the
    # Gregorian leap rule (divisible by 4, except centuries not divisible by 400).
    if calendar == "360_day":
        return 30
    lengths = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31]
    if month == 2 and calendar in ("standard", "gregorian", "proleptic_gregorian"):
        leap = (year % 4 == 0 and year % 100 != 0) or year % 400 == 0
        return 29 if leap else 28
    return lengths[month - 1]


def test_month_lengths_follow_each_calendar(noisy, models):
    _, archive = noisy
    assert {m.calendar for m in models} == {"noleap", "360_day", "proleptic_gregorian", "standard"}
    for model in models:
        for run in model.runs:
            _, bounds, calendar, units = read_run(archive, model.source_id, run.experiment_id, run.member, "tas")
            assert calendar == model.calendar
            starts = cftime.num2date(bounds[:, 0], units, calendar=calendar)  # reference library: cftime
            ends = cftime.num2date(bounds[:, 1], units, calendar=calendar)
            assert all(d.day == 1 and d.hour == 0 for d in starts)
            assert all(e.day == 1 and e.hour == 0 for e in ends)
            expected = [_month_days_by_rule(calendar, d.year, d.month) for d in starts]
            np.testing.assert_array_equal(days_of(bounds, units), expected)
            assert starts[0].year == run.start_year and starts[0].month == 1
            # contiguous across files: each month starts where the previous ended
            np.testing.assert_array_equal(bounds[1:, 0], bounds[:-1, 1])


def test_some_run_is_split_across_files(noisy):
    _, archive = noisy
    files = run_files(archive, "Cobble-3", "piControl", "r1i1p1f1", "tas")
    # 130 control years in 50-year files, named by first and last month (CMIP data reference syntax)
    assert [f.name.rsplit("_", 1)[1] for f in files] == ["160101-165012.nc", "165101-170012.nc",
                                                         "170101-173012.nc"]


def test_branch_attributes_point_at_the_documented_control_year(noisy):
    root, archive = noisy
    truth = read_truth(root)
    for (model, member), row in truth.items():
        control_start = int(row["control_start_year"])
        for experiment, column in (("abrupt-4xCO2", "branch_year_abrupt"), ("1pctCO2", "branch_year_onepct"),
                                   ("hist-demo", "branch_year_historical")):
            if experiment == "hist-demo" and member != "r1i1p1f1":
                continue
            with netCDF4.Dataset(run_files(archive, model, experiment, member, "tas")[0]) as ds:
                attrs = {k: ds.getncattr(k) for k in ds.ncattrs()}
            assert attrs["parent_experiment_id"] == "piControl"
            assert attrs["parent_variant_label"] == "r1i1p1f1"
            # decoded with cftime (reference library) in the parent's units and calendar
            at = cftime.num2date(attrs["branch_time_in_parent"], attrs["parent_time_units"],
                                 calendar=row["calendar"])
            assert (at.year, at.month, at.day) == (control_start + int(row[column]), 1, 1)
            # ... and that instant starts a month of the control run
            _, control_bounds, _, _ = read_run(archive, model, "piControl", "r1i1p1f1", "tas")
            assert attrs["branch_time_in_parent"] in control_bounds[:, 0]
        # the scenario continues the historical-type run at its end
        with netCDF4.Dataset(run_files(archive, model, "demo-rise", "r1i1p1f1", "tas")[0]) as ds:
            parent, branch = ds.parent_experiment_id, ds.branch_time_in_parent
        _, hist_bounds, _, _ = read_run(archive, model, "hist-demo", "r1i1p1f1", "tas")
        assert parent == "hist-demo" and branch == hist_bounds[-1, 1]


def test_files_carry_cf_metadata(noisy):
    _, archive = noisy
    files = sorted(archive.rglob("*.nc"))
    assert files
    for path in files:
        with netCDF4.Dataset(path) as ds:
            assert ds.Conventions.startswith("CF-")
            for attr in ("source_id", "experiment_id", "variant_label", "institution_id", "table_id",
                         "frequency", "grid_label"):
                assert getattr(ds, attr), f"{path.name}: {attr}"
            bounds_vars = {ds[v].bounds for v in ds.variables if "bounds" in ds[v].ncattrs()}
            coords = [v for v in ds.variables if v in ds.dimensions]
            for c in coords:  # CF 7.1: coordinates have bounds
                assert c in ("lat", "lon", "time")
                assert ds[c].bounds in ds.variables and ds[c].axis
            data = [v for v in ds.variables if v not in coords and v not in bounds_vars and v != "height"]
            assert data == [ds.variable_id]
            var = ds[data[0]]
            assert var.standard_name == CF_STANDARD_NAMES[data[0]]
            assert var.units and var.cell_methods and var.long_name
            assert var.dtype == np.float32
            assert var.filters()["zlib"]


def test_generation_is_deterministic_for_a_seed(tmp_path):
    years = {"control": 12, "abrupt": 5, "onepct": 5, "historical": 3, "scenario": 2}
    a, b, c = (demo_ensemble.generate(tmp_path / name, n_models=2, seed=seed, grid=(6, 8), years=years) / "archive"
               for name, seed in (("a", 7), ("b", 7), ("c", 8)))
    names_a = sorted(p.relative_to(a) for p in a.rglob("*.nc"))
    assert names_a == sorted(p.relative_to(b) for p in b.rglob("*.nc"))
    differs = False
    for rel in names_a:
        with netCDF4.Dataset(a / rel) as da, netCDF4.Dataset(b / rel) as db, netCDF4.Dataset(c / rel) as dc:
            assert {k: str(da.getncattr(k)) for k in da.ncattrs()} == {k: str(db.getncattr(k)) for k in db.ncattrs()}
            for v in da.variables:
                x, y = np.asarray(da[v][:]), np.asarray(db[v][:])
                assert x.tobytes() == y.tobytes(), f"{rel}:{v}"
                differs |= x.tobytes() != np.asarray(dc[v][:]).tobytes()
        assert (a / rel).read_bytes() == (b / rel).read_bytes(), f"{rel}: files differ byte for byte"
    assert (tmp_path / "a" / "truth.csv").read_bytes() == (tmp_path / "b" / "truth.csv").read_bytes()
    assert differs  # another seed gives another ensemble


def test_truth_gregory_values_from_noise_free_series(noise_free, models):
    # Gregory et al. (2004, GRL): OLS of annual ΔN on ΔT; effective ECS = −F/(2 b) with F4x = 2 F2x.
    # Recomputed with scipy.stats.linregress (reference library) from the noise-free series.
    root, _ = noise_free
    truth = read_truth(root)
    for model in models:
        series = simulate(model, noise=False)
        for member in [r.member for r in model.runs if r.experiment_id == "abrupt-4xCO2"]:
            row = truth[(model.source_id, member)]
            s = series[("abrupt-4xCO2", member)]
            t = annual_mean(s.response["tas"], s.days)
            n = annual_mean(s.response["rtnt"], s.days)
            fit = stats.linregress(t, n)
            assert float(row["gregory_erf_4x"]) == pytest.approx(fit.intercept, rel=1e-9)
            assert float(row["gregory_feedback"]) == pytest.approx(fit.slope, rel=1e-9)
            assert float(row["gregory_ecs_eff"]) == pytest.approx(-fit.intercept / (2 * fit.slope), rel=1e-9)
            assert float(row["feedback_early"]) == pytest.approx(stats.linregress(t[:20], n[:20]).slope, rel=1e-9)
            assert float(row["feedback_late"]) == pytest.approx(stats.linregress(t[20:], n[20:]).slope, rel=1e-9)
            comps = sum(float(row[f"feedback_{c}"]) for c in ("lw_cs", "sw_cs", "cre"))
            assert comps == pytest.approx(fit.slope, rel=1e-9)  # the components add up (linear split)
            assert float(row["f4x"]) == 2 * float(row["f2x"])
            assert float(row["ecs"]) == pytest.approx(float(row["f2x"]) / float(row["lambda"]), rel=1e-12)
            if model.efficacy == 1.0:
                # ε = 1: N = F − λT exactly, a straight Gregory line (Geoffroy et al. 2013a)
                assert fit.slope == pytest.approx(-model.lambda_, rel=1e-9)
                assert fit.intercept == pytest.approx(model.f4x, rel=1e-9)
            else:
                # ε > 1: the line steepens early and flattens late (Geoffroy et al. 2013b, from memory)
                assert float(row["feedback_early"]) < float(row["feedback_late"])
                assert float(row["gregory_ecs_eff"]) < model.ecs


def test_noise_free_files_give_back_the_truth(noise_free, models):
    # End to end (common practice, no source): from the noise-free files, remove a straight-line fit of the
    # parallel control segment, then the Gregory fit and TCR (mean ΔT of years 61–80 of the 1 % run) must
    # return truth.csv to float32-storage accuracy.
    root, archive = noise_free
    truth = read_truth(root)
    for model in models:
        row = truth[(model.source_id, "r1i1p1f1")]
        control = {}
        for var in ("tas",) + FLUXES:
            control[var] = weighted_annual(archive, model.source_id, "piControl", "r1i1p1f1", var)[0]
        years = np.arange(len(control["tas"]))
        anomalies = {}
        for experiment, column in (("abrupt-4xCO2", "branch_year_abrupt"), ("1pctCO2", "branch_year_onepct")):
            b = int(row[column])
            out = {}
            for var in ("tas",) + FLUXES:
                exp = weighted_annual(archive, model.source_id, experiment, "r1i1p1f1", var)[0]
                seg = slice(b, b + len(exp))
                drift = np.polyval(np.polyfit(years[seg], control[var][seg], 1), years[seg])
                out[var] = exp - drift
            anomalies[experiment] = out
        a = anomalies["abrupt-4xCO2"]
        n = a["rsdt"] - a["rsut"] - a["rlut"]
        fit = stats.linregress(a["tas"], n)
        assert fit.intercept == pytest.approx(float(row["gregory_erf_4x"]), abs=1e-3)
        assert fit.slope == pytest.approx(float(row["gregory_feedback"]), abs=1e-3)
        cs = a["rsdt"] - a["rsutcs"] - a["rlutcs"]
        assert stats.linregress(a["tas"], n - cs).slope == pytest.approx(float(row["feedback_cre"]), abs=1e-3)
        tcr = anomalies["1pctCO2"]["tas"][60:80].mean()
        assert tcr == pytest.approx(float(row["tcr"]), abs=1e-3)
        # the control keeps its energy leak and drift (noise-free: exact up to float32 storage)
        n_control = control["rsdt"] - control["rsut"] - control["rlut"]
        assert n_control.mean() == pytest.approx(float(row["leak"]), abs=1e-3)
        slope = np.polyfit(years, control["tas"], 1)[0] * 100
        assert slope == pytest.approx(float(row["drift_tas"]), abs=1e-3)


def test_ensemble_covers_the_assessed_sensitivity_range():
    # ECS stratified over 1.8–5.2 K so the ensemble spans the "likely" 1.5–4.5 K type range
    # (IPCC AR5 likely range, from memory); one model leaks energy beyond 0.5 W m-2.
    ms = draw_models(8, 0)
    ecs = sorted(m.ecs for m in ms)
    assert 1.8 <= ecs[0] < 2.3 and 4.7 < ecs[-1] <= 5.2
    assert all(3.2 <= m.f2x <= 4.1 for m in ms)
    assert any(m.efficacy > 1.0 for m in ms) and any(m.efficacy == 1.0 for m in ms)
    assert any(m.leak > 0.5 for m in ms) and all(m.leak > 0.1 for m in ms)
    assert len({m.source_id for m in ms}) == 8


def test_noisy_control_has_the_stated_leak(noisy):
    # Internal variability is small against the leak: the 130-year mean N sits near it (common practice).
    root, archive = noisy
    truth = read_truth(root)
    for (model, member), row in truth.items():
        n = sum(sign * weighted_annual(archive, model, "piControl", "r1i1p1f1", var)[0]
                for sign, var in ((1, "rsdt"), (-1, "rsut"), (-1, "rlut")))
        assert abs(n.mean() - float(row["leak"])) < 0.1
        assert n.std() > 0.01  # but there is variability


def test_refuses_a_folder_it_did_not_write(tmp_path):
    (tmp_path / "archive").mkdir()
    (tmp_path / "archive" / "precious.nc").write_text("not ours")
    with pytest.raises(FileExistsError, match="not written by demo_ensemble"):
        demo_ensemble.generate(tmp_path, n_models=1, grid=(6, 8), years={"control": 5, "abrupt": 2, "onepct": 2,
                                                                          "historical": 1, "scenario": 1})
    assert (tmp_path / "archive" / "precious.nc").exists()


def test_command_line(tmp_path):
    out = subprocess.run([sys.executable, "-m", "sensemble.demo", str(tmp_path / "d"), "--models", "1",
                          "--seed", "2", "--grid", "6x8", "--quiet", "--years",
                          "control=12,abrupt=5,onepct=5,historical=3,scenario=2"], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert (tmp_path / "d" / "truth.csv").exists() and (tmp_path / "d" / "README.txt").exists()
    assert "invented" in (tmp_path / "d" / "README.txt").read_text().lower()
    assert len(list((tmp_path / "d" / "archive").rglob("tas_Amon_*_piControl_*.nc"))) == 1
    with netCDF4.Dataset(next((tmp_path / "d" / "archive").rglob("tas_Amon_*_piControl_*.nc"))) as ds:
        assert ds.dimensions["time"].size == 12 * 12 and ds["tas"].shape[1:] == (6, 8)
    bad = subprocess.run([sys.executable, "-m", "sensemble.demo", str(tmp_path / "e"), "--grid", "six"],
                         capture_output=True, text=True)
    assert bad.returncode == 2 and "NLATxNLON" in bad.stderr


def test_forcing_table_is_the_forcing_in_the_files(noise_free, models):
    # For ε = 1, N = F − λT exactly (Geoffroy et al. 2013a), so F = ΔN + λΔT diagnosed from the
    # noise-free historical-type and scenario files (the diagnosis of Forster et al. 2013) must equal
    # scenario_forcing.csv; and the invented scenario rises by 0.04 W m-2/yr scaled by F2x/3.71.
    root, archive = noise_free
    truth = read_truth(root)
    with open(root / "scenario_forcing.csv", newline="") as fh:
        table = list(csv.DictReader(fh))
    checked = 0
    for model in models:
        row = truth[(model.source_id, "r1i1p1f1")]
        rows = [r for r in table if r["model"] == model.source_id and r["experiment_id"] != "demo-steady"]
        assert [r["experiment_id"] for r in rows] == ["hist-demo"] * 20 + ["demo-rise"] * 10
        scen = np.array([float(r["erf"]) for r in rows if r["experiment_id"] == "demo-rise"])
        # (leap years shift a month-length-weighted annual mean of a ramp by ~1e-4 of a year's rise)
        np.testing.assert_allclose(np.diff(scen), 0.04 * model.f2x / 3.71, rtol=3e-3)
        if model.efficacy != 1.0:
            continue
        control = {v: weighted_annual(archive, model.source_id, "piControl", "r1i1p1f1", v)[0]
                   for v in ("tas",) + FLUXES}
        years = np.arange(len(control["tas"]))
        b = int(row["branch_year_historical"])
        diagnosed = []
        for experiment in ("hist-demo", "demo-rise"):
            an = {}
            for var in ("tas",) + FLUXES:
                exp = weighted_annual(archive, model.source_id, experiment, "r1i1p1f1", var)[0]
                seg = slice(b, b + len(exp))
                an[var] = exp - np.polyval(np.polyfit(years, control[var], 1), years[seg])
            diagnosed.append(an["rsdt"] - an["rsut"] - an["rlut"] + float(row["lambda"]) * an["tas"])
            b += len(exp)
        np.testing.assert_allclose(np.concatenate(diagnosed), [float(r["erf"]) for r in rows], atol=2e-3)
        checked += 1
    assert checked >= 1


def test_second_scenario_is_lower_and_levels_off(noise_free, models):
    # Invented demo-steady: F_join + 1.0 (1 − e^(−s/25)) W m-2 (reference F2x), scaled by F2x/3.71 (the
    # generator's own definition, demo_ensemble/forcing.py); it starts where demo-rise starts, stays below it,
    # and its yearly rise shrinks by e^(−1/25) a year (leap years shift a month-length-weighted annual mean
    # by ~1e-3 of a year's change, as for demo-rise above).
    root, archive = noise_free
    with open(root / "scenario_forcing.csv", newline="") as fh:
        table = list(csv.DictReader(fh))
    for model in models:
        rise = np.array([float(r["erf"]) for r in table if r["model"] == model.source_id
                         and r["experiment_id"] == "demo-rise"])
        steady = np.array([float(r["erf"]) for r in table if r["model"] == model.source_id
                           and r["experiment_id"] == "demo-steady"])
        assert len(steady) == len(rise) == 10
        assert steady[0] == pytest.approx(rise[0], abs=0.02 * model.f2x / 3.71)
        assert np.all(steady[1:] < rise[1:])
        step = np.diff(steady)
        np.testing.assert_allclose(step[1:] / step[:-1], np.exp(-1 / 25), rtol=3e-3)
        assert len(run_files(archive, model.source_id, "demo-steady", "r1i1p1f1", "tas")) >= 1
    user = list(csv.DictReader(open(root / "user_forcing.csv", newline="")))
    assert len(user) == 251 and user[0]["year"] == "1915"
    values = np.array([float(r["erf"]) for r in user])
    assert values[0] < 0.05 and values.argmax() > 20  # starts near zero, peaks after the historical part


def test_reference_forcing_files_match_the_forcing_table(noise_free, models):
    # The generator's own bookkeeping (no outside source): forcing_<scenario>.csv is the reference forcing of
    # hist-demo then the scenario, the column erf_reference of scenario_forcing.csv (a mid-year value against a
    # month-length-weighted annual mean: equal to 1e-3 W m-2 on these smooth curves).
    root, _ = noise_free
    with open(root / "scenario_forcing.csv", newline="") as fh:
        table = [r for r in csv.DictReader(fh) if r["model"] == models[0].source_id]
    for scenario in ("demo-rise", "demo-steady"):
        with open(root / f"forcing_{scenario}.csv", newline="") as fh:
            rows = list(csv.DictReader(fh))
        expected = [float(r["erf_reference"]) for r in table if r["experiment_id"] in ("hist-demo", scenario)]
        assert [int(r["year"]) for r in rows][:2] == [1915, 1916] and len(rows) == len(expected) == 30
        np.testing.assert_allclose([float(r["erf"]) for r in rows], expected, atol=1e-3)
