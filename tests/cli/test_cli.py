"""The `sensemble` command one subcommand at a time: exit status 0 (all fine), 1 (some runs failed, named on
stderr and in report.md), 2 (bad usage or config: one line on stderr, no traceback); faults 16 (bad configs) and 17
(predictions far outside the training range, flagged) of the fault list, through the command line.

Tiny archives come from tests/extractor/test_pipeline.py (`write_model`: runs exactly on a Gregory line); the emulation
tests reuse the extraction of the shared generated batch (tests/cli/test_run.py).
"""
from __future__ import annotations

import csv
import os
from pathlib import Path

import pytest

from sensemble.extractor.lock import LOCK_NAME
from sensemble.cli import LOG_NAME
from sensemble.config import load_config
from tests.cli.test_run import run_cli, shared_batch
from tests.extractor.test_pipeline import write_model

TINY_TOML = """\
[extraction]
fit_years = [1, 40]
early_years = [1, 10]
late_years = [11, 40]
tcr_years = [1, 5]
bootstrap_samples = 100

[output]
figures = false
"""


@pytest.fixture(scope="module")
def tiny(tmp_path_factory) -> tuple[Path, Path]:
    """(archive of two good models, config whose windows fit their 40-year abrupt runs)."""
    root = tmp_path_factory.mktemp("tiny")
    write_model(root / "archive", "ALDER-1")
    write_model(root / "archive", "BIRCH-2", leak=0.1, branch_year=15)
    (root / "tiny.toml").write_text(TINY_TOML)
    return root / "archive", root / "tiny.toml"


def assert_usage_error(status, stdout, stderr, *fragments) -> str:
    """Exit status 2 and exactly one line on stderr holding every fragment."""
    assert status == 2, (stdout, stderr)
    assert stderr.endswith("\n") and stderr.count("\n") == 1, stderr
    assert "Traceback" not in stderr + stdout
    for fragment in fragments:
        assert fragment in stderr, stderr
    return stderr


def rows(path: Path) -> list[dict]:
    with open(path, newline="") as handle:
        return list(csv.DictReader(handle))


# ------------------------------------------------------------------------------------------ demo-archive


def test_demo_archive_writes_a_small_archive(tmp_path):
    status, stdout, stderr = run_cli("demo-archive", tmp_path / "demo", "--models", "1", "--grid", "3x6", "--seed", "4",
                                     "--years", "control=40,abrupt=20,onepct=20,historical=10,scenario=10", "--quiet")
    assert status == 0, stderr
    files = sorted((tmp_path / "demo" / "archive").rglob("*.nc"))
    assert files and (tmp_path / "demo" / "truth.csv").is_file()
    assert {"tas", "rsdt", "rsut", "rlut", "areacella"} <= {f.name.split("_")[0] for f in files}


@pytest.mark.parametrize("argv, fragment", [
    (["--grid", "36by72"], "grid '36by72': expected NLATxNLON"),
    (["--grid", "1x8"], "needs at least 2 latitudes"),
    (["--models", "0"], "argument --models: '0': must be at least 1"),
    (["--years", "control=lots"], "years must look like ROLE=N"),
])
def test_demo_archive_bad_usage(tmp_path, argv, fragment):
    assert_usage_error(*run_cli("demo-archive", tmp_path / "demo", *argv), "sensemble demo-archive: ", fragment)
    assert not (tmp_path / "demo" / "archive").exists()


# ------------------------------------------------------------------------------------------ extract


def test_extract_a_good_archive(tiny, tmp_path):
    archive, config = tiny
    out = tmp_path / "out"
    status, stdout, stderr = run_cli("extract", archive, "--out", out, "--config", config, "--workers", "1")
    assert status == 0 and stderr == "", stderr
    assert [r["model"] for r in rows(out / "sensitivity.csv")] == ["ALDER-1", "BIRCH-2"]
    assert "extraction: 2 rows (0 reused" in stdout and "ALDER-1" in stdout and "\r" not in stdout
    effective = load_config(out / "effective-config.toml")
    assert effective.archive.root == archive and effective.output.dir == out and effective.compute.workers == 1
    assert effective.extraction.tcr_years == (1, 5)  # from --config
    log = (out / LOG_NAME).read_text()
    assert "sensemble extract " in log and "extraction: 2 rows" in log

    # a rerun reuses both models; --force recomputes them; --quiet silences the terminal but not the log
    status, stdout, _ = run_cli("extract", archive, "--out", out, "--config", config)
    assert status == 0 and "extraction: 2 rows (2 reused" in stdout
    status, stdout, stderr = run_cli("extract", archive, "--out", out, "--config", config, "--force", "--quiet")
    assert status == 0 and stdout == "" and stderr == ""
    assert load_config(out / "effective-config.toml").output.force is True
    assert (out / LOG_NAME).read_text().count("sensemble extract ") == 3
    assert "extraction: 2 rows (0 reused" in (out / LOG_NAME).read_text().split("--force --quiet")[-1]


def test_extract_with_a_model_missing_a_variable_exits_1_and_names_it(tmp_path):
    archive = tmp_path / "archive"
    write_model(archive, "ALDER-1")
    write_model(archive, "CEDAR-3", drop="rlut")  # its abrupt-4xCO2 run has no rlut
    (tmp_path / "tiny.toml").write_text(TINY_TOML)
    out = tmp_path / "out"
    status, stdout, stderr = run_cli("extract", archive, "--out", out, "--config", tmp_path / "tiny.toml", "--quiet")
    assert status == 1
    assert stdout == ""  # quiet, but the failure is still said on stderr
    failed = [line for line in stderr.splitlines() if line.startswith("FAILED ")]
    assert len(failed) == 1 and "model CEDAR-3" in failed[0] and "abrupt-4xCO2" in failed[0]
    assert "rlut" in failed[0] and " — " in failed[0]  # what is missing, and what to do
    assert "1 run(s) failed" in stderr
    message = failed[0].removeprefix("FAILED ")
    assert message in (out / "report.md").read_text()
    assert message in (out / LOG_NAME).read_text()
    assert [r["model"] for r in rows(out / "sensitivity.csv")] == ["ALDER-1"]  # the other model is complete


def test_extract_with_windows_the_runs_cannot_fill_exits_1_naming_the_key(tiny, tmp_path):
    # an impossible window known only once the run is read (default fit_years 1-150, a 40-year abrupt run)
    archive, _ = tiny
    status, stdout, stderr = run_cli("extract", archive, "--out", tmp_path / "out", "--quiet")
    assert status == 1
    assert "[extraction] fit_years (now 1-150)" in stderr and "model ALDER-1" in stderr


def test_extract_bad_usage(tiny, tmp_path):
    archive, config = tiny
    assert_usage_error(*run_cli("extract", tmp_path / "nowhere", "--out", tmp_path / "out"),
                       "sensemble extract: archive ", "nowhere: no such folder")
    assert_usage_error(*run_cli("extract", archive), "the following arguments are required: --out")
    assert_usage_error(*run_cli("extract", archive, "--out", tmp_path / "out", "--workers", "none"),
                       "argument --workers: 'none' is not a whole number")
    bad = tmp_path / "bad.toml"
    bad.write_text("[extraction]\nbootstrap_sampels = 100\n")
    assert_usage_error(*run_cli("extract", archive, "--out", tmp_path / "out", "--config", bad),
                       "[extraction] unknown key 'bootstrap_sampels'", "did you mean 'bootstrap_samples'?")
    assert_usage_error(*run_cli("extract", archive, "--out", tmp_path / "out", "--config", tmp_path / "absent.toml"),
                       "absent.toml: no such config file")
    assert not (tmp_path / "out").exists()  # refused before any work
    assert_usage_error(*run_cli("frobnicate"), "invalid choice: 'frobnicate'")


def test_extract_refuses_required_variables_without_rsdt_before_reading(tiny, tmp_path):
    # once an "unexpected error" (a KeyError) after a whole extraction: now refused at reading, nothing written
    archive, _ = tiny
    bad = tmp_path / "bad.toml"
    bad.write_text('[archive]\nrequired_variables = ["tas", "rsut", "rlut"]\n')
    assert_usage_error(*run_cli("extract", archive, "--out", tmp_path / "out", "--config", bad),
                       "[archive] required_variables must include \"rsdt\"")
    assert not (tmp_path / "out").exists()


def test_emulate_refuses_a_bad_emulator_key_before_reading(tmp_path):
    # the emulator's rules are checked with the rest of the config, before sensitivity.csv is opened
    source = tmp_path / "extract"
    source.mkdir()
    (source / "sensitivity.csv").write_text("not a table\n")
    bad = tmp_path / "bad.toml"
    bad.write_text('[emulator]\nsmoothing = "gausian"\n')
    assert_usage_error(*run_cli("emulate", "--from", source, "--out", tmp_path / "out", "--config", bad),
                       '[emulator] smoothing must be one of', 'the closest valid value is "gaussian"')
    assert not (tmp_path / "out").exists()


def test_extract_into_a_folder_another_extraction_holds_exits_2(tiny, tmp_path):
    archive, config = tiny
    out = tmp_path / "out"
    out.mkdir()
    (out / LOCK_NAME).write_text(f"{os.getpid()}\n")  # held by a running process (this one)
    assert_usage_error(*run_cli("extract", archive, "--out", out, "--config", config),
                       f"output folder {out} is in use by process {os.getpid()}", "choose another --out")
    assert not (out / "sensitivity.csv").exists()


# ------------------------------------------------------------------------------------------ run (fault 16)

BAD_CONFIGS = {
    "unknown key": ("[extraction]\nfit_yeras = [1, 40]\n", ["[extraction] unknown key 'fit_yeras'",
                                                            "did you mean 'fit_years'?"]),
    "unknown section": ("[emulater]\nscenario = \"demo-rise\"\n", ["unknown section [emulater]", "[emulator]"]),
    "wrong type": ("[compute]\nworkers = \"two\"\n", ["[compute] workers must be an integer", "got \"two\""]),
    "wrong value": ("[compute]\nkind = \"gpu\"\n", ["[compute] kind must be one of \"auto\", \"threads\""]),
    "impossible window": ("[extraction]\nfit_years = [1, 40]\nearly_years = [1, 50]\nlate_years = [11, 40]\n",
                          ["[extraction] early_years [1, 50] must lie within fit_years [1, 40]"]),
    "reversed window": ("[extraction]\ntcr_years = [30, 11]\n", ["[extraction] tcr_years must be [start, end]"]),
    "non-existent path": ("[archive]\nroot = \"no/such/archive\"\n", ["[archive] root", "does not exist"]),
    "no archive": ("[output]\ndir = \"out\"\n", ["[archive] root is not set"]),
}


@pytest.mark.parametrize("name", list(BAD_CONFIGS))
def test_run_refuses_a_bad_config_in_one_line_naming_the_key(tmp_path, name):
    text, fragments = BAD_CONFIGS[name]
    config = tmp_path / "batch.toml"
    config.write_text(text)
    status, stdout, stderr = run_cli("run", config, "--out", tmp_path / "out")
    assert_usage_error(status, stdout, stderr, f"sensemble run: {config}", *fragments)
    assert stdout == "" and not (tmp_path / "out").exists()


def test_run_without_an_output_folder(tiny, tmp_path):
    archive, _ = tiny
    config = tmp_path / "batch.toml"
    config.write_text(f"[archive]\nroot = \"{archive}\"\n")
    assert_usage_error(*run_cli("run", config), "[output] dir is not set — give it there or with --out")


# ------------------------------------------------------------------------------------------ emulate (fault 17)


def test_emulate_at_points_and_a_distribution_flags_extrapolation(tmp_path_factory, tmp_path):
    batch = shared_batch(tmp_path_factory)
    assert batch.status == 0, batch.stderr
    out = tmp_path / "emulate"
    status, stdout, stderr = run_cli("emulate", "--from", batch.out / "extract", "--out", out, "--config", batch.config,
                                     "--at", "ecs_eff=3.7", "--at", "ecs_eff=12",
                                     "--distribution", "ecs_eff=3.0:2.5-4.0", "--quiet")
    assert status == 0 and stdout == "" and stderr == "", stderr
    table = rows(out / "pathways.csv")
    flags = {r["case"]: r["flags"] for r in table}
    assert set(flags) == {"ecs_eff=3.7", "ecs_eff=12", "ecs_eff~lognormal(3.0:2.5-4.0)"}  # those cases, no others
    ecs = [float(r["ecs_eff"]) for r in rows(batch.out / "extract" / "sensitivity.csv")]
    assert min(ecs) < 3.7 < max(ecs) < 12 / 2  # the ensemble spans 3.7 and is far below 12
    assert flags["ecs_eff=3.7"] == ""
    assert flags["ecs_eff=12"] == "extrapolated"  # fault 17: far outside the training range, flagged
    assert {r["case"] for r in rows(out / "crossings.csv")} == set(flags)
    years = [int(r["year"]) for r in table if r["case"] == "ecs_eff=12"]
    assert years == list(range(1, len(years) + 1)) and len(years) == 40
    # the effective config holds the cases as config tables: it reads back and validates
    effective = load_config(out / "effective-config.toml", check_paths=False)
    assert [c["name"] for c in effective.prediction.cases] == ["ecs_eff=3.7", "ecs_eff=12",
                                                               "ecs_eff~lognormal(3.0:2.5-4.0)"]
    assert effective.prediction.cases[2]["ecs_eff"] == {"distribution": "lognormal", "median": 3.0,
                                                        "likely": (2.5, 4.0)}
    assert "4 cases" not in (out / LOG_NAME).read_text() and "3 cases predicted" in (out / LOG_NAME).read_text()


def test_emulate_a_forcing_pathway_given_on_the_command_line(tmp_path_factory, tmp_path):
    # --pathway takes a user's forcing file through the parameter route, over the file's own years (issue 11); a
    # more sensitive case warms more under the same forcing (two-layer energy balance, Held et al. 2010, from memory)
    batch = shared_batch(tmp_path_factory)
    assert batch.status == 0, batch.stderr
    plan = tmp_path / "plan.csv"
    plan.write_text("year,erf\n" + "".join(f"{y},{4.0 * (1 - 0.97 ** (y - 2000)):.6f}\n" for y in range(2001, 2091)))
    out = tmp_path / "emulate"
    status, stdout, stderr = run_cli("emulate", "--from", batch.out / "extract", "--out", out, "--config", batch.config,
                                     "--pathway", f"forcing_file={plan},name=plan", "--at", "ecs_eff=2.5",
                                     "--at", "ecs_eff=4.5", "--quiet")
    assert status == 0 and stdout == "", stderr
    table = rows(out / "pathways.csv")
    assert {r["scenario"] for r in table} == {"plan"} and {r["route"] for r in table} == {"parameters"}
    years = {case: [int(r["calendar_year"]) for r in table if r["case"] == case] for case in ("ecs_eff=2.5",
                                                                                           "ecs_eff=4.5")}
    assert years["ecs_eff=2.5"] == list(range(2001, 2091)) == years["ecs_eff=4.5"]
    end = {r["case"]: float(r["q50"]) for r in table if r["calendar_year"] == "2090"}
    assert 0.0 < end["ecs_eff=2.5"] < end["ecs_eff=4.5"]
    assert_usage_error(*run_cli("emulate", "--from", batch.out / "extract", "--out", tmp_path / "bad",
                                "--pathway", "forcing_file=,name=x"), "--pathway", "give EXP or KEY=VALUE")


def test_emulate_bad_usage(tmp_path_factory, tmp_path):
    batch = shared_batch(tmp_path_factory)
    (tmp_path / "empty").mkdir()
    assert_usage_error(*run_cli("emulate", "--from", tmp_path / "empty", "--out", tmp_path / "out"),
                       "sensemble emulate: --from ", "no sensitivity.csv there", "output folder of `sensemble extract`")
    assert_usage_error(*run_cli("emulate", "--from", tmp_path / "nowhere", "--out", tmp_path / "out"), "no such folder")
    assert_usage_error(*run_cli("emulate", "--from", batch.out / "extract", "--out", tmp_path / "out",
                                "--distribution", "ecs_eff=3.0"), "cannot read 'ecs_eff=3.0' as NAME=MEDIAN:LOW-HIGH")
    assert_usage_error(*run_cli("emulate", "--from", batch.out / "extract", "--out", tmp_path / "out",
                                "--at", "ecs=3.0"), "case 'ecs=3': 'ecs' is not an emulator input",
                       "did you mean 'ecs_eff'?")
    assert not (tmp_path / "out").exists()


# ------------------------------------------------------------------------------------------ unexpected errors


def test_an_unexpected_error_is_one_line_with_the_traceback_in_the_log(tiny, tmp_path, monkeypatch):
    from sensemble.extractor import pipeline

    def broken(*args, **kwargs):
        raise RuntimeError("something nobody planned for")

    monkeypatch.setattr(pipeline, "extract", broken)
    archive, config = tiny
    out = tmp_path / "out"
    status, stdout, stderr = run_cli("extract", archive, "--out", out, "--config", config, "--quiet")
    assert status == 1 and stdout == ""
    assert stderr.count("\n") == 1 and "Traceback" not in stderr
    assert "unexpected error (RuntimeError: something nobody planned for)" in stderr
    assert f"the traceback is in {out / LOG_NAME}" in stderr
    log = (out / LOG_NAME).read_text()
    assert "Traceback (most recent call last)" in log and "raise RuntimeError" in log
