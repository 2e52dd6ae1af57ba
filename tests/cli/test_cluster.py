"""`sensemble run` on a real batch scheduler: worker processes inside SLURM jobs (and PBS jobs, through the
`qsub`/`qstat` stand-in that slurm-wlm-torque puts over SLURM) give the threaded table, to the byte.

These tests need a scheduler that answers: `scripts/single-node-slurm.sh` (as root) brings up a one-node SLURM
cluster, and CI runs it before the tests. Where none answers they skip, saying so.
"""
from __future__ import annotations

import re
import shutil
import subprocess
import threading
from pathlib import Path

import pytest

from sensemble.compute import job_name
from tests.cli.test_run import run_cli, shared_batch

SCRIPT = Path(__file__).resolve().parents[2] / "scripts" / "single-node-slurm.sh"


def _answers(*command: str) -> bool:
    try:
        done = subprocess.run(command, capture_output=True, text=True, timeout=15)
    except (OSError, subprocess.TimeoutExpired):
        return False
    return done.returncode == 0 and any(state.startswith(("idle", "mix", "alloc"))
                                        for state in done.stdout.split())


def needs_scheduler(kind: str) -> None:
    """Skip unless a SLURM node takes jobs here (and, for PBS, the qsub/qstat stand-in is installed)."""
    pytest.importorskip("dask_jobqueue", reason="the cluster extra (dask-jobqueue) is not installed")
    tools = ("sinfo", "sbatch", "squeue", "scancel") + (("qsub", "qstat", "qdel") if kind == "pbs" else ())
    missing = [tool for tool in tools if shutil.which(tool) is None]
    if missing:
        pytest.skip(f"no {kind.upper()} scheduler here ({', '.join(missing)} not found): run {SCRIPT} as root")
    if not _answers("sinfo", "-h", "-o", "%T"):
        pytest.skip(f"no SLURM node answers (sinfo shows none idle): run {SCRIPT} as root")


class QueueWatch(threading.Thread):
    """Names of the jobs `squeue` lists, polled until stopped."""

    def __init__(self):
        super().__init__(daemon=True)
        self.names: set[str] = set()
        self.done = threading.Event()

    def run(self) -> None:
        while not self.done.is_set():
            listed = subprocess.run(["squeue", "-h", "-o", "%j"], capture_output=True, text=True)
            self.names.update(listed.stdout.split())
            self.done.wait(0.5)


CLUSTER = {
    "slurm": '[compute]\nkind = "slurm"\ncores = 1\nmemory = "2GiB"\nwalltime = "00:15:00"\njobs = 1\n',
    "pbs": '[compute]\nkind = "pbs"\ncores = 1\nmemory = "2GiB"\nwalltime = "00:15:00"\njobs = 1\n',
}


@pytest.mark.parametrize("kind", ["slurm", "pbs"])
def test_run_on_a_batch_scheduler_gives_the_threaded_table(kind, tmp_path, tmp_path_factory, monkeypatch):
    # A scheduler changes where tasks run, not what they compute (common practice, no source): the table must
    # be the threaded reference run's, to the byte.
    needs_scheduler(kind)
    batch = shared_batch(tmp_path_factory)
    assert batch.status == 0, batch.stderr
    text = re.sub(r"\[compute\]\n[^\[]*", CLUSTER[kind] + "\n", batch.config.read_text())
    config = tmp_path / "cluster.toml"
    config.write_text(text.replace('root = "archive"', f'root = "{batch.root / "archive"}"'))
    out = tmp_path / f"on-{kind}"
    monkeypatch.chdir(tmp_path)  # where a scheduler would drop logs left to its defaults
    watch = QueueWatch()
    watch.start()
    try:
        status, stdout, stderr = run_cli("run", config, "--out", out, "--quiet")
    finally:
        watch.done.set()
        watch.join()
    assert status == 0, stderr
    assert (out / "extract" / "sensitivity.csv").read_text() == \
        (batch.out / "extract" / "sensitivity.csv").read_text()
    # the workers ran as jobs of the scheduler, named for the batch
    assert job_name(out.name) in watch.names, watch.names
    # their logs in the output folder, named for the batch (SLURM: NAME-<id>.err/.out from the script's -e/-o; the
    # PBS stand-in: NAME.e<id>/.o<id>, written where qsub ran, the log folder), and nothing in the working folder
    logs = list((out / "worker-logs").iterdir())
    assert logs and all(p.name.startswith(job_name(out.name)) for p in logs), logs
    assert any(p.stat().st_size for p in logs), "the workers' logs are empty"
    assert sorted(p.name for p in tmp_path.iterdir() if p.is_file()) == ["cluster.toml"]
