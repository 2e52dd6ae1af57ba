"""A whole extraction on a tiny generated archive: contract files, exact recovery, failure isolation, cache."""
import csv
import dataclasses

import netCDF4
import numpy as np
import pytest

from sensemble.extractor.pipeline import extract
from sensemble.extractor.settings import ExtractionSettings
from tests.extractor.conftest import write_run

CONTROL_YEARS, ABRUPT_YEARS = 60, 40
F4X, LAMBDA = 7.0, -1.75
SETTINGS = ExtractionSettings(fit_years=(1, 40), early_years=(1, 10), late_years=(11, 40), tcr_years=(1, 5),
                              bootstrap_samples=200)


def _delta_t(year):
    return 4.0 * (1.0 - np.exp(-year / 5.0))


def write_model(root, model, leak=0.8, drop=None, branch_year=10):
    """Control with a linear drift and an energy leak; an abrupt run exactly on a Gregory line.

    Values are constant within each year, so annual means are exact in any calendar.
    """
    months_c = np.arange(CONTROL_YEARS * 12)
    year_c = months_c // 12
    tas_c = 287.0 + 0.002 * year_c
    n_c = leak - 0.003 * year_c
    write_run(root, model, "piControl", nyears=CONTROL_YEARS, start_year=1850, areacella=True,
              values={"tas": tas_c, "rsdt": np.full(months_c.size, 340.0), "rsut": np.full(months_c.size, 100.0),
                      "rlut": 240.0 - n_c})
    year_a = np.arange(ABRUPT_YEARS * 12) // 12
    ctl_year = year_a + branch_year
    d_t = _delta_t(year_a + 1)
    tas_a = 287.0 + 0.002 * ctl_year + d_t
    n_a = leak - 0.003 * ctl_year + F4X + LAMBDA * d_t
    variables = ("tas", "rsdt", "rsut", "rlut")
    if drop:
        variables = tuple(v for v in variables if v != drop)
    attrs = {"parent_experiment_id": "piControl", "branch_time_in_parent": 365.0 * branch_year,
             "parent_time_units": "days since 1850-01-01 00:00:00", "parent_variant_label": "r1i1p1f1"}
    write_run(root, model, "abrupt-4xCO2", variables=variables, nyears=ABRUPT_YEARS, start_year=1850,
              attrs=attrs,
              values={"tas": tas_a, "rsdt": np.full(year_a.size, 340.0), "rsut": np.full(year_a.size, 100.0),
                      "rlut": 240.0 - n_a})
    write_run(root, model, "1pctCO2", nyears=10, start_year=1850, attrs=attrs,
              values={"tas": 287.0 + 0.002 * (np.arange(120) // 12 + branch_year) + 0.1 * (np.arange(120) // 12 + 1)})


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    root = tmp_path_factory.mktemp("archive")
    write_model(root, "ALDER-1")
    write_model(root, "BIRCH-2", leak=0.1, branch_year=15)
    write_model(root, "CEDAR-3", drop="rlut")
    return root


@pytest.fixture(scope="module")
def result(archive, tmp_path_factory):
    out = tmp_path_factory.mktemp("out")
    return extract(archive, out, SETTINGS, progress=False)


def test_contract_files_written(result):
    out = result.out_dir
    for name in ("sensitivity.csv", "sensitivity.nc", "report.md", "series/ALDER-1_r1i1p1f1.nc",
                 "figures/gregory_ALDER-1_r1i1p1f1.png", "figures/ensemble_summary.png"):
        assert (out / name).exists(), name
    assert not list(out.rglob("*.part"))


def test_exact_gregory_line_recovered_after_drift_removal(result):
    # Gregory et al. (2004): on data exactly on ΔN = F + λΔT the OLS fit returns F and λ; the control's
    # linear drift is removed exactly by the linear drift fit (common practice, no source). The files hold
    # float32 (≈ 7 significant digits of ~300 W m-2), hence 1e-4 rather than machine precision.
    rows = {r["model"]: r for r in result.rows}
    for model in ("ALDER-1", "BIRCH-2"):
        row = rows[model]
        assert row["erf_4x"] == pytest.approx(F4X, abs=1e-4)
        assert row["feedback"] == pytest.approx(LAMBDA, abs=1e-4)
        assert row["ecs_eff"] == pytest.approx(F4X / (2 * 1.75), abs=1e-4)
        assert row["feedback_change"] == pytest.approx(0.0, abs=1e-3)
        assert row["tcr"] == pytest.approx(0.3, abs=1e-4)  # mean of 0.1·(1..5)
        assert row["n_years"] == 40


def test_energy_leak_flagged_only_where_the_control_leaks(result):
    rows = {r["model"]: r for r in result.rows}
    assert "energy_leak" in rows["ALDER-1"]["flags"]
    assert "energy_leak" not in rows["BIRCH-2"]["flags"]


def test_model_missing_a_variable_fails_alone_and_is_named(result):
    assert {r["model"] for r in result.rows} == {"ALDER-1", "BIRCH-2"}
    failed = [f for f in result.failures if f.model == "CEDAR-3"]
    assert failed and "rlut" in failed[0].message and "abrupt-4xCO2" in failed[0].message
    report = (result.out_dir / "report.md").read_text()
    assert "CEDAR-3" in report and "rlut" in report


def test_series_file_has_one_group_per_experiment(result):
    with netCDF4.Dataset(result.out_dir / "series" / "ALDER-1_r1i1p1f1.nc") as nc:
        assert set(nc.groups) == {"piControl", "abrupt-4xCO2", "1pctCO2"}
        abrupt = nc.groups["abrupt-4xCO2"]
        assert abrupt.role == "abrupt"
        assert list(abrupt["year"][:3]) == [1, 2, 3]
        np.testing.assert_allclose(abrupt["tas"][:], _delta_t(np.arange(1, 41)), atol=1e-4)


def test_rerun_reuses_cache_and_gives_identical_table(result, archive):
    first = (result.out_dir / "sensitivity.csv").read_text()
    again = extract(archive, result.out_dir, SETTINGS, progress=False)
    assert sorted(again.cached) == ["ALDER-1_r1i1p1f1", "BIRCH-2_r1i1p1f1"]
    assert (result.out_dir / "sensitivity.csv").read_text() == first
    changed = extract(archive, result.out_dir, dataclasses.replace(SETTINGS, bootstrap_samples=150), progress=False)
    assert changed.cached == []  # settings changed → recomputed


def test_csv_header(result):
    with open(result.out_dir / "sensitivity.csv") as fh:
        assert next(csv.reader(fh))[:3] == ["model", "member", "erf_4x"]


def test_ecs_intervals_of_an_exact_line_shrink_to_the_estimates(result):
    # Data exactly on a Gregory line with a noise-free control: no noise, so the Fieller intervals of ecs_eff and
    # ecs_late (after the contract's columns) close on the estimates (Fieller 1954, from memory); the table
    # states the method (float32 files: 1e-4 slack as above)
    with open(result.out_dir / "sensitivity.csv") as fh:
        header = next(csv.reader(fh))
        assert header[header.index("ecs_late_q05") + 1] == "ecs_late_q95"
    for row in result.rows:
        for name in ("ecs_eff", "ecs_late"):
            assert row[f"{name}_q05"] == pytest.approx(row[name], abs=1e-4)
            assert row[f"{name}_q95"] == pytest.approx(row[name], abs=1e-4)
    with netCDF4.Dataset(result.out_dir / "sensitivity.nc") as nc:
        assert nc.ecs_interval_method.startswith("Fieller interval")
        assert "ecs_interval_method" in nc["ecs_late_q95"].long_name


def test_orthogonal_fit_and_short_onepct_run(archive, tmp_path):
    # On points exactly on a line the orthogonal-distance fit (scipy.odr) and OLS agree (common practice, no
    # source); a 1 % run shorter than the TCR window leaves tcr empty with a flag, the Gregory results stand.
    settings = dataclasses.replace(SETTINGS, orthogonal_fit=True, tcr_years=(1, 50))
    result = extract(archive, tmp_path, settings, progress=False, figures=False)
    row = {r["model"]: r for r in result.rows}["ALDER-1"]
    assert row["ecs_eff_odr"] == pytest.approx(row["ecs_eff"], abs=1e-3)
    assert row["feedback_odr"] == pytest.approx(LAMBDA, abs=1e-3)
    assert row["tcr"] is None and "onepct_short" in row["flags"]
    assert row["ecs_eff"] == pytest.approx(F4X / (2 * 1.75), abs=1e-4)
