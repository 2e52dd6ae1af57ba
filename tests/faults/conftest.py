"""Fault suite: a good tiny archive, extracted once as the clean reference, and tools to break a copy.

Two invented models, each with a control (linear drift, small energy leak) and an abrupt-4xCO2 run lying
exactly on a Gregory line (few files keep the suite fast: each fault costs one extraction, so the 1pctCO2
run, whose faults would be the same, is left out unless asked for). Values are constant within a year and over the grid,
so annual global means are exact in any calendar and under any weights; the numbers are invented for
tests. A fault test copies the archive (`broken_copy`), breaks one thing, extracts, and compares.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import netCDF4
import numpy as np
import pytest

from sensemble.extractor.pipeline import extract
from sensemble.extractor.settings import ExtractionSettings
from tests.extractor.conftest import write_monthly_file, write_run

MODELS = ("BIRCH-2", "CEDAR-3")
LEAKS = {"BIRCH-2": 0.8, "CEDAR-3": 0.2}  # mean control N (W m-2): BIRCH-2 is flagged energy_leak
TARGET = "CEDAR-3"  # the model a fault test breaks; the others must come out unchanged
MEMBER = "r1i1p1f1"
CONTROL_YEARS, ABRUPT_YEARS, BRANCH_YEAR = 60, 40, 10
F4X, FEEDBACK = 7.0, -1.75
SETTINGS = ExtractionSettings(fit_years=(1, 40), early_years=(1, 10), late_years=(11, 40), tcr_years=(1, 5),
                              bootstrap_samples=100)


def delta_t(year):
    return 4.0 * (1.0 - np.exp(-year / 5.0))


def write_model(root, model, *, leak=0.2, feedback=FEEDBACK, abrupt_years=ABRUPT_YEARS, branch_year=BRANCH_YEAR,
                onepct_years=0, **run_options):
    """One model's control, abrupt-4xCO2 (exactly ΔN = F4X + feedback·ΔT after drift removal), 1pctCO2 if asked."""
    year_c = np.arange(CONTROL_YEARS * 12) // 12
    n_c = leak - 0.003 * year_c
    write_run(root, model, "piControl", nyears=CONTROL_YEARS, start_year=1850, areacella=True, **run_options,
              values={"tas": 287.0 + 0.002 * year_c, "rsdt": np.full(year_c.size, 340.0),
                      "rsut": np.full(year_c.size, 100.0), "rlut": 240.0 - n_c})
    year_a = np.arange(abrupt_years * 12) // 12
    ctl_year = year_a + branch_year
    d_t = delta_t(year_a + 1)
    n_a = leak - 0.003 * ctl_year + F4X + feedback * d_t
    attrs = {"parent_experiment_id": "piControl", "branch_time_in_parent": 365.0 * branch_year,
             "parent_time_units": "days since 1850-01-01 00:00:00", "parent_variant_label": MEMBER}
    attrs.update(run_options.pop("attrs", {}))
    write_run(root, model, "abrupt-4xCO2", nyears=abrupt_years, start_year=1850, attrs=attrs, **run_options,
              values={"tas": 287.0 + 0.002 * ctl_year + d_t, "rsdt": np.full(year_a.size, 340.0),
                      "rsut": np.full(year_a.size, 100.0), "rlut": 240.0 - n_a})
    if not onepct_years:
        return
    year_p = np.arange(onepct_years * 12) // 12
    write_run(root, model, "1pctCO2", nyears=onepct_years, start_year=1850, attrs=attrs, **run_options,
              values={"tas": 287.0 + 0.002 * (year_p + branch_year) + 0.1 * (year_p + 1)})


def write_archive(root, models=MODELS) -> Path:
    root = Path(root)
    for model in models:
        write_model(root, model, leak=LEAKS.get(model, 0.2))
    return root


def run_extract(archive, out, settings=SETTINGS, **kwargs):
    kwargs.setdefault("progress", False)
    kwargs.setdefault("figures", False)
    return extract(archive, out, settings, **kwargs)


@pytest.fixture(scope="session")
def clean_archive(tmp_path_factory) -> Path:
    return write_archive(tmp_path_factory.mktemp("clean") / "archive")


@pytest.fixture(scope="session")
def clean(clean_archive, tmp_path_factory):
    """The clean reference extraction."""
    result = run_extract(clean_archive, tmp_path_factory.mktemp("clean_out"))
    assert result.ok and len(result.rows) == len(MODELS)
    return result


@pytest.fixture
def broken_copy(clean_archive, tmp_path) -> Path:
    """A fresh copy of the clean archive, to break one thing in."""
    return Path(shutil.copytree(clean_archive, tmp_path / "archive"))


# ------------------------------------------------------------------------ finding and breaking files


def files_of(root, model=TARGET, experiment="abrupt-4xCO2", variable="tas") -> list[Path]:
    return sorted(Path(root).rglob(f"{variable}_*_{model}_{experiment}_{MEMBER}_*.nc"))


def file_of(root, model=TARGET, experiment="abrupt-4xCO2", variable="tas") -> Path:
    (path,) = files_of(root, model, experiment, variable)
    return path


def set_attrs(path, variable=None, **attrs) -> None:
    """Set (value) or delete (None) attributes of a file (global) or of one of its variables."""
    with netCDF4.Dataset(path, "a") as nc:
        target = nc if variable is None else nc[variable]
        for name, value in attrs.items():
            if value is None:
                if name in target.ncattrs():
                    target.delncattr(name)
            else:
                target.setncattr(name, value)


def read_file(path):
    """(variable, values as float64 with NaN for missing, global attrs, calendar) of one monthly file."""
    with netCDF4.Dataset(path) as nc:
        variable = Path(path).name.split("_")[0]
        data = np.ma.filled(nc[variable][:].astype(np.float64), np.nan)
        attrs = {k: nc.getncattr(k) for k in nc.ncattrs()}
        calendar = getattr(nc["time"], "calendar", None)
    return variable, data, attrs, calendar


def months_of(start_year: int, n: int) -> list[tuple[int, int]]:
    return [(start_year + k // 12, k % 12 + 1) for k in range(n)]


def rewrite(path, pieces, start_year=1850, **kwargs) -> list[Path]:
    """Replace one file by files holding the given month positions of its data.

    ``pieces`` is a list of index lists (positions into the original months); each becomes one file named
    by the time range of its first and last month. The original file is removed.
    """
    path = Path(path)
    variable, data, attrs, calendar = read_file(path)
    months = months_of(start_year, data.shape[0])
    stem = "_".join(path.stem.split("_")[:6])
    path.unlink()
    written = []
    for index in pieces:
        index = list(index)
        chosen = [months[i] for i in index]
        (y0, m0), (y1, m1) = chosen[0], chosen[-1]
        name = f"{stem}_{y0:04d}{m0:02d}-{y1:04d}{m1:02d}.nc"
        kwargs.setdefault("calendar", calendar)
        written.append(write_monthly_file(path.parent / name, variable, data[index], months=chosen, attrs=attrs,
                                          **kwargs))
    return written


# ------------------------------------------------------------------------ expected outcomes


def rows_by_model(result) -> dict[str, dict]:
    return {row["model"]: row for row in result.rows}


def assert_others_unchanged(result, clean, target=TARGET) -> None:
    """Every model other than ``target`` has exactly the row of the clean reference; nothing half-written."""
    got, want = rows_by_model(result), rows_by_model(clean)
    for model in MODELS:
        if model != target:
            assert got[model] == want[model], model
    assert not list(Path(result.out_dir).rglob("*.part"))
    assert (Path(result.out_dir) / "sensitivity.csv").exists()


def the_failure(result, target=TARGET):
    """The one failure of ``target``; its message is one line naming the model and saying what to do."""
    failures = [f for f in result.failures if f.model == target]
    assert len(failures) == 1, result.failures
    assert [f for f in result.failures if f.model != target] == []
    failure = failures[0]
    assert "\n" not in failure.message
    assert f"model {target}" in failure.message
    assert " — " in failure.message, failure.message  # the part that says what to do
    report = (Path(result.out_dir) / "report.md").read_text()
    assert failure.message in report
    return failure


def corrupt_data(path) -> Path:
    """Damage the stored values of a file but not its header: it opens fine and fails only when read.

    The variable is rewritten in chunks with HDF5 Fletcher-32 checksums, then one byte inside a chunk of
    values is flipped, so reading that chunk fails its checksum (as a disk or transfer error would).
    """
    path = Path(path)
    variable = path.name.split("_")[0]
    tmp = path.with_suffix(".tmp")
    with netCDF4.Dataset(path) as src, netCDF4.Dataset(tmp, "w") as dst:
        for name, dim in src.dimensions.items():
            dst.createDimension(name, None if dim.isunlimited() else len(dim))
        dst.setncatts({k: src.getncattr(k) for k in src.ncattrs()})
        for name, var in src.variables.items():
            extra = {"chunksizes": (120,) + var.shape[1:], "fletcher32": True} if name == variable else {}
            fill = var.getncattr("_FillValue") if "_FillValue" in var.ncattrs() else None
            out = dst.createVariable(name, var.dtype, var.dimensions, fill_value=fill, **extra)
            out.setncatts({k: var.getncattr(k) for k in var.ncattrs() if k != "_FillValue"})
            out[:] = var[:]
        values = np.asarray(src[variable][:], dtype=src[variable].dtype)
    raw = bytearray(tmp.read_bytes())
    pattern = values[130].astype(values.dtype.newbyteorder("<")).tobytes()
    at = raw.find(pattern)
    assert at > 0, "values not found in the file"
    raw[at + 5] ^= 0xFF
    path.write_bytes(bytes(raw))
    tmp.unlink()
    return path
