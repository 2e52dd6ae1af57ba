"""Tests of extractor/catalog.py: finding runs by file names (DRS and flat layouts)."""
from pathlib import Path

import pytest

from sensemble.extractor.catalog import parse_file_name, scan
from sensemble.extractor.settings import ExtractionSettings

MODEL = "TESTMODEL-1"


def touch(path: Path) -> Path:
    # scanning reads names only: empty files must do
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(b"")
    return path


def test_parse_file_name_with_hyphenated_experiment_and_time_range():
    facets = parse_file_name(Path("rlut_Amon_TESTMODEL-1_abrupt-4xCO2_r1i1p1f1_gn_185001-199912.nc"))
    assert (facets.variable_id, facets.table_id, facets.source_id) == ("rlut", "Amon", "TESTMODEL-1")
    assert (facets.experiment_id, facets.member_id, facets.grid_label) == ("abrupt-4xCO2", "r1i1p1f1", "gn")
    assert facets.time_range == "185001-199912"
    assert facets.version is None
    fx = parse_file_name(Path("areacella_fx_TESTMODEL-1_piControl_r1i1p1f1_gn.nc"))
    assert fx.time_range is None
    assert parse_file_name(Path("notes_about_this.nc")) is None
    assert parse_file_name(Path("tas_Amon_M_exp_r1i1p1f1_gn_notatime.nc")) is None


@pytest.mark.parametrize("layout", ["drs", "flat"])
def test_both_layouts_give_the_same_runs(tmp_path, cmip, layout):
    cmip.write_run(tmp_path, MODEL, "piControl", layout=layout, nyears=1, areacella=True)
    cmip.write_run(tmp_path, MODEL, "abrupt-4xCO2", layout=layout, nyears=1)
    catalog = scan(tmp_path)
    assert catalog.problems == []
    assert catalog.models() == [MODEL]
    assert [r.experiment_id for r in catalog.runs] == ["abrupt-4xCO2", "piControl"]
    run = catalog.get(MODEL, "r1i1p1f1", "abrupt-4xCO2")
    assert run.variables == ["tas", "rsdt", "rsut", "rlut"]
    assert all(len(files) == 1 for files in run.files.values())
    assert run.version == ("v20260101" if layout == "drs" else None)
    # cell areas published with the control serve every experiment of the model
    assert run.areacella is not None and "piControl" in run.areacella.name
    assert catalog.get(MODEL, "r1i1p1f1", "1pctCO2") is None


def test_newest_version_is_kept_and_recorded(tmp_path):
    for version in ("v20190101", "v20260315", "v20210601"):
        for var in ("tas", "rsdt", "rsut", "rlut"):
            folder = tmp_path / MODEL / "piControl" / "r1i1p1f1" / "Amon" / var / "gn" / version
            touch(folder / f"{var}_Amon_{MODEL}_piControl_r1i1p1f1_gn_185001-185912.nc")
    catalog = scan(tmp_path)
    (run,) = catalog.runs
    assert run.version == "v20260315"
    assert all(files[0].parent.name == "v20260315" for files in run.files.values())
    assert all(len(files) == 1 for files in run.files.values())


def test_missing_required_variable_is_reported(tmp_path, cmip):
    cmip.write_run(tmp_path, MODEL, "abrupt-4xCO2", variables=("tas", "rsdt", "rsut"), nyears=1)
    catalog = scan(tmp_path)
    assert catalog.problems == [f"model {MODEL} member r1i1p1f1: abrupt-4xCO2 has no rlut"]
    assert catalog.runs[0].variables == ["tas", "rsdt", "rsut"]


def test_optional_variables_missing_is_not_a_problem(tmp_path, cmip):
    cmip.write_run(tmp_path, MODEL, "piControl", variables=("tas", "rsdt", "rsut", "rlut", "rsutcs"), nyears=1)
    catalog = scan(tmp_path)
    assert catalog.problems == []
    assert "rsutcs" in catalog.runs[0].files


def test_unparsable_names_are_reported_not_dropped_silently(tmp_path):
    touch(tmp_path / "readme_file.nc")
    touch(tmp_path / f"tas_Amon_{MODEL}_piControl_r1i1p1f1_gn_185001-185912.nc")
    catalog = scan(tmp_path, ExtractionSettings(required_variables=("tas",)))
    assert len(catalog.problems) == 1
    assert "readme_file.nc" in catalog.problems[0] and "name does not follow" in catalog.problems[0]
    assert len(catalog.runs) == 1


def test_files_of_a_variable_sorted_by_time_range(tmp_path):
    for start, end in (("190001", "194912"), ("185001", "189912"), ("195001", "199912")):
        touch(tmp_path / f"tas_Amon_{MODEL}_piControl_r1i1p1f1_gn_{start}-{end}.nc")
    (run,) = scan(tmp_path).runs
    assert [p.name.split("_")[-1] for p in run.files["tas"]] == ["185001-189912.nc", "190001-194912.nc", "195001-199912.nc"]


def test_areacella_from_another_member_is_flagged_and_grid_must_match(tmp_path):
    touch(tmp_path / f"areacella_fx_{MODEL}_piControl_r2i1p1f1_gn.nc")
    touch(tmp_path / f"areacella_fx_{MODEL}_piControl_r1i1p1f1_gr.nc")
    touch(tmp_path / f"tas_Amon_{MODEL}_abrupt-4xCO2_r1i1p1f1_gn_185001-185912.nc")
    touch(tmp_path / "tas_Amon_OTHERMODEL-2_abrupt-4xCO2_r1i1p1f1_gn_185001-185912.nc")
    catalog = scan(tmp_path, ExtractionSettings(required_variables=("tas",)))
    run = catalog.get(MODEL, "r1i1p1f1", "abrupt-4xCO2")
    assert run.areacella.name == f"areacella_fx_{MODEL}_piControl_r2i1p1f1_gn.nc"
    assert run.flags == ["areacella_other_member"]
    assert catalog.get("OTHERMODEL-2", "r1i1p1f1", "abrupt-4xCO2").areacella is None


def test_same_member_areacella_preferred(tmp_path):
    touch(tmp_path / f"areacella_fx_{MODEL}_piControl_r2i1p1f1_gn.nc")
    touch(tmp_path / f"areacella_fx_{MODEL}_piControl_r1i1p1f1_gn.nc")
    touch(tmp_path / f"tas_Amon_{MODEL}_abrupt-4xCO2_r1i1p1f1_gn_185001-185912.nc")
    (run,) = scan(tmp_path, ExtractionSettings(required_variables=("tas",))).runs
    assert "r1i1p1f1" in run.areacella.name and run.flags == []


def test_include_and_exclude_models(tmp_path):
    for model in ("ALPHA-1", "BETA-2", "GAMMA-3"):
        touch(tmp_path / f"tas_Amon_{model}_piControl_r1i1p1f1_gn_185001-185912.nc")
    only = ExtractionSettings(required_variables=("tas",), include_models=("ALPHA-1", "GAMMA-3"))
    assert scan(tmp_path, only).models() == ["ALPHA-1", "GAMMA-3"]
    but = ExtractionSettings(required_variables=("tas",), exclude_models=("BETA-2",))
    assert scan(tmp_path, but).models() == ["ALPHA-1", "GAMMA-3"]


def test_members_and_experiments_listed(tmp_path):
    for member in ("r1i1p1f1", "r2i1p1f1"):
        for exp in ("piControl", "1pctCO2"):
            touch(tmp_path / f"tas_Amon_{MODEL}_{exp}_{member}_gn_185001-185912.nc")
    catalog = scan(tmp_path, ExtractionSettings(required_variables=("tas",)))
    assert catalog.members(MODEL) == ["r1i1p1f1", "r2i1p1f1"]
    assert catalog.experiments(MODEL, "r2i1p1f1") == ["1pctCO2", "piControl"]
    assert len(catalog.runs_of(MODEL)) == 4


def test_non_monthly_tables_skipped_with_a_problem(tmp_path):
    touch(tmp_path / f"tas_day_{MODEL}_piControl_r1i1p1f1_gn_18500101-18591231.nc")
    touch(tmp_path / f"tas_Amon_{MODEL}_piControl_r1i1p1f1_gn_185001-185912.nc")
    catalog = scan(tmp_path, ExtractionSettings(required_variables=("tas",)))
    (run,) = catalog.runs
    assert [p.name for p in run.files["tas"]] == [f"tas_Amon_{MODEL}_piControl_r1i1p1f1_gn_185001-185912.nc"]
    assert any("table day is not monthly" in p for p in catalog.problems)


def test_missing_root_is_a_problem(tmp_path):
    catalog = scan(tmp_path / "nowhere")
    assert catalog.runs == [] and "does not exist" in catalog.problems[0]


# --- CMIP5 names and directories, Zarr stores (issue 11) -------------------------------------

def test_cmip5_names_have_no_grid_label_and_the_date_range_is_not_one():
    facets = parse_file_name(Path("tas_Amon_TESTMODEL-5_abrupt4xCO2_r1i1p1_185001-199912.nc"))
    assert (facets.mip_era, facets.grid_label, facets.time_range, facets.member_id) == (
        "CMIP5", "", "185001-199912", "r1i1p1")
    fixed = parse_file_name(Path("areacella_fx_TESTMODEL-5_piControl_r0i0p0.nc"))
    assert (fixed.mip_era, fixed.table_id, fixed.time_range) == ("CMIP5", "fx", None)
    cmip6 = parse_file_name(Path("areacella_fx_TESTMODEL-1_piControl_r1i1p1f1_gn.nc"))
    assert (cmip6.mip_era, cmip6.grid_label) == ("CMIP6", "gn")


def test_cmip5_tree_groups_time_chunks_into_one_run_with_r0i0p0_areas(tmp_path):
    base = tmp_path / "output1" / "INST" / "TESTMODEL-5" / "abrupt4xCO2" / "mon" / "atmos" / "Amon" / "r1i1p1"
    for version in ("v20110101", "v20120101"):
        for chunk in ("185001-189912", "190001-194912"):
            touch(base / version / "tas" / f"tas_Amon_TESTMODEL-5_abrupt4xCO2_r1i1p1_{chunk}.nc")
    touch(tmp_path / "output1" / "INST" / "TESTMODEL-5" / "piControl" / "fx" / "atmos" / "fx" / "r0i0p0" / "v1" /
          "areacella" / "areacella_fx_TESTMODEL-5_piControl_r0i0p0.nc")
    catalog = scan(tmp_path, ExtractionSettings(required_variables=("tas",)))
    (run,) = catalog.runs
    assert (run.model, run.member, run.experiment_id, run.mip_era, run.version) == (
        "TESTMODEL-5", "r1i1p1", "abrupt4xCO2", "CMIP5", "v20120101")
    assert [p.parent.parent.name for p in run.files["tas"]] == ["v20120101", "v20120101"] and len(run.files["tas"]) == 2
    assert run.areacella.name == "areacella_fx_TESTMODEL-5_piControl_r0i0p0.nc" and run.flags == []


def test_zarr_stores_are_found_by_their_directories_or_names(tmp_path):
    store = tmp_path / MODEL / "piControl" / "r1i1p1f1" / "Amon" / "tas" / "gn" / "v20260101"
    touch(store / ".zgroup")
    touch(store / "tas" / "0.0.0")
    named = tmp_path / "flat" / f"rlut_Amon_{MODEL}_piControl_r1i1p1f1_gn.zarr"
    touch(named / "zarr.json")
    catalog = scan(tmp_path, ExtractionSettings(required_variables=("tas", "rlut")))
    (run,) = catalog.runs
    assert run.files == {"tas": [store], "rlut": [named]} and run.origin == "zarr" and catalog.problems == []
