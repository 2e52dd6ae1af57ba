"""The contract's atomic writer and error base class: what both stages rely on."""
import copy
import doctest

import pytest

import sensemble.contract.atomic as atomic
import sensemble.contract.errors as errors
from sensemble.contract.atomic import atomic_path, write_text
from sensemble.contract.errors import SensembleError
from sensemble.emulator.errors import EmulatorInputError
from sensemble.extractor.errors import ArchiveError, OutputInUseError


def test_docstring_examples_run():
    assert doctest.testmod(atomic).failed == 0 and doctest.testmod(errors).failed == 0


def test_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    target = write_text(tmp_path / "report.md", "old")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("killed while writing")
    assert target.read_text() == "old" and sorted(p.name for p in tmp_path.iterdir()) == ["report.md"]


@pytest.mark.parametrize("cls", [ArchiveError, EmulatorInputError, OutputInUseError])
def test_both_stages_share_one_message_order(cls):
    # model → file → problem → what to do (STYLE.md), whichever stage raises
    err = cls("no scenario runs", path="out/series/A_r1.nc", model="ALDER-1", hint="extract one")
    assert isinstance(err, SensembleError)
    assert str(err) == "model ALDER-1: file out/series/A_r1.nc: no scenario runs — extract one"


def test_errors_keep_their_pieces_between_processes():
    err = ArchiveError("bad units", path="tas.nc", model="ALDER-1", member="r1i1p1f1", experiment_id="piControl",
                       hint="fix them")
    # dask ships errors between worker processes through __reduce__; deepcopy takes the same path (no pickle here)
    back = copy.deepcopy(err)
    assert type(back) is ArchiveError and str(back) == str(err) and back.member == "r1i1p1f1"


def test_writes_under_a_distributed_client_take_no_lock_of_the_cluster(tmp_path, monkeypatch):
    # xarray's docs (backends.locks.get_write_lock): under a distributed client a NetCDF write takes a
    # distributed.Lock, a round trip to the scheduler; an in-memory output must not
    import dask.distributed
    import distributed
    import numpy as np
    import xarray as xr

    from sensemble.extractor.series import write_series

    def refuse(*args, **kwargs):
        raise AssertionError("a distributed lock was asked for")

    ds = xr.Dataset({"tas": ("year", np.arange(3.0))}, coords={"year": [1, 2, 3]})
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=1, dashboard_address=None):
        monkeypatch.setattr(distributed, "Lock", refuse)
        monkeypatch.setattr(dask.distributed, "Lock", refuse)
        path = write_series(tmp_path / "s.nc", {"abrupt": ds}, {"title": "t"})
    with xr.open_dataset(path, group="abrupt") as back:
        assert back["tas"].values.tolist() == [0.0, 1.0, 2.0]
