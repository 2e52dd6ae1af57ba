"""Interrupted and concurrent extractions: killed batches leave no broken file and resume to the same table;
a second extraction into a busy output folder refuses; reading never changes the archive."""
from __future__ import annotations

import hashlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import netCDF4
import pytest
import xarray as xr

from sensemble.extractor.errors import OutputInUseError
from sensemble.extractor.lock import LOCK_NAME, Owner, acquire, output_lock, release, this_process
from sensemble.extractor.table import ALL_COLUMNS, read_table
from tests.faults.conftest import run_extract

ROOT = Path(__file__).resolve().parents[2]
RUNNER = "import sys; from tests.faults.conftest import run_extract; run_extract(sys.argv[1], sys.argv[2])"


def start_extraction(archive, out) -> subprocess.Popen:
    """An extraction in a child process; its messages go to ``<out>.log`` (a pipe could fill and stall it)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    with open(f"{out}.log", "ab") as log:
        return subprocess.Popen([sys.executable, "-c", RUNNER, str(archive), str(out)], cwd=ROOT, env=env,
                                stdout=log, stderr=log)


def locked(out: Path) -> bool:
    """The output folder's lock exists and holds its owner's pid."""
    try:
        return bool((out / LOCK_NAME).read_text().strip())
    except FileNotFoundError:
        return False


def wait_for(condition, proc, timeout=120.0) -> bool:
    """Poll until ``condition()`` holds (True) or the process ends (False)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if condition():
            return True
        if proc.poll() is not None:
            return False
        time.sleep(0.002)
    raise AssertionError("extraction subprocess neither reached the point nor ended")


def assert_outputs_whole(out: Path) -> None:
    """Each output file is either absent or complete and readable."""
    csv_path = out / "sensitivity.csv"
    if csv_path.exists():
        text = csv_path.read_text()
        assert text.endswith("\n") and text.splitlines()[0].split(",") == list(ALL_COLUMNS)
        for row in read_table(csv_path):
            assert row["model"] and row["member"]
    nc_path = out / "sensitivity.nc"
    if nc_path.exists():
        with xr.open_dataset(nc_path, engine="netcdf4") as ds:
            ds.load()
            assert "ecs_eff" in ds
    for series in sorted((out / "series").glob("*.nc")):
        with netCDF4.Dataset(series) as nc:
            assert "abrupt-4xCO2" in nc.groups and "piControl" in nc.groups
            assert nc.groups["abrupt-4xCO2"]["tas"][:].size > 0
            assert nc.getncattr("fingerprint")


def parts(out: Path):
    return [*out.glob(".*.part"), *(out / "series").glob(".*.part")]


def kill(proc: subprocess.Popen) -> None:
    if proc.poll() is None:
        proc.send_signal(signal.SIGKILL)
    proc.wait()


def test_killed_extractions_leave_whole_files_and_resume_to_the_same_table(clean, clean_archive, tmp_path):
    out = tmp_path / "out"
    kill_points = [
        lambda: False,  # after 0.5 s: still starting up
        lambda: locked(out),  # as soon as it holds the output folder
        lambda: bool(list((out / "series").glob(".*.part"))),  # while a series file is being written
        lambda: bool(list(out.glob(".sensitivity.*.part"))),  # while the table is being written
    ]
    for i, reached in enumerate(kill_points):
        proc = start_extraction(clean_archive, out)
        try:
            if i == 0:
                time.sleep(0.5)
            else:
                wait_for(reached, proc)
        finally:
            kill(proc)
        assert_outputs_whole(out)

    result = run_extract(clean_archive, out)
    assert result.ok
    assert (out / "sensitivity.csv").read_bytes() == (clean.out_dir / "sensitivity.csv").read_bytes()
    assert_outputs_whole(out)
    assert parts(out) == []  # the unfinished temporary files of the killed runs were removed
    assert not (out / LOCK_NAME).exists()


def test_second_extraction_into_a_busy_folder_refuses(clean, clean_archive, tmp_path):
    out = tmp_path / "out"
    first = start_extraction(clean_archive, out)
    try:
        assert wait_for(lambda: locked(out), first), Path(f"{out}.log").read_text()
        with pytest.raises(OutputInUseError) as caught:
            run_extract(clean_archive, out)
        assert str(caught.value) == (f"output folder {out} is in use by process {first.pid} — "
                                     "wait for it or choose another --out")
        assert first.wait(timeout=120) == 0, Path(f"{out}.log").read_text()
    finally:
        kill(first)
    # the refused run touched nothing: the first one's table is whole and its lock is gone
    assert (out / "sensitivity.csv").read_bytes() == (clean.out_dir / "sensitivity.csv").read_bytes()
    assert not (out / LOCK_NAME).exists()


def test_stale_lock_of_a_dead_process_is_taken_over_and_noted(clean, clean_archive, tmp_path):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    out = tmp_path / "out"
    out.mkdir()
    (out / LOCK_NAME).write_text(f"{dead.pid}\n")
    (out / ".sensitivity.csv.abc123.part").write_text("model,memb")  # left by the dead run

    result = run_extract(clean_archive, out)
    assert result.ok and len(result.rows) == len(clean.rows)
    assert f"took over the lock left by process {dead.pid}, which is no longer running" in " ".join(result.notes)
    assert "removed 1 unfinished temporary file(s)" in " ".join(result.notes)
    assert "took over the lock" in (out / "report.md").read_text()
    assert not (out / LOCK_NAME).exists() and parts(out) == []


def archive_checksums(root: Path) -> dict[str, tuple[str, int]]:
    return {str(p.relative_to(root)): (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns)
            for p in sorted(root.rglob("*")) if p.is_file()}


def test_reading_never_modifies_the_archive(clean_archive, tmp_path):
    before = archive_checksums(clean_archive)
    result = run_extract(clean_archive, tmp_path / "out", force=True)
    assert result.ok and result.computed
    assert archive_checksums(clean_archive) == before  # same bytes, same modification times, no file added


def test_lock_is_exclusive_within_a_process_and_released(tmp_path):
    with output_lock(tmp_path) as path:
        assert Owner.parse(path.read_text()) == this_process()  # host, pid and start of this process
        with pytest.raises(OutputInUseError, match=f"in use by process {os.getpid()} — wait for it"):
            acquire(tmp_path)
    assert not path.exists()


def test_lock_being_written_counts_as_taken_until_it_is_old(tmp_path):
    lock = tmp_path / LOCK_NAME
    lock.write_text("")  # created, pid not yet written
    with pytest.raises(OutputInUseError, match="in use by another process"):
        acquire(tmp_path)
    old = time.time() - 60
    os.utime(lock, (old, old))  # a writer killed between creating and writing it
    notes = []
    path = acquire(tmp_path, notes)
    assert Owner.parse(path.read_text()) == this_process() and "took over the lock" in notes[0]
    release(path)
    assert not path.exists()
