"""The series-file schema as the extractor writes it: the names of the contract, forcing_ratio recorded."""
import dataclasses
import doctest

import netCDF4
import pytest

import sensemble.contract.series as schema
from sensemble.contract.table import ECS_INTERVAL_METHODS, TABLE_NC
from sensemble.extractor.pipeline import extract
from tests.extractor.test_pipeline import SETTINGS, write_model


def test_docstring_examples_run():
    assert doctest.testmod(schema).failed == 0


def test_role_attribute_only_for_single_roles():
    assert [schema.role_attribute(r) for r in schema.SINGLE_ROLES] == ["role_control", "role_abrupt", "role_onepct"]
    with pytest.raises(ValueError):
        schema.role_attribute(schema.SCENARIO)


@pytest.fixture(scope="module")
def extracted(tmp_path_factory):
    root = tmp_path_factory.mktemp("archive")
    write_model(root, "ALDER-1")
    out = tmp_path_factory.mktemp("out")
    settings = dataclasses.replace(SETTINGS, forcing_ratio=1.9, tcr_years=(2, 6))
    extract(root, out, settings, progress=False, figures=False)
    return out


def test_series_file_speaks_the_schema(extracted):
    with netCDF4.Dataset(extracted / schema.SERIES_FOLDER / "ALDER-1_r1i1p1f1.nc") as nc:
        assert nc.getncattr(schema.MODEL) == "ALDER-1" and nc.getncattr(schema.MEMBER) == "r1i1p1f1"
        assert nc.getncattr(schema.FORCING_RATIO) == pytest.approx(1.9)
        for role in schema.SINGLE_ROLES:
            group = nc.groups[nc.getncattr(schema.role_attribute(role))]
            assert group.getncattr(schema.ROLE) == role
            assert {schema.TAS, schema.RTNT} <= set(group.variables) <= set(schema.VARIABLES) | {
                schema.YEAR, schema.CALENDAR_YEAR}


def test_table_records_forcing_ratio_and_the_configured_windows(extracted):
    with netCDF4.Dataset(extracted / TABLE_NC) as nc:
        assert nc.getncattr("forcing_ratio") == pytest.approx(1.9)
        assert "years 2-6 of the 1 % per year CO2 run" in nc.variables["tcr"].long_name
        # the interval's long name says how the extractor formed it (issue 9, item 8)
        method = ECS_INTERVAL_METHODS[SETTINGS.ecs_interval]
        assert method in nc.variables["ecs_eff_q05"].long_name and method in nc.variables["ecs_late_q95"].long_name
        assert nc.variables["ecs_eff_q95"].long_name.startswith("upper end (95 %)")
