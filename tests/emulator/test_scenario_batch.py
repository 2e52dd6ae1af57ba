"""Several scenarios in one batch: archive experiments through both routes, files through the parameter route."""
import numpy as np
import pandas as pd
import pytest
from compliance_checker.runner import CheckSuite

from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.scenario_batch import emulate_pathways, format_pathways_summary, pathway_specs
from sensemble.emulator.settings import EmulatorSettings, PredictionSettings

from tests.test_cf_outputs import assert_cf_clean

from .synthetic import SCENARIO, write_extract_dir

FAST = dict(n_restarts_optimizer=0, validation_samples=200)


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    root = tmp_path_factory.mktemp("batch")
    src = root / "extract"
    truth = write_extract_dir(src, n_models=6, n_years=60, members={0: 2}, extra_scenarios=("scen-copy",),
                              control_years=80)
    # the scenario's true forcing (the same for every invented model here, so no F2x scaling)
    pd.DataFrame({"year": np.arange(2001, 2061), "erf": truth["scenario_forcing"]}).to_csv(root / "known.csv",
                                                                                            index=False)
    years = np.arange(2001, 2252)
    pd.DataFrame({"year": years, "erf": 4.0 * (1 - np.exp(-(years - 2000) / 60.0))}).to_csv(root / "erf.csv",
                                                                                              index=False)
    pd.DataFrame({"year": years, "co2": 278.0 * 1.004 ** (years - 2000)}).to_csv(root / "co2.csv", index=False)
    settings = EmulatorSettings(pathways=(
        {"experiment": SCENARIO, "forcing_file": str(root / "known.csv")},
        {"name": "copy-gp", "experiment": "scen-copy", "route": "gp"},
        {"name": "user", "forcing_file": str(root / "erf.csv")},
        {"name": "co2-path", "co2_file": str(root / "co2.csv")},
    ), **FAST)
    prediction = PredictionSettings(cases=({"name": "likely", "ecs_eff": {"distribution": "lognormal", "median": 3.0,
                                                                           "likely": [2.5, 4.0]}},),
                                    n_samples=300, figures=True)
    summary = emulate_pathways(src, root / "out", settings, prediction)
    return root / "out", summary


def test_outputs_are_keyed_by_scenario_and_route(batch):
    # Issue 13: one command, every scenario; the route that produced each pathway is in the outputs
    out, summary = batch
    pathways = pd.read_csv(out / "pathways.csv")
    assert list(pathways.columns[:3]) == ["scenario", "route", "case"]
    assert set(pathways["scenario"]) == {SCENARIO, "copy-gp", "user", "co2-path"}
    routes = pathways.groupby("scenario")["route"].first()
    assert routes["copy-gp"] == "gp" and routes["user"] == "parameters" and routes["co2-path"] == "parameters"
    # the whole user pathway, 251 years, never cut to the runs' 60
    user = pathways[(pathways["scenario"] == "user") & (pathways["case"] == "likely")]
    assert len(user) == 251 and user["calendar_year"].iloc[-1] == 2251
    crossings = pd.read_csv(out / "crossings.csv")
    assert {"scenario", "route", "threshold", "year_q50", "probability"} <= set(crossings.columns)
    for name in ("scenarios.csv", "crossing_ecs.csv", "validation.csv", "calibration.csv",
                 "figures/crossing_ecs.png", "figures/scenarios.png", "figures/validation_routes.png"):
        assert (out / name).exists(), name
    assert "route" in format_pathways_summary(summary)
    # the CF form of each scenario's pathways, whole length, with the route that produced it
    import xarray as xr
    with xr.open_dataset(out / "pathways_user.nc") as ds:
        assert ds.sizes["year"] == 251 and ds.attrs["route"] == "parameters" and ds.attrs["scenario"] == "user"


def test_both_routes_validated_and_the_better_one_chosen(batch):
    # Leave-one-model-out of both routes on the archive's scenario (common practice, no source); "auto"
    # takes the smaller end-of-pathway RMSE
    out, summary = batch
    validation = pd.read_csv(out / "validation.csv")
    total = validation[(validation["model"] == "ALL") & (validation["scenario"] == SCENARIO)]
    assert set(total["route"]) == {"gp", "parameters"}
    best = total.loc[total["end_rmse"].idxmin(), "route"]
    scenarios = pd.read_csv(out / "scenarios.csv").set_index("scenario")
    assert scenarios.loc[SCENARIO, "route"] == best
    assert scenarios.loc["user", "n_years"] == 251
    # the copy with route = gp is validated with the gp route only
    assert set(validation[validation["scenario"] == "copy-gp"]["route"]) == {"gp"}
    # with the scenario's known forcing no run of the scenario is used, and held-out models are still
    # predicted within a few tenths of a kelvin (common practice, no source)
    held = validation[(validation["holdout"] == "scenario") & (validation["model"] == "ALL")]
    assert len(held) == 1 and held["scenario"].iloc[0] == SCENARIO and held["end_rmse"].iloc[0] < 0.3


def test_crossing_year_moves_earlier_with_ecs(batch):
    # Common practice, no source: a more sensitive climate crosses a warming level no later
    out, _ = batch
    table = pd.read_csv(out / "crossing_ecs.csv")
    user = table[(table["scenario"] == "user") & (table["threshold"] == 1.5)].sort_values("ecs_eff")
    years = user["year_q50"].dropna().to_numpy()
    assert len(years) >= 5 and np.all(np.diff(years) <= 0)


def test_bad_specs_are_one_line(tmp_path):
    (tmp_path / "f.csv").write_text("year,erf\n1,0\n")
    with pytest.raises(EmulatorInputError, match="an experiment may add one file"):
        pathway_specs([{"name": "x", "forcing_file": str(tmp_path / "f.csv"), "co2_file": str(tmp_path / "f.csv")}])
    with pytest.raises(EmulatorInputError, match="forcing_f2x must be a positive number"):
        pathway_specs([{"experiment": "a", "forcing_file": str(tmp_path / "f.csv"), "forcing_f2x": -3}])
    with pytest.raises(EmulatorInputError, match="gp route needs the scenario's runs"):
        pathway_specs([{"forcing_file": str(tmp_path / "f.csv"), "route": "gp"}])
    with pytest.raises(EmulatorInputError, match="'nope' is not in the archive"):
        pathway_specs([{"experiment": "nope"}], {"scen-rise": 3})
    with pytest.raises(EmulatorInputError, match="route 'fast'"):
        pathway_specs([{"experiment": "scen-rise", "route": "fast"}])


def test_each_scenarios_netcdf_is_cf_clean(batch):
    # source: the IOOS compliance checker, suite cf:1.11 — no error, no warning (tests/test_cf_outputs.py)
    out, _ = batch
    suite = CheckSuite()
    suite.load_all_available_checkers()
    files = sorted(out.glob("pathways_*.nc"))
    assert len(files) == 4
    for path in files:
        assert_cf_clean(suite, path)
