"""TOML batch configs: validation errors one by one, round trip, overrides, shipped configs."""
from __future__ import annotations

import dataclasses
import tomllib
from pathlib import Path

import pytest

from sensemble.config import (
    BatchConfig,
    ConfigError,
    config_from_dict,
    dump_config,
    load_config,
    merge_overrides,
    save_config,
    section_keys,
    shipped_config,
)

CONFIGS = Path(__file__).resolve().parents[2] / "configs"
SHIPPED = ["demo.toml", "workstation.toml", "slurm.toml", "pbs.toml"]


def write(tmp_path: Path, text: str, name: str = "batch.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def error_of(tmp_path: Path, text: str, **kwargs) -> str:
    path = write(tmp_path, text)
    with pytest.raises(ConfigError) as caught:
        load_config(path, **kwargs)
    message = str(caught.value)
    assert "\n" not in message, "config errors are one line"
    assert message.startswith(str(path)), "config errors name the file"
    return message


# --- errors, one by one -----------------------------------------------------------------------

def test_unknown_key_names_section_and_closest_key(tmp_path):
    message = error_of(tmp_path, "[extraction]\nfit_yeras = [1, 150]\n")
    assert "[extraction]" in message
    assert "'fit_yeras'" in message
    assert "did you mean 'fit_years'?" in message


def test_unknown_section_suggests_closest(tmp_path):
    message = error_of(tmp_path, "[extracton]\ndrift_order = 1\n")
    assert "[extracton]" in message and "did you mean [extraction]?" in message


def test_key_in_the_wrong_section_is_pointed_to_its_section(tmp_path):
    message = error_of(tmp_path, "[output]\nbootstrap_block = 10\n")
    assert "'bootstrap_block'" in message and "[extraction]" in message


def test_wrong_type_names_field_expected_type_and_value(tmp_path):
    message = error_of(tmp_path, '[extraction]\nbootstrap_samples = "1000"\n')
    assert "bootstrap_samples" in message
    assert "an integer" in message
    assert '"1000"' in message and "a string" in message


def test_boolean_is_not_accepted_for_a_count(tmp_path):
    message = error_of(tmp_path, "[extraction]\nbootstrap_samples = true\n")
    assert "bootstrap_samples must be an integer" in message


def test_window_of_wrong_length_is_a_type_error(tmp_path):
    message = error_of(tmp_path, "[extraction]\nfit_years = [1, 2, 3]\n")
    assert "fit_years must be an array of 2 integers [start, end]" in message


@pytest.mark.parametrize("window", ["[0, 150]", "[20, 10]", "[-5, 10]"])
def test_bad_window(tmp_path, window):
    message = error_of(tmp_path, f"[extraction]\ntcr_years = {window}\n")
    assert "tcr_years" in message and "1 <= start <= end" in message


def test_early_segment_longer_than_fit_window(tmp_path):
    message = error_of(tmp_path, "[extraction]\nfit_years = [1, 100]\nearly_years = [1, 120]\nlate_years = [21, 100]\n")
    assert "early_years [1, 120] must lie within fit_years [1, 100]" in message


def test_late_segment_beyond_a_shortened_fit_window(tmp_path):
    # the default late segment (21-150) no longer fits when the fit window is shortened
    message = error_of(tmp_path, "[extraction]\nfit_years = [1, 100]\n")
    assert "late_years" in message and "fit_years [1, 100]" in message


def test_drift_order_3(tmp_path):
    message = error_of(tmp_path, "[extraction]\ndrift_order = 3\n")
    assert "drift_order must be one of 1, 2, got 3" in message


def test_non_existent_archive_path(tmp_path):
    message = error_of(tmp_path, '[archive]\nroot = "no/such/archive"\n')
    assert "[archive] root" in message and "does not exist" in message
    # relative paths are taken from the config's folder
    assert str(tmp_path / "no" / "such" / "archive") in message


@pytest.mark.parametrize(
    "text, words",
    [
        ("[emulator]\nvariance_kept = 1.5\n", "variance_kept must be in (0, 1]"),
        ("[emulator]\nvariance_kept = 0\n", "variance_kept must be in (0, 1]"),
        ("[prediction]\nthresholds = [1.5, -2.0]\n", "thresholds must be > 0"),
        ("[extraction]\nbootstrap_samples = 0\n", "bootstrap_samples must be > 0"),
        ("[compute]\nworkers = 0\n", "workers must be > 0"),
        ('[compute]\nkind = "gpu"\n', 'kind must be one of "auto", "threads", "processes", "address", "slurm", "pbs"'),
        ('[emulator]\nkernel = "cubic"\n', 'kernel must be one of "matern52", "rbf"'),
        ("[extraction]\nbootstrap_block = 200\n", "bootstrap_block (200 years) is longer than fit_years"),
        ('[compute]\nkind = "slurm"\ncores = 4\n', 'kind = "slurm" needs memory'),
        ('[compute]\nkind = "address"\n', 'kind = "address" needs address'),
        ('[archive]\ninclude_models = ["M-A"]\nexclude_models = ["M-A"]\n', "both include_models and exclude_models"),
        ('[emulator]\nforcing_source = "file"\n', 'forcing_source = "file" needs forcing_file'),
        ('[[prediction.cases]]\nname = "a"\necs_ef = 3.0\n', "'ecs_ef' is not an emulator input; did you mean 'ecs_eff'?"),
        ('[[prediction.cases]]\necs_eff = 3.0\n', 'needs name = "..."'),
        ('[[prediction.cases]]\nname = "a"\necs_eff = "high"\n', "ecs_eff must be a number or a distribution table"),
        ("root = 'x'\n", "put it under [archive]"),
        ('[compute]\nmemory = "lots"\n', 'memory must be a memory size such as "4GiB"'),
        ('[compute]\nwalltime = "2 hours"\n', 'walltime must be a time limit such as "02:00:00"'),
    ],
)
def test_ranges_and_cross_checks(tmp_path, text, words):
    assert words in error_of(tmp_path, text, check_paths=False)


# --- fail fast: everything that needs no data is refused at reading, with the closest valid value -----------

@pytest.mark.parametrize(
    "text, words",
    [
        ('[archive]\nrequired_variables = ["tas", "rsut", "rlut"]\n',
         '[archive] required_variables must include "rsdt" (the sensitivity needs tas, rsdt, rsut, rlut'),
        ('[archive]\nrequired_variables = ["tas", "rsut", "rlut"]\n',
         'the closest valid value is ["tas", "rsut", "rlut", "rsdt"]'),
        ('[archive]\nvariables = ["tas", "rsdtt"]\n',
         '[archive] variables must be one of "tas", "rsdt"'),
        ('[archive]\nvariables = ["tas", "rsdtt"]\n', 'the closest valid value is ["tas", "rsdt"]'),
        ('[emulator]\nsmoothing = "gausian"\n',
         '[emulator] smoothing must be one of "auto", "response", "gaussian", "none", got "gausian"; '
         'the closest valid value is "gaussian"'),
        ('[emulator]\nkernel = "RBF"\n', 'the closest valid value is "rbf"'),
        ("[emulator]\nvalidation_samples = 0\n",
         "[emulator] validation_samples must be > 0, got 0; the closest valid value is 1"),
        ("[emulator]\nn_restarts_optimizer = -3\n",
         "[emulator] n_restarts_optimizer must be >= 0, got -3; the closest valid value is 0"),
        ("[emulator]\nco2_reference = -278.0\n", "[emulator] co2_reference must be > 0, got -278.0"),
        ("[prediction]\ncrossing_window = -5\n",
         "[prediction] crossing_window must be > 0, got -5; the closest valid value is 1"),
        ("[prediction]\nmax_fan_figures = -1\n", "[prediction] max_fan_figures must be >= 0, got -1"),
        ("[extraction]\ndrift_order = 3\n", "the closest valid value is 2"),
        ('[emulator]\ninputs = ["ecs_ef"]\n',
         '[emulator] inputs names "ecs_ef", which is not a numeric column of the sensitivity table; '
         'the closest valid value is "ecs_eff"'),
        ('[prediction]\ngrid = { ecs_ef = [2.0, 3.0] }\n',
         "[prediction] grid: 'ecs_ef' is not an emulator input; did you mean 'ecs_eff'?"),
        ('[prediction]\ngrid = { ecs_eff = ["high"] }\n', "grid: ecs_eff must be a non-empty array of numbers"),
        ('[archive]\nabrupt = "piControl"\n', '[archive] abrupt and control both name "piControl"'),
        ('[archive]\ncmip5_abrupt = "piControl"\n', '[archive] cmip5_abrupt and cmip5_control both name "piControl"'),
        ('[archive]\nonepct = ""\n', '[archive] onepct must name an experiment id, got ""; the default is "1pctCO2"'),
        ('[archive]\nscenarios = ["ssp-x", "abrupt-4xCO2"]\n',
         '[archive] scenarios lists "abrupt-4xCO2", which is the abrupt experiment'),
        ('[archive]\nscenarios = ["demo-rise"]\n[emulator]\nscenario = "demo-rsie"\n',
         '[emulator] scenario "demo-rsie" is not among the [archive] scenarios that are read; '
         'the closest valid value is "demo-rise"'),
    ],
)
def test_fail_fast_names_the_key_and_the_closest_valid_value(tmp_path, text, words):
    assert words in error_of(tmp_path, text, check_paths=False)


def test_every_declared_constraint_names_a_config_key():
    # a rule declared beside a field that is not a key would never be checked
    from sensemble.config.schema import TARGET_CLASSES, field_names

    for cls in TARGET_CLASSES.values():
        for name in getattr(cls, "_parameter_constraints", {}):
            assert name in field_names(cls), f"{cls.__name__} declares a rule for {name}, which is not a field"


def test_a_date_where_a_number_belongs(tmp_path):
    message = error_of(tmp_path, "[extraction]\nseed = 2026-12-02\n")
    assert "seed must be an integer, got 2026-12-02 (a date)" in message


def test_invalid_toml_is_a_config_error(tmp_path):
    assert "not valid TOML" in error_of(tmp_path, "[extraction\n")


def test_missing_file(tmp_path):
    with pytest.raises(ConfigError, match="no such config file"):
        load_config(tmp_path / "absent.toml")


def test_a_config_is_data_only(tmp_path):
    # TOML cannot express code; a string that looks like code stays a string (and fails the type check)
    message = error_of(tmp_path, '[extraction]\nbootstrap_samples = "__import__(\'os\').getpid()"\n')
    assert "must be an integer" in message


# --- what a valid config gives ----------------------------------------------------------------

def test_empty_config_is_all_defaults(tmp_path):
    config = load_config(write(tmp_path, ""))
    assert config == BatchConfig()


def test_sections_land_in_typed_settings(tmp_path):
    archive = tmp_path / "archive"
    archive.mkdir()
    config = load_config(write(tmp_path, """
[archive]
root = "archive"
include_models = ["M-A", "M-B"]
control = "ctl"
scenarios = ["scen-x"]
[extraction]
fit_years = [1, 140]
late_years = [21, 140]
drift_order = 2
forcing_ratio = 2
[emulator]
inputs = ["ecs_eff", "tcr"]
[prediction]
thresholds = [1.5]
[[prediction.cases]]
name = "mid"
ecs_eff = 3.0
tcr = 1.8
[output]
dir = "out"
quiet = true
"""))
    assert config.archive.root == archive
    assert config.extraction.include_models == ("M-A", "M-B")
    assert config.extraction.control == "ctl"
    assert config.extraction.scenarios == ("scen-x",)
    assert config.extraction.fit_years == (1, 140)
    assert config.extraction.drift_order == 2
    assert config.extraction.forcing_ratio == 2.0 and isinstance(config.extraction.forcing_ratio, float)
    assert config.emulator.inputs == ("ecs_eff", "tcr")
    assert config.prediction.thresholds == (1.5,)
    assert config.prediction.cases == ({"name": "mid", "ecs_eff": 3.0, "tcr": 1.8},)
    assert config.output.dir == tmp_path / "out"
    assert config.output.quiet is True


def test_every_settings_field_is_a_key():
    # keys come from the dataclasses: a field added to a settings class is a key at once
    from sensemble.emulator.settings import EmulatorSettings, PredictionSettings
    from sensemble.extractor.settings import ExtractionSettings

    keys = section_keys()
    valid = {key for table in keys.values() for key in table}
    for cls in (ExtractionSettings, EmulatorSettings, PredictionSettings):
        for f in dataclasses.fields(cls):
            if f.compare:
                assert f.name in valid, f"{cls.__name__}.{f.name} has no config key"
    assert "root" in keys["archive"] and "control" in keys["archive"]
    assert "control" not in keys["extraction"]


# --- round trip, overrides -------------------------------------------------------------------

def test_round_trip_through_dump(tmp_path):
    archive = tmp_path / "archive"
    archive.mkdir()
    source = write(tmp_path, """
[archive]
root = "archive"
exclude_models = ["M-\\"quoted\\""]
[extraction]
energy_leak_threshold = 1e-5
orthogonal_fit = true
[emulator]
scenario = "scen-x"
variance_kept = 0.95
[[prediction.cases]]
name = "likely"
ecs_eff = { distribution = "lognormal", median = 3.0, likely = [2.5, 4.0] }
[compute]
kind = "pbs"
cores = 4
memory = "8GiB"
job_extra_directives = ["-m n"]
[output]
dir = "out dir"
""")
    config = load_config(source)
    text = dump_config(config)
    tomllib.loads(text)  # valid TOML
    again = write(tmp_path / "archive", text, name="effective.toml")  # another folder: paths are absolute
    assert load_config(again) == config


def test_save_config_writes_the_dump_atomically(tmp_path):
    config = config_from_dict({"extraction": {"drift_order": 2}})
    path = save_config(config, tmp_path / "out" / "config.toml")
    assert path.read_text(encoding="utf-8") == dump_config(config)
    assert [p.name for p in path.parent.iterdir()] == ["config.toml"]
    assert load_config(path) == config


def test_command_line_overrides_config(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "elsewhere").mkdir()
    config = config_from_dict({"compute": {"workers": 2}, "output": {"force": False}}, check_paths=False)
    merged = merge_overrides(
        config, workers=6, force=True, out="results", archive="elsewhere",
        scenario="scen-y", quiet=None, **{"prediction.random_state": 7},
    )
    assert merged.compute.workers == 6
    assert merged.output.force is True
    assert merged.output.dir == tmp_path / "results"  # relative to the current folder
    assert merged.archive.root == tmp_path / "elsewhere"
    assert merged.emulator.scenario == "scen-y"
    assert merged.output.quiet is False  # None: flag not given
    assert merged.prediction.random_state == 7 and merged.emulator.random_state == 0
    assert merged.extraction == config.extraction


def test_overrides_are_validated(tmp_path):
    config = BatchConfig()
    with pytest.raises(ConfigError, match="workers must be > 0"):
        merge_overrides(config, workers=0)
    with pytest.raises(ConfigError, match="workers must be an integer"):
        merge_overrides(config, workers="4")
    with pytest.raises(ConfigError, match="several sections; say emulator.random_state or prediction.random_state"):
        merge_overrides(config, random_state=1)
    with pytest.raises(ConfigError, match="did you mean 'workers'"):
        merge_overrides(config, wrokers=3)
    with pytest.raises(ConfigError, match="does not exist"):
        merge_overrides(config, archive=str(tmp_path / "absent"))


# --- shipped configs -------------------------------------------------------------------------

@pytest.mark.parametrize("name", SHIPPED)
def test_shipped_config_loads_and_round_trips(name):
    config = load_config(CONFIGS / name, check_paths=False)
    assert tomllib.loads(dump_config(config))
    assert config_from_dict(tomllib.loads(dump_config(config)), check_paths=False) == config


@pytest.mark.parametrize("name", SHIPPED)
def test_every_key_of_a_shipped_config_is_commented(name):
    for line in (CONFIGS / name).read_text(encoding="utf-8").splitlines():
        stripped = line.strip()
        if "=" in stripped and not stripped.startswith("#"):
            assert "#" in stripped, f"{name}: key without a comment: {stripped}"


def test_demo_config_leaves_archive_and_output_to_the_demo_command():
    config = load_config(CONFIGS / "demo.toml")  # nothing to check: no paths in it
    assert config.archive.root is None and config.output.dir is None
    assert config.compute.kind == "auto"


def test_shipped_configs_choose_their_compute():
    kinds = {name: load_config(CONFIGS / name, check_paths=False).compute.kind for name in SHIPPED}
    assert kinds == {"demo.toml": "auto", "workstation.toml": "processes", "slurm.toml": "slurm", "pbs.toml": "pbs"}


def test_shipped_config_is_found_by_name():
    # installed (package data sensemble/configs/) or from the checkout (editable install): the same file either way
    found = shipped_config("demo")
    assert found.name == "demo.toml"
    assert found.read_bytes() == (CONFIGS / "demo.toml").read_bytes()
    with pytest.raises(ConfigError, match="no shipped config 'nonesuch'"):
        shipped_config("nonesuch")


def test_emulator_rules_are_the_estimators_own_declaration():
    # spelled once: the [emulator] keys that are estimator parameters are checked against its _parameter_constraints
    from sensemble.emulator.ensemble import EnsembleEmulator
    from sensemble.emulator.errors import EmulatorInputError
    from sensemble.emulator.settings import ESTIMATOR_CONSTRAINTS, EmulatorSettings

    assert EnsembleEmulator._parameter_constraints is ESTIMATOR_CONSTRAINTS
    assert set(ESTIMATOR_CONSTRAINTS) == set(EnsembleEmulator._get_param_names())
    fields = {f.name for f in dataclasses.fields(EmulatorSettings)}
    for name, rules in ESTIMATOR_CONSTRAINTS.items():
        if name in fields:
            assert EmulatorSettings._parameter_constraints[name] is rules, name
    # the estimator refuses the same value with the same words, before it looks at any data
    with pytest.raises(EmulatorInputError, match='smoothing must be one of .*the closest valid value is "gaussian"'):
        EnsembleEmulator(smoothing="gausian").fit(None)
    with pytest.raises(EmulatorInputError, match="n_restarts_optimizer must be >= 0, got -3"):
        EnsembleEmulator(n_restarts_optimizer=-3).fit(None)
