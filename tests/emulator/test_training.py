"""Reading an extractor output folder into a training set (contract: DEVELOPERS.md, Internal contracts)."""
import numpy as np
import pandas as pd
import pytest

from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.training import available_scenarios, load_training_set

from .synthetic import SCENARIO, write_extract_dir, write_series


def test_reads_inputs_targets_and_series(extract_dir):
    path, truth = extract_dir
    ts = load_training_set(path)
    table = pd.read_csv(path / "sensitivity.csv")
    assert ts.scenario == SCENARIO
    assert ts.X.shape == (13, 1) and ts.Y.shape == (13, 100)
    np.testing.assert_allclose(ts.X[:, 0], table["ecs_eff"])
    assert list(ts.years[:2]) == [1, 2] and list(ts.calendar_years[:2]) == [2001, 2002]
    assert len(ts.abrupt_tas[0]) == 150 and len(ts.control_tas[0]) == 200
    assert ts.skipped.empty
    # the targets are the scenario warming: common practice, no source — warmer for larger ECS at the end
    end = ts.Y[:, -10:].mean(axis=1)
    assert np.corrcoef(end, ts.X[:, 0])[0, 1] > 0.9


def test_two_inputs(extract_dir):
    ts = load_training_set(extract_dir[0], inputs=("ecs_eff", "tcr"))
    assert ts.X.shape == (13, 2)


def test_unknown_input_column_is_named(extract_dir):
    with pytest.raises(EmulatorInputError, match="no_such"):
        load_training_set(extract_dir[0], inputs=("no_such",))


def test_missing_and_ambiguous_scenarios_list_the_available(tmp_path):
    write_extract_dir(tmp_path, n_models=3, n_years=20, members={}, extra_scenarios=("scen-flat",),
                      abrupt_years=40, control_years=40)
    assert available_scenarios(tmp_path) == {SCENARIO: 3, "scen-flat": 3}
    with pytest.raises(EmulatorInputError, match="several scenarios: scen-flat, scen-rise"):
        load_training_set(tmp_path)
    with pytest.raises(EmulatorInputError, match="'nope' not found; available: scen-flat, scen-rise"):
        load_training_set(tmp_path, scenario="nope")
    assert load_training_set(tmp_path, scenario="scen-flat").n_runs == 3


def test_bad_runs_are_skipped_and_recorded(tmp_path):
    write_extract_dir(tmp_path, n_models=4, n_years=20, members={}, abrupt_years=40, control_years=40)
    table = pd.read_csv(tmp_path / "sensitivity.csv")
    table.loc[1, "ecs_eff"] = np.nan
    table.to_csv(tmp_path / "sensitivity.csv", index=False)
    short = np.zeros(15)
    write_series(tmp_path / "series" / "TOY-03_r1i1p1f1.nc", "TOY-03", "r1i1p1f1",
                 {SCENARIO: ("scenario", short, short, 2001), "abrupt-4xCO2": ("abrupt", short, short, 1)})
    (tmp_path / "series" / "TOY-04_r1i1p1f1.nc").unlink()
    ts = load_training_set(tmp_path)
    assert list(ts.models) == ["TOY-01"]
    reasons = dict(zip(ts.skipped["model"], ts.skipped["reason"]))
    assert reasons["TOY-02"] == "missing input ecs_eff"
    assert "15 years, most runs 20" in reasons["TOY-03"]
    assert "no series file" in reasons["TOY-04"]


def test_subset_keeps_labels_aligned(extract_dir):
    ts = load_training_set(extract_dir[0])
    sub = ts.subset(ts.models != "TOY-01")
    assert sub.n_runs == 11 and "TOY-01" not in set(sub.models)
    i = list(ts.models).index("TOY-02")
    np.testing.assert_array_equal(sub.Y[0], ts.Y[i])
    assert len(sub.abrupt_tas) == 11


def test_forcing_ratio_read_from_the_series_files(tmp_path):
    # The extraction records forcing_ratio (erf_4x / F2x) in each series file; absent, 2 is assumed and flagged,
    # never silently (issue 10); the mean's F2x is the calibrated 4x forcing over that ratio.
    import netCDF4

    from sensemble.emulator.ensemble import EnsembleEmulator

    write_extract_dir(tmp_path, n_models=5, n_years=40, seed=2, members={})
    ts = load_training_set(tmp_path)
    assert ts.forcing_ratio == 2.0 and ts.flags == ("forcing_ratio_assumed",)
    est = EnsembleEmulator(max_components=2).fit(ts)
    assert any("forcing_ratio" in note for note in est.notes_)
    for path in (tmp_path / "series").glob("*.nc"):
        with netCDF4.Dataset(path, "a") as nc:
            nc.forcing_ratio = 2.5
    ts = load_training_set(tmp_path)
    assert ts.forcing_ratio == 2.5 and ts.flags == ()
    est2 = EnsembleEmulator(max_components=2).fit(ts)
    assert est2.mean_parameters_["f2x"] == pytest.approx(est.mean_parameters_["f2x"] * 2 / 2.5, rel=1e-12)
