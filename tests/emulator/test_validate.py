"""Leave-one-model-out validation on a synthetic ensemble whose pathways are a known smooth function of ECS."""
import numpy as np
import pytest

from sensemble.emulator.ensemble import EnsembleEmulator
from sensemble.emulator.settings import EmulatorSettings
from sensemble.emulator.training import load_training_set
from sensemble.emulator.validate import END_YEARS, end_of_pathway, leave_one_model_out, validation_table

from .synthetic import write_extract_dir


@pytest.fixture(scope="module")
def smooth_ensemble(tmp_path_factory):
    # 12 invented models, 13 runs (the first model has two members), 100-year scenario; all share the
    # heat capacities and F2x, so the noise-free pathway is a smooth function of ECS alone; AR(1) noise
    # of 0.08 K (lag-1 0.5) on top.
    path = tmp_path_factory.mktemp("smooth")
    write_extract_dir(path, n_models=12, n_years=100, seed=3, members={0: 2}, fixed_capacities=True)
    ts = load_training_set(path)
    estimator = EnsembleEmulator.from_settings(EmulatorSettings(max_components=4, n_restarts_optimizer=0))
    per_run, summary = leave_one_model_out(ts, estimator, n_samples=400, random_state=0)
    return ts, per_run, summary


def test_skill_and_coverage_on_smooth_ensemble(smooth_ensemble):
    # Acceptance check of issue 4 (project's own target, no outside source): end-of-pathway RMSE ≤ 0.10 K,
    # coverage of the 90 % interval within 0.75–1.0, on 12 models / 13 runs.
    ts, per_run, summary = smooth_ensemble
    assert summary["n_models"] == 12 and summary["n_runs"] == 13
    assert summary["end_rmse"] <= 0.10
    assert 0.75 <= summary["pathway_coverage90"] <= 1.0
    assert 0.75 <= summary["end_coverage90"] <= 1.0
    assert abs(summary["end_bias"]) < 0.05
    # standardized errors: mean near 0 and spread near 1 if the uncertainty is calibrated (common practice)
    assert abs(summary["mean_z"]) < 0.6 and 0.5 < summary["rms_z"] < 1.6


def test_members_held_out_together(smooth_ensemble):
    ts, per_run, _ = smooth_ensemble
    first = per_run[per_run["model"] == "TOY-01"]
    assert len(first) == 2 and set(first["n_train_runs"]) == {11}
    assert set(per_run.loc[per_run["model"] != "TOY-01", "n_train_runs"]) == {12}


def test_end_of_pathway_is_mean_of_last_ten_years(smooth_ensemble):
    ts, per_run, summary = smooth_ensemble
    assert END_YEARS == 10 and summary["end_years"] == 10
    np.testing.assert_allclose(per_run["end_actual"].to_numpy(), ts.Y[:, -10:].mean(axis=1))
    np.testing.assert_allclose(end_of_pathway(np.arange(20.0)), 14.5)


def test_validation_table_has_summary_row(smooth_ensemble):
    _, per_run, summary = smooth_ensemble
    table = validation_table(per_run, summary)
    assert list(table["model"])[-1] == "ALL" and len(table) == 14
    last = table.iloc[-1]
    assert last["end_rmse"] == pytest.approx(summary["end_rmse"])
    assert last["end_error"] == pytest.approx(summary["end_bias"])
    assert last["end_z"] == pytest.approx(summary["mean_z"])


def test_errors_and_standardized_errors_share_a_sign(smooth_ensemble):
    # validation.csv convention (issue 10): end_error and end_z are both predicted − actual, so each run's error
    # and z, and the ensemble's bias and mean z, have the same sign (common practice, no source).
    _, per_run, summary = smooth_ensemble
    np.testing.assert_array_equal(np.sign(per_run["end_error"]), np.sign(per_run["end_z"]))
    np.testing.assert_allclose(per_run["end_z"], per_run["end_error"] / per_run["end_sd"], rtol=1e-12)
    assert np.sign(summary["end_bias"]) == np.sign(summary["mean_z"])
