"""Saved emulators: exact round trip, refusal of altered or foreign files."""
import netCDF4
import numpy as np
import pytest

from sensemble.emulator.errors import EmulatorInputError
from sensemble.emulator.gp import PathwayEmulator
from sensemble.emulator.persist import load_emulator, save_emulator

from .test_gp import MEAN, step_ensemble


@pytest.fixture(scope="module")
def fitted():
    ecs = np.linspace(2.0, 5.0, 8)
    Y = step_ensemble(ecs, 50, noise=0.08, seed=4)
    return PathwayEmulator(internal_variability=(0.08, 0.5), max_components=4).fit(
        ecs[:, None], Y, forcing=np.full(50, 3.71), mean_params=MEAN)


def test_round_trip_is_exact(fitted, tmp_path):
    # Persistence contract (DEVELOPERS.md): loading rebuilds predictions identically — exact equality.
    path = save_emulator(fitted, tmp_path / "emulator.nc", metadata={"scenario": "scen-rise", "models": ["TOY-01"]})
    loaded, meta = load_emulator(path)
    X = np.array([[2.2], [3.7], [6.0]])
    for a, b in zip(fitted.predict(X, return_std=True), loaded.predict(X, return_std=True)):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(fitted.sample_paths(X, 50, random_state=3), loaded.sample_paths(X, 50, random_state=3))
    assert meta == {"scenario": "scen-rise", "models": ["TOY-01"]}
    assert loaded.get_params() == fitted.get_params()
    assert not list(tmp_path.glob("*.part"))  # written atomically, nothing left behind


def test_tampered_file_refused(fitted, tmp_path):
    path = save_emulator(fitted, tmp_path / "emulator.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc["Y_train_"][0, 10] = nc["Y_train_"][0, 10] + 0.5
    with pytest.raises(EmulatorInputError, match="checksum mismatch"):
        load_emulator(path)


def test_other_version_and_foreign_file_refused(fitted, tmp_path):
    path = save_emulator(fitted, tmp_path / "emulator.nc")
    with netCDF4.Dataset(path, "a") as nc:
        nc.format_version = 99
    with pytest.raises(EmulatorInputError, match="format version 99"):
        load_emulator(path)
    other = tmp_path / "other.nc"
    with netCDF4.Dataset(other, "w") as nc:
        nc.title = "something else"
    with pytest.raises(EmulatorInputError, match="not a saved pathway emulator"):
        load_emulator(other)
