"""`sensemble run CONFIG.toml`: extraction then emulation as the config says, flags over the config, the effective
config and a timestamped log in the output folder, progress fit for a terminal or a pipe; and a local cluster of
worker processes giving the same table as the threaded scheduler.

The batch archive is a small generated demo archive (four invented models, so leave-one-model-out validation runs);
it and the first batch over it are built once per session (`shared_batch`) and reused by test_resume.py and
test_cli.py.
"""
from __future__ import annotations

import contextlib
import io
import json
import re
import shutil
from dataclasses import dataclass
from pathlib import Path

import dask.array as da
import numpy as np

from sensemble import demo as demo_ensemble
from sensemble.extractor.pipeline import extract
from sensemble.cli import LOG_NAME, Console, _CoarseProgress, main
from sensemble.compute import ComputeSettings, active_client, open_compute
from sensemble.config import load_config
from tests.faults.conftest import SETTINGS as TINY_SETTINGS
from tests.faults.conftest import write_archive as write_tiny_archive

YEARS = {"control": 50, "abrupt": 40, "onepct": 30, "historical": 20, "scenario": 20}
N_MODELS = 4  # leave-one-model-out validation needs at least four
# Windows that fit the short runs above; small sample counts keep the batch quick. The config asks for two
# worker processes and a folder of its own: the command line overrides both.
BATCH_TOML = """\
[archive]
root = "archive"
variables = ["tas", "rsdt", "rsut", "rlut"]

[extraction]
fit_years = [1, 40]
early_years = [1, 10]
late_years = [11, 40]
tcr_years = [11, 30]
bootstrap_samples = 100

[emulator]
scenario = "demo-rise"
n_restarts_optimizer = 0
validation_samples = 100

[prediction]
n_samples = 200
thresholds = [0.5, 1.0]

[compute]
kind = "threads"
workers = 2

[output]
dir = "from-config"
figures = false
"""
TIMESTAMP = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z (INFO|ERROR|WARNING) ")


@dataclass(frozen=True)
class Batch:
    root: Path  # holds archive/ (the generated archive) and batch.toml
    config: Path
    out: Path  # the uninterrupted run's output folder
    status: int
    stdout: str
    stderr: str


def run_cli(*argv) -> tuple[int, str, str]:
    """`sensemble ARGV…` in this process: (exit status, stdout, stderr). Neither stream is a terminal here."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def shared_batch(tmp_path_factory) -> Batch:
    """The generated archive, its config and one uninterrupted `sensemble run`, built once per test session.

    Kept under the session's base temporary folder so that every test module finds the same one.
    """
    root = tmp_path_factory.getbasetemp() / "cli-batch"
    record = root / "batch.json"
    if not record.exists():
        shutil.rmtree(root, ignore_errors=True)
        root.mkdir(parents=True)
        demo_ensemble.generate(root, n_models=N_MODELS, grid=(4, 8), years=YEARS)
        (root / "batch.toml").write_text(BATCH_TOML)
        status, stdout, stderr = run_cli("run", root / "batch.toml", "--out", root / "reference", "--workers", "1",
                                         "--quiet")
        record.write_text(json.dumps({"status": status, "stdout": stdout, "stderr": stderr}))
    saved = json.loads(record.read_text())
    return Batch(root, root / "batch.toml", root / "reference", saved["status"], saved["stdout"], saved["stderr"])


def log_lines(out: Path) -> list[str]:
    return (out / LOG_NAME).read_text(encoding="utf-8").splitlines()


def test_run_extracts_then_emulates_with_flags_over_the_config(tmp_path_factory):
    batch = shared_batch(tmp_path_factory)
    assert batch.status == 0, batch.stderr
    assert batch.stdout == "" and batch.stderr == ""  # --quiet: nothing on the terminal when all is fine
    assert not (batch.root / "from-config").exists()  # --out won over [output] dir
    out = batch.out
    table = (out / "extract" / "sensitivity.csv").read_text().splitlines()
    assert len(table) == 1 + 5  # header + five members of four models
    for name in ("extract/sensitivity.nc", "extract/report.md", "emulate/pathways.csv", "emulate/pathways.nc",
                 "emulate/crossings.csv", "emulate/validation.csv", "emulate/emulator.nc"):
        assert (out / name).is_file(), name
    assert not (out / "extract" / "figures").exists() and not (out / "emulate" / "figures").exists()  # figures = false

    effective = load_config(out / "effective-config.toml")
    assert effective.output.dir == out and effective.output.quiet is True and effective.output.force is False
    assert effective.compute.workers == 1  # --workers 1 over the config's 2
    assert effective.archive.root == batch.root / "archive"  # relative to the config's folder, written absolute
    assert effective.extraction.fit_years == (1, 40) and effective.emulator.scenario == "demo-rise"
    assert effective.prediction.thresholds == (0.5, 1.0)


def test_log_holds_every_message_timestamped_even_when_quiet(tmp_path_factory):
    batch = shared_batch(tmp_path_factory)
    lines = log_lines(batch.out)
    assert all(TIMESTAMP.match(line) for line in lines), [line for line in lines if not TIMESTAMP.match(line)]
    text = "\n".join(lines)
    assert "sensemble run " in lines[0] and "--quiet" in lines[0]  # the command that wrote it
    for message in ("1/2 extracting sensitivities", "catalogue: ", "extraction: 5 rows (0 reused",
                    "2/2 emulating warming pathways", "validation 4/4: holding out", "leave-one-model-out",
                    "effective configuration written to", "done in "):
        assert message in text, message


def test_rerun_reuses_finished_runs_and_prints_plain_lines(tmp_path_factory, tmp_path):
    batch = shared_batch(tmp_path_factory)
    out = Path(shutil.copytree(batch.out, tmp_path / "out"))
    status, stdout, stderr = run_cli("run", batch.config, "--out", out, "--workers", "1")
    assert status == 0, stderr
    # not a terminal: plain lines, no carriage-return redraws of a progress bar
    assert "\r" not in stdout and "reusing 5 finished runs" in stdout and "2/2 emulating" in stdout
    assert (out / "extract" / "sensitivity.csv").read_bytes() == (batch.out / "extract" / "sensitivity.csv").read_bytes()
    assert (out / "emulate" / "pathways.csv").read_bytes() == (batch.out / "emulate" / "pathways.csv").read_bytes()
    # the log is appended to: the first run's messages, then this one's, each printed line among them
    lines = log_lines(out)
    headers = [line for line in lines if "sensemble run " in line and "(pid " in line]
    assert len(headers) == 2 and "--quiet" not in headers[1]
    logged = "\n".join(lines)
    for line in stdout.splitlines():
        assert line.rstrip() in logged, line


def test_progress_when_the_terminal_cannot_redraw_is_a_plain_periodic_line(tmp_path):
    console = Console(quiet=False)
    console.open_log(tmp_path, "header")
    progress = _CoarseProgress(console, terminal=True, every=0.0)
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed), progress.callback:
        total = da.ones((40, 10), chunks=(4, 10)).sum().compute(scheduler="threads")
    console.close()
    assert total == 400
    lines = printed.getvalue().splitlines()
    assert lines and "\r" not in printed.getvalue()
    assert all(re.fullmatch(r"  reading and reducing: (\d+/\d+ tasks \(\d+ %\), \d+ s|done after \d+ s)", line)
               for line in lines), lines
    assert lines[-1].startswith("  reading and reducing: done")
    assert len(log_lines(tmp_path)) == 1 + len(lines)  # the same lines, in the log file


def test_quiet_console_still_logs_and_still_reports_failures(tmp_path, capsys):
    console = Console(quiet=True)
    console("said before the log opened")
    console.open_log(tmp_path, "header")
    console("progress")
    console.error("FAILED something")
    console.close()
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == "FAILED something\n"
    assert [TIMESTAMP.sub("", line).lstrip() for line in log_lines(tmp_path)] == [
        "header", "said before the log opened", "progress", "FAILED something"]


def test_local_cluster_of_two_processes_gives_the_threaded_table(tmp_path):
    # Same files, same graph, same fits: the table's text must not depend on where the graph ran
    # (common practice, no source: a scheduler changes where tasks run, not what they compute).
    archive = write_tiny_archive(tmp_path / "archive")
    tables = {}
    for kind in ("threads", "processes"):
        with open_compute(ComputeSettings(kind=kind, workers=2, memory_limit="1GiB")) as client:
            assert (client is None) == (kind == "threads")
            if client is not None:
                assert len(client.scheduler_info()["workers"]) == 2
            result = extract(archive, tmp_path / kind, TINY_SETTINGS, progress=False, figures=False)
        assert result.ok and len(result.rows) == 2 and result.computed
        tables[kind] = (tmp_path / kind / "sensitivity.csv").read_text()
    assert tables["processes"] == tables["threads"]
    assert active_client() is None  # the cluster is closed with its block
    ecs_eff = [float(line.split(",")[6]) for line in tables["threads"].splitlines()[1:]]
    assert np.all(np.isfinite(ecs_eff)) and len(ecs_eff) == 2
