"""EnsembleEmulator: the whole learning chain in one estimator, cloneable, with declared parameter constraints."""
import numpy as np
import pytest
from sklearn.base import clone

from sensemble.emulator.ensemble import EnsembleEmulator
from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.settings import EmulatorSettings
from sensemble.emulator.training import load_training_set


@pytest.fixture(scope="module")
def training(extract_dir):
    return load_training_set(extract_dir[0])


def test_clone_refits_to_the_same_predictions(training):
    # scikit-learn estimator contract (sklearn.base.clone, reference library): a clone carries the parameters
    # only, and fitting it to the same data learns the same emulator.
    est = EnsembleEmulator(max_components=3, n_restarts_optimizer=0).fit(training)
    copy = clone(est)
    assert not hasattr(copy, "emulator_") and copy.get_params() == est.get_params()
    copy.fit(training)
    x = [[2.7], [4.1]]
    for a, b in zip(est.predict(x, return_std=True), copy.predict(x, return_std=True)):
        np.testing.assert_array_equal(a, b)
    # everything learned ends in "_"; one GP point per model (10 models, 13 runs)
    assert len(est.models_) == 10 and est.emulator_.X_train_.shape == (10, 1)
    assert list(est.calibration_["status"]) == ["ok"] * 13
    assert 3.4 < est.mean_parameters_["f2x"] < 4.0 and est.forcing_.shape == (100,)
    assert est.internal_variability_[0] > 0


def test_subset_fit_learns_only_from_the_subset(training):
    keep = training.models != training.models[0]
    sub = EnsembleEmulator(max_components=3, n_restarts_optimizer=0).fit(training.subset(keep))
    assert len(sub.models_) == 9 and training.models[0] not in set(sub.models_)
    assert len(sub.calibration_) == int(keep.sum())


def test_from_settings_and_constraints_checked_before_data():
    est = EnsembleEmulator.from_settings(EmulatorSettings(kernel="rbf", max_components=2))
    assert est.kernel == "rbf" and est.max_components == 2
    for bad, match in ((dict(smoothing="gausian"), "smoothing"), (dict(n_restarts_optimizer=-3), "n_restarts"),
                       (dict(variance_kept=1.5), "variance_kept"), (dict(forcing_source="file"), "forcing_file")):
        with pytest.raises(EmulatorInputError, match=match):
            EnsembleEmulator(**bad).fit(None)  # refused before the training set is looked at
    with pytest.raises(EmulatorInputError, match="not fitted"):
        EnsembleEmulator().predict([[3.0]])
