"""A `sensemble run` killed with SIGKILL mid-way and run again gives the outputs of an uninterrupted run.

For real: the batch runs in a child process, killed as soon as its first finished series file appears in
OUT/extract/series/ (the big read-and-reduce is done, the per-model fits are being written); the same command then
resumes (in the test's own process, which saves a second start-up). The tables (CSV) must match the uninterrupted run byte for byte; the NetCDF files
must be equal apart from the time stamp in their `history` attribute.
"""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import xarray as xr

from sensemble.extractor.lock import LOCK_NAME
from tests.cli.test_run import log_lines, run_cli, shared_batch

ROOT = Path(__file__).resolve().parents[2]
BYTE_IDENTICAL = ("extract/sensitivity.csv", "emulate/pathways.csv", "emulate/crossings.csv",
                  "emulate/validation.csv", "emulate/calibration.csv", "emulate/training_runs.csv")
EQUAL_BUT_HISTORY = ("extract/sensitivity.nc", "emulate/pathways.nc")


def sensemble(*argv, out: Path) -> subprocess.Popen:
    """`sensemble ARGV…` in a child process; its terminal output goes to a file beside OUT (a pipe could fill up)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    with open(f"{out}.terminal", "ab") as terminal:
        return subprocess.Popen([sys.executable, "-m", "sensemble.cli", *map(str, argv)], cwd=ROOT, env=env,
                                stdout=terminal, stderr=terminal)


def finished_series(out: Path) -> list[Path]:
    return sorted((out / "extract" / "series").glob("*.nc"))  # whole files only: unfinished ones end in .part


def without_history(path: Path) -> xr.Dataset:
    with xr.open_dataset(path, engine="netcdf4") as ds:
        ds = ds.load()
    assert "sensemble" in ds.attrs.pop("history")  # the one attribute allowed to differ: when it was written
    return ds


def test_killed_batch_resumes_to_the_uninterrupted_outputs(tmp_path_factory, tmp_path):
    batch = shared_batch(tmp_path_factory)
    assert batch.status == 0, batch.stderr
    out = tmp_path / "out"
    command = ("run", batch.config, "--out", out, "--workers", "1", "--quiet")

    child = sensemble(*command, out=out)
    try:
        deadline = time.monotonic() + 300
        while not finished_series(out):
            assert child.poll() is None, f"the batch ended before it could be killed: {Path(f'{out}.terminal').read_text()}"
            assert time.monotonic() < deadline, "no series file after 300 s"
            time.sleep(0.005)
        assert child.poll() is None  # killed mid-way, not after the end
        child.send_signal(signal.SIGKILL)
    finally:
        if child.poll() is None:
            child.kill()
        child.wait()
    assert child.returncode == -signal.SIGKILL
    cached = finished_series(out)
    assert 1 <= len(cached) < 5
    assert not (out / "emulate").exists()  # it died inside the extraction
    assert (out / "extract" / LOCK_NAME).exists()  # … still holding the output folder

    status, stdout, stderr = run_cli(*command)  # the same command again (in this process: it saves start-up time)
    assert status == 0 and stdout == "" and stderr == "", stderr

    for name in BYTE_IDENTICAL:
        assert (out / name).read_bytes() == (batch.out / name).read_bytes(), name
    for name in EQUAL_BUT_HISTORY:
        xr.testing.assert_identical(without_history(out / name), without_history(batch.out / name))
    # the effective configs differ only in the output folder
    resumed = (out / "effective-config.toml").read_text().replace(str(out), "OUT")
    assert resumed == (batch.out / "effective-config.toml").read_text().replace(str(batch.out), "OUT")

    log = "\n".join(log_lines(out))
    assert log.count("sensemble run ") >= 2  # both attempts wrote to one log
    assert "took over the lock left by process" in log
    assert f"reusing {len(cached)} finished runs" in log
    assert f"extraction: 5 rows ({len(cached)} reused" in log
    assert not (out / "extract" / LOCK_NAME).exists()
    assert not list(out.rglob("*.part"))
