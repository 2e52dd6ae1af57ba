"""Tests of extractor/esm_catalogue.py: an ESM catalogue's JSON and CSV read into dataset facets."""
import json

import pytest

from sensemble.extractor.catalog import scan
from sensemble.extractor.esm_catalogue import CatalogueError, catalogue_facets
from sensemble.extractor.settings import ExtractionSettings


def write_catalogue(folder, rows, **spec):
    folder.mkdir(parents=True, exist_ok=True)
    header = list(rows[0])
    (folder / "cat.csv").write_text("\n".join([",".join(header)] + [",".join(str(r[h]) for h in header) for r in rows]))
    body = {"esmcat_version": "0.1.0", "id": "t", "catalog_file": "cat.csv", "attributes": [],
            "assets": {"column_name": "zstore", "format": "zarr"},
            "aggregation_control": {"variable_column_name": "variable_id", "groupby_attrs": [], "aggregations": []}}
    body.update(spec)
    (folder / "cat.json").write_text(json.dumps(body))
    return folder / "cat.json"


def test_cmip6_rows_give_facets_urls_kept_and_relative_paths_resolved(tmp_path):
    rows = [{"source_id": "TESTMODEL-1", "experiment_id": "piControl", "member_id": "r1i1p1f1", "table_id": "Amon",
             "variable_id": "tas", "grid_label": "gn", "version": "20260101", "zstore": "gs://bucket/tas/v20260101/"},
            {"source_id": "TESTMODEL-1", "experiment_id": "piControl", "member_id": "r1i1p1f1", "table_id": "Amon",
             "variable_id": "rlut", "grid_label": "gn", "version": "v20260101", "zstore": "stores/rlut"}]
    path = write_catalogue(tmp_path / "c", rows)
    problems = []
    tas, rlut = catalogue_facets(path, problems)
    assert tas.path == "gs://bucket/tas/v20260101/" and rlut.path == tmp_path / "c" / "stores" / "rlut"
    assert (tas.mip_era, tas.version, tas.grid_label, tas.origin) == ("CMIP6", "v20260101", "gn", f"esm catalogue {path}")
    assert problems == []


def test_cmip5_columns_and_generation_from_the_member(tmp_path):
    rows = [{"model": "TESTMODEL-5", "experiment": "abrupt4xCO2", "ensemble_member": "r1i1p1", "mip_table": "Amon",
             "variable": "tas", "path": "/data/tas_Amon_TESTMODEL-5_abrupt4xCO2_r1i1p1_185001-189912.nc"}]
    path = write_catalogue(tmp_path, rows, assets={"column_name": "path", "format": "netcdf"},
                           aggregation_control={"variable_column_name": "variable"})
    (facets,) = catalogue_facets(path, [])
    assert (facets.source_id, facets.experiment_id, facets.member_id, facets.mip_era, facets.time_range) == (
        "TESTMODEL-5", "abrupt4xCO2", "r1i1p1", "CMIP5", "185001-189912")


def test_unusable_rows_are_reported_and_an_unreadable_catalogue_is_a_problem_not_a_crash(tmp_path):
    rows = [{"source_id": "TESTMODEL-1", "experiment_id": "", "member_id": "r1i1p1f1", "table_id": "Amon",
             "variable_id": "tas", "grid_label": "gn", "version": "1", "zstore": "x"}]
    problems = []
    assert catalogue_facets(write_catalogue(tmp_path / "a", rows), problems) == []
    assert "row 2: no experiment_id" in problems[0]
    bad = write_catalogue(tmp_path / "b", rows, assets={})
    with pytest.raises(CatalogueError, match="assets.column_name"):
        catalogue_facets(bad, [])
    catalog = scan(bad, ExtractionSettings())
    assert catalog.runs == [] and "assets.column_name is missing" in catalog.problems[0]
