"""Security: output paths stay inside the output folder whatever the archive's names say, and cached
results are data (NetCDF attributes + JSON) that a tampered or garbled cache cannot turn into code or
into wrong numbers."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import netCDF4
import pytest

from sensemble.contract.names import safe_name
from tests.faults.conftest import MODELS, MEMBER, rows_by_model, run_extract, set_attrs, write_model


@pytest.mark.parametrize("name", ["../../x", "..", "/etc/passwd", "a/../../b", "..\\..\\c", ".hidden", "", "x\0y"])
def test_safe_name_cannot_climb_or_hide(name):
    cleaned = safe_name(name)
    assert cleaned and "/" not in cleaned and "\\" not in cleaned and "\0" not in cleaned
    assert not cleaned.startswith(".")
    assert Path("/out/series", cleaned + ".nc").resolve().parent == Path("/out/series")


def files_under(root: Path) -> set[Path]:
    return {p for p in root.rglob("*") if p.is_file()}


def test_hostile_model_names_write_only_inside_the_output_folder(tmp_path):
    archive = tmp_path / "archive"
    # a model whose files claim source_id "../../evil", and a model whose file names say ".." (flat layout)
    write_model(archive, "EVIL-1", attrs={"source_id": "../../evil"})
    write_model(archive, "..", layout="flat")
    out = tmp_path / "deep" / "er" / "out"
    before = files_under(tmp_path)
    result = run_extract(archive, out)
    written = files_under(tmp_path) - before
    assert written and all(out in p.parents for p in written), sorted(map(str, written))
    assert not [p for p in tmp_path.rglob("*evil*")]
    assert {p.name for p in (out / "series").iterdir()} == {"EVIL-1_r1i1p1f1.nc", "_r1i1p1f1.nc"}
    # the disagreement between the path and the files' attributes is kept as a flag, not followed
    assert "attribute_mismatch" in rows_by_model(result)["EVIL-1"]["flags"]


@pytest.fixture
def cached_out(clean, tmp_path) -> Path:
    """A copy of the clean extraction's output folder: its series files are a valid cache for the archive."""
    return Path(shutil.copytree(clean.out_dir, tmp_path / "out"))


def series_path(out: Path, model: str) -> Path:
    return out / "series" / f"{model}_{MEMBER}.nc"


def test_untouched_cache_is_reused(clean, clean_archive, cached_out):
    result = run_extract(clean_archive, cached_out)
    assert sorted(result.cached) == sorted(f"{m}_{MEMBER}" for m in MODELS) and result.computed == []


def test_tampered_or_garbled_caches_are_recomputed_not_trusted_or_run(clean, clean_archive, cached_out, tmp_path):
    first, second = MODELS
    # 1: numbers changed and the fingerprint changed with them
    with netCDF4.Dataset(series_path(cached_out, first)) as nc:
        row = json.loads(nc.getncattr("sensitivity_row"))
    row["ecs_eff"] = 99.0
    set_attrs(series_path(cached_out, first), fingerprint="0" * 64, sensitivity_row=json.dumps(row))
    # 2: not JSON at all, but something that would act if it were evaluated
    marker = tmp_path / "MARKER"
    set_attrs(series_path(cached_out, second), sensitivity_row=f"__import__('pathlib').Path({str(marker)!r}).touch()")
    result = run_extract(clean_archive, cached_out)
    assert result.cached == [] and sorted(result.computed) == sorted(f"{m}_{MEMBER}" for m in MODELS)
    assert not marker.exists()
    assert (cached_out / "sensitivity.csv").read_bytes() == (clean.out_dir / "sensitivity.csv").read_bytes()

    # 3: a series file that is not NetCDF; 4: JSON of the wrong shape (a list, unknown keys)
    series_path(cached_out, first).write_bytes(b"\x80\x04\x95 not a netcdf file")
    set_attrs(series_path(cached_out, second), sensitivity_row=json.dumps({"model": second, "__reduce__": "os.system"}))
    result = run_extract(clean_archive, cached_out)
    assert result.cached == [] and result.ok
    assert (cached_out / "sensitivity.csv").read_bytes() == (clean.out_dir / "sensitivity.csv").read_bytes()
