"""Planning: units from the catalogue, and `[archive] scenarios` narrowing what is read."""
import dataclasses

import netCDF4
import pytest

from sensemble.extractor.catalog import scan
from sensemble.extractor.pipeline import extract
from sensemble.extractor.units import plan_units
from tests.extractor.conftest import write_run
from tests.extractor.test_pipeline import SETTINGS, write_model

BRANCH = {"branch_time_in_parent": 3650.0, "parent_time_units": "days since 1850-01-01 00:00:00",
          "parent_variant_label": "r1i1p1f1"}


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    """One model with a scenario branching from the control, a historical-type run continued by a scenario,
    and an unlisted scenario whose files are not NetCDF at all."""
    root = tmp_path_factory.mktemp("archive")
    write_model(root, "ALDER-1")
    write_run(root, "ALDER-1", "scen-direct", nyears=5, attrs={"parent_experiment_id": "piControl", **BRANCH})
    write_run(root, "ALDER-1", "hist-like", nyears=5, attrs={"parent_experiment_id": "piControl", **BRANCH})
    write_run(root, "ALDER-1", "scen-chained", nyears=5, start_year=1855,
              attrs={"parent_experiment_id": "hist-like", "branch_time_in_parent": 1825.0,
                     "parent_time_units": "days since 1850-01-01 00:00:00"})
    for path in write_run(root, "ALDER-1", "scen-left", nyears=5, attrs={"parent_experiment_id": "piControl", **BRANCH}):
        path.write_bytes(b"this is not a NetCDF file")
    return root


NARROW = dataclasses.replace(SETTINGS, scenarios=("scen-direct", "scen-chained"))


def test_planning_keeps_listed_scenarios_and_the_runs_they_continue(archive):
    units, failures = plan_units(scan(archive, NARROW), NARROW)
    assert not failures and len(units) == 1
    assert sorted(r.experiment_id for r in units[0].others) == ["hist-like", "scen-chained", "scen-direct"]


def test_planning_without_the_setting_keeps_every_run(archive):
    units, _ = plan_units(scan(archive, SETTINGS), SETTINGS)
    assert sorted(r.experiment_id for r in units[0].others) == ["hist-like", "scen-chained", "scen-direct",
                                                                 "scen-left"]


def test_unlisted_scenarios_are_never_opened(archive, tmp_path):
    # the unlisted run's files are not NetCDF: reading them would be a recorded failure (second extraction)
    narrow = extract(archive, tmp_path / "narrow", NARROW, progress=False, figures=False)
    assert narrow.ok, [f.message for f in narrow.failures]
    with netCDF4.Dataset(tmp_path / "narrow" / "series" / "ALDER-1_r1i1p1f1.nc") as nc:
        assert set(nc.groups) == {"piControl", "abrupt-4xCO2", "1pctCO2", "scen-direct", "scen-chained"}
        assert nc.getncattr("scenarios") == "scen-chained;scen-direct"
        assert nc.groups["scen-chained"].getncattr("chain") == "hist-like;scen-chained"
    everything = extract(archive, tmp_path / "all", SETTINGS, progress=False, figures=False)
    assert [f.what for f in everything.failures] == ["scen-left"]


def test_batch_entry_importable_from_the_stage():
    from sensemble.extractor import extract as from_stage

    assert from_stage is extract
