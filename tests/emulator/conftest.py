"""Fixtures: a synthetic extractor output folder (see synthetic.py), built once per session."""
import pytest

from .synthetic import write_extract_dir


@pytest.fixture(scope="session")
def extract_dir(tmp_path_factory):
    """10 invented models (3 of them with two members), 100-year scenario, AR(1) noise."""
    path = tmp_path_factory.mktemp("extract")
    truth = write_extract_dir(path, n_models=10, n_years=100, seed=0)
    return path, truth
