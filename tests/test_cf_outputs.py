"""Every kind of NetCDF file sensemble writes passes the IOOS compliance checker's `cf:1.11` suite with no error and
no warning: the demo archive's files (CMIP6 and CMIP5 layouts), `sensitivity.nc`, each group of `series/*.nc`,
`pathways.nc`, `emulator.nc`.

Source of every check here: the IOOS compliance checker (pip `compliance-checker`, suite `cf:1.11`, run through its
Python API; it needs no network: the CF standard name table ships inside the package). Its "errors" are results of
high priority (weight 3), its "warnings" those of medium priority (weight 2), as in its own text report.

Groups: the checker applies its per-variable checks (units, standard names, cell methods, fill values, data types)
to the root group's variables only. Of a file with groups it checks only where group attributes may stand (§2.7.2)
and how coordinates are referred to across groups (§2.7.1); its check of same-named dimensions across groups looks
for a dimension called `time` in every group and fails with KeyError when there is none (ours have `year`). So each
series file is checked as it is, tolerating exactly that one failing check, and each of its groups is also checked
as a file of its own (root attributes, then the group's attributes, dimensions and variables, copied unchanged).

The files come from the suite's one shared batch (tests/cli/test_run.py: generated archive, extraction, emulation)
and from one more extraction of one of its models with the clear-sky variables and the orthogonal fit, so that
every series variable and table column is written.
"""
from __future__ import annotations

from pathlib import Path

import netCDF4
import pytest
from compliance_checker.runner import CheckSuite

from sensemble import demo as demo_ensemble
from sensemble.contract.cf import CONVENTIONS
from tests.cli.test_run import BATCH_TOML, run_cli, shared_batch

SUITE = "cf:1.11"
ERROR, WARNING = 3, 2  # the checker's priorities (BaseCheck.HIGH, BaseCheck.MEDIUM)
# The checker's own defect, not the file's: it indexes `dimensions["time"]` in every group (see the docstring).
GROUP_DIMENSION_CHECK = "check_invalid_same_named_dimension_across_groups"


@pytest.fixture(scope="module")
def checker():
    suite = CheckSuite()
    suite.load_all_available_checkers()
    return suite


def cf_findings(suite, path: Path) -> tuple[list[str], list[str], dict]:
    """(error messages, warning messages, {check name: exception}) of the `cf:1.11` suite on one file."""
    dataset = suite.load_dataset(str(path))
    try:
        groups, failed_checks = suite.run_all(dataset, [SUITE], skip_checks=[])[SUITE]
    finally:
        dataset.close()
    found = {ERROR: [], WARNING: []}
    for result in groups:
        if result.weight in found and result.value[0] != result.value[1]:
            found[result.weight].extend(f"{result.name}: {m}" for m in result.msgs or ["(no message)"])
    return found[ERROR], found[WARNING], {name: exc for name, (exc, _) in failed_checks.items()}


def assert_cf_clean(suite, path: Path, tolerated: tuple[str, ...] = ()) -> None:
    errors, warnings, failed_checks = cf_findings(suite, path)
    assert errors == [] and warnings == [], f"{path.name}: errors {errors}, warnings {warnings}"
    assert set(failed_checks) <= set(tolerated), f"{path.name}: checks that failed to run: {failed_checks}"
    with netCDF4.Dataset(path) as ds:  # CF §2.6: the version named, an audit trail
        assert CONVENTIONS in ds.getncattr("Conventions").split() and ds.getncattr("history").strip()


def flatten_group(path: Path, group: str, dest: Path) -> Path:
    """One group of `path` as a file of its own: root attributes, then the group's, its dimensions and variables."""
    with netCDF4.Dataset(path) as src, netCDF4.Dataset(dest, "w", format="NETCDF4") as out:
        g = src.groups[group]
        out.setncatts({**{k: src.getncattr(k) for k in src.ncattrs()}, **{k: g.getncattr(k) for k in g.ncattrs()}})
        for name, dim in g.dimensions.items():
            out.createDimension(name, None if dim.isunlimited() else len(dim))
        for name, var in g.variables.items():
            attrs = {k: var.getncattr(k) for k in var.ncattrs()}
            v = out.createVariable(name, var.datatype, var.dimensions, fill_value=attrs.pop("_FillValue", None))
            v.setncatts(attrs)
            v[:] = var[:]
    return dest


def one_file_per_variable(archive: Path) -> list[Path]:
    """One demo file of each variable: the files of a variable differ only in values, dates and ids."""
    by_variable = {}
    for path in sorted(archive.rglob("*.nc")):
        by_variable.setdefault(path.name.split("_")[0], path)
    assert set(by_variable) == {"tas", "rsdt", "rsut", "rlut", "rsutcs", "rlutcs", "areacella"}
    return list(by_variable.values())


@pytest.fixture(scope="module")
def batch(tmp_path_factory):
    batch = shared_batch(tmp_path_factory)
    assert batch.status == 0, batch.stderr
    return batch


@pytest.fixture(scope="module")
def clear_sky(batch, tmp_path_factory) -> Path:
    """The extraction folder of one model of the shared archive with every variable and the orthogonal fit."""
    model = sorted(p.name for p in (batch.root / "archive").iterdir() if p.is_dir())[0]
    root = tmp_path_factory.mktemp("cf-clear-sky")
    # the batch's config (windows that fit its short runs), with every variable, one model and the orthogonal fit
    only_required = 'variables = ["tas", "rsdt", "rsut", "rlut"]'
    assert only_required in BATCH_TOML
    config = BATCH_TOML.replace(only_required, f'include_models = ["{model}"]').replace(
        "[extraction]\n", "[extraction]\northogonal_fit = true\n")
    (root / "extract.toml").write_text(config)
    status, _, stderr = run_cli("extract", batch.root / "archive", "--out", root / "out", "--config",
                                root / "extract.toml", "--workers", "1", "--quiet")
    assert status == 0, stderr
    return root / "out"


def test_demo_archive_files_are_cf_clean(checker, batch):
    for path in one_file_per_variable(batch.root / "archive"):
        assert_cf_clean(checker, path)


def test_cmip5_demo_files_are_cf_clean(checker, tmp_path):
    # a mixed archive writes its second model the CMIP5 way (directories, names, attributes)
    demo_ensemble.generate(tmp_path, n_models=2, grid=(4, 8), mixed=True,
                           years={"control": 40, "abrupt": 30, "onepct": 30, "historical": 10, "scenario": 10})
    for path in one_file_per_variable(tmp_path / "archive" / "output1"):
        assert_cf_clean(checker, path)


@pytest.mark.parametrize("name", ["extract/sensitivity.nc", "emulate/pathways.nc", "emulate/emulator.nc"])
def test_batch_outputs_are_cf_clean(checker, batch, name):
    assert_cf_clean(checker, batch.out / name)


def test_pathways_labels_and_units(batch):
    with netCDF4.Dataset(batch.out / "emulate" / "pathways.nc") as ds:
        assert "case" not in ds.variables and ds["case_name"].dimensions == ("case",)  # labels, CF §6.1
        assert ds["ecs_eff"].units == "K" and ds["mean"].units_metadata == "temperature: difference"


def test_sensitivity_with_every_column_is_cf_clean(checker, clear_sky):
    assert_cf_clean(checker, clear_sky / "sensitivity.nc")


def test_series_files_and_each_group_are_cf_clean(checker, batch, clear_sky, tmp_path):
    files = [*sorted((batch.out / "extract" / "series").glob("*.nc"))[:1], *sorted((clear_sky / "series").glob("*.nc"))]
    assert len(files) == 2
    variables = set()
    for path in files:
        assert_cf_clean(checker, path, tolerated=(GROUP_DIMENSION_CHECK,))
        with netCDF4.Dataset(path) as ds:
            groups = list(ds.groups)
            variables |= {v for g in ds.groups.values() for v in g.variables}
        assert {"piControl", "abrupt-4xCO2", "1pctCO2"} <= set(groups)
        for group in groups:
            assert_cf_clean(checker, flatten_group(path, group, tmp_path / f"{path.stem}-{group}.nc"))
    assert {"tas", "rtnt", "rtnt_cs", "lw_cs", "sw_cs", "cre"} <= variables  # every series variable was checked
