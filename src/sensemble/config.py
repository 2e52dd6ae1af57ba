"""Batch configs: a TOML file read into typed settings, every mistake reported in one line.

A config is data only: it is parsed with `tomllib` and nothing in it is ever executed.
Sections and the settings they fill:

``[archive]``     `root` (→ `ArchiveConfig`), and the archive-side fields of `ExtractionSettings`:
                  experiment roles `control`, `abrupt`, `onepct`, `scenarios`, `include_models`,
                  `exclude_models`, `variables`, `required_variables`
``[extraction]``  every other field of `extractor.settings.ExtractionSettings`
``[emulator]``    `emulator.settings.EmulatorSettings`
``[prediction]``  `emulator.settings.PredictionSettings` (`[[prediction.cases]]` tables)
``[compute]``     `sensemble.compute.ComputeSettings`
``[output]``      `OutputSettings`

Keys and types come from the dataclasses themselves (fields and annotations), so a field added
to a settings class is a config key at once; allowed values and ranges are the table `RULES`.
Every key may be left out: it then takes the dataclass default. TOML has no "none": leave a key
out to keep a default of none. Relative paths are taken from the config file's folder.
"""
from __future__ import annotations

import dataclasses
import datetime
import difflib
import math
import os
import re
import tempfile
import tomllib
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path

from sensemble.emulator.settings import EmulatorSettings, PredictionSettings
from sensemble.extractor.settings import ExtractionSettings
from sensemble.compute import JOB_QUEUE_KINDS, KINDS, ComputeSettings


class ConfigError(ValueError):
    """A config that cannot be used; the message is one line naming the file, key and fix."""


@dataclass(frozen=True)
class ArchiveConfig:
    """Where the ensemble archive lives (CMIP directory tree or a flat folder of NetCDF files)."""

    root: Path | None = None  # None: to be given on the command line (`sensemble demo` fills it in)


@dataclass(frozen=True)
class OutputSettings:
    """Where results go and how much is written."""

    dir: Path | None = None  # None: to be given on the command line (--out)
    force: bool = False  # recompute runs whose cached results are up to date
    quiet: bool = False  # no progress on the terminal (the log file is still written)
    figures: bool = True  # Gregory plots, ensemble summary, pathway fans


@dataclass(frozen=True)
class BatchConfig:
    """Everything a batch (`sensemble run CONFIG.toml`) needs, validated."""

    archive: ArchiveConfig = field(default_factory=ArchiveConfig)
    extraction: ExtractionSettings = field(default_factory=ExtractionSettings)
    emulator: EmulatorSettings = field(default_factory=EmulatorSettings)
    prediction: PredictionSettings = field(default_factory=PredictionSettings)
    compute: ComputeSettings = field(default_factory=ComputeSettings)
    output: OutputSettings = field(default_factory=OutputSettings)
    source: str = field(default="<defaults>", compare=False)  # where it was read from


# ---------------------------------------------------------------------------------------------
# Section layout: TOML section → {key: (BatchConfig attribute, field name)}

SECTIONS = ("archive", "extraction", "emulator", "prediction", "compute", "output")
# ExtractionSettings fields that describe the archive rather than the fits: they are read
# from [archive]. Names not (or no longer) in ExtractionSettings are skipped.
ARCHIVE_FIELDS = (
    "control", "abrupt", "onepct", "scenarios",
    "include_models", "exclude_models", "variables", "required_variables",
)
_TARGET_CLASSES = {
    "archive": ArchiveConfig,
    "extraction": ExtractionSettings,
    "emulator": EmulatorSettings,
    "prediction": PredictionSettings,
    "compute": ComputeSettings,
    "output": OutputSettings,
}
# Path-valued keys, resolved against the config's folder; besides these, every key whose
# name ends in "_file" and every field annotated as a Path. (compute.local_directory is not one: it names scratch space on the
# compute nodes, often through an environment variable such as $TMPDIR.)
PATH_KEYS = {("archive", "root"), ("output", "dir"), ("compute", "log_directory")}


def _config_fields(cls) -> list[dataclasses.Field]:
    # fields left out of comparison (e.g. ExtractionSettings.extra) are not settings
    return [f for f in dataclasses.fields(cls) if f.compare]


def section_keys() -> dict[str, dict[str, tuple[str, str]]]:
    """The valid keys of every section: {section: {key: (target, field name)}}."""
    extraction_names = [f.name for f in _config_fields(ExtractionSettings)]
    keys: dict[str, dict[str, tuple[str, str]]] = {name: {} for name in SECTIONS}
    keys["archive"]["root"] = ("archive", "root")
    for name in ARCHIVE_FIELDS:
        if name in extraction_names:
            keys["archive"][name] = ("extraction", name)
    for name in extraction_names:
        if name not in keys["archive"]:
            keys["extraction"][name] = ("extraction", name)
    for section in ("emulator", "prediction", "compute", "output"):
        for f in _config_fields(_TARGET_CLASSES[section]):
            keys[section][f.name] = (section, f.name)
    return keys


def _hints(cls) -> dict[str, object]:
    return typing.get_type_hints(cls)


# ---------------------------------------------------------------------------------------------
# Allowed values and ranges (declarative, scikit-learn style)


@dataclass(frozen=True)
class Choice:
    values: tuple

    def problem(self, value) -> str | None:
        if value in self.values:
            return None
        return f"must be one of {', '.join(_toml_value(v) for v in self.values)}"


@dataclass(frozen=True)
class Interval:
    low: float | None = None
    high: float | None = None
    low_open: bool = True
    high_open: bool = False

    def problem(self, value) -> str | None:
        bad_low = self.low is not None and (value <= self.low if self.low_open else value < self.low)
        bad_high = self.high is not None and (value >= self.high if self.high_open else value > self.high)
        if not (bad_low or bad_high or (isinstance(value, float) and math.isnan(value))):
            return None
        if self.high is None:
            return f"must be {'>' if self.low_open else '>='} {_number(self.low)}"
        left = "(" if self.low_open else "["
        right = ")" if self.high_open else "]"
        return f"must be in {left}{_number(self.low)}, {_number(self.high)}{right}"


@dataclass(frozen=True)
class ByteSize:
    """A memory size dask understands ("4GiB", "500MB")."""

    def problem(self, value) -> str | None:
        from dask.utils import parse_bytes

        try:
            if parse_bytes(value) > 0:
                return None
        except (ValueError, TypeError):
            pass
        return 'must be a memory size such as "4GiB" or "500MB"'


@dataclass(frozen=True)
class Walltime:
    """A job time limit as batch queues write it: [days-]hours[:minutes[:seconds]]."""

    def problem(self, value) -> str | None:
        if re.fullmatch(r"(\d+-)?\d+(:[0-5]\d){0,2}", value):
            return None
        return 'must be a time limit such as "02:00:00" (hours:minutes:seconds)'


POSITIVE = Interval(0)
NON_NEGATIVE = Interval(0, low_open=False)
FRACTION = Interval(0, 1, low_open=False)

#: (target, field) → rule; a rule on a tuple-valued field applies to each element.
RULES: dict[tuple[str, str], Choice | Interval | ByteSize | Walltime] = {
    ("extraction", "drift_order"): Choice((1, 2)),
    ("extraction", "forcing_ratio"): POSITIVE,
    ("extraction", "min_control_years"): POSITIVE,
    ("extraction", "bootstrap_samples"): POSITIVE,
    ("extraction", "bootstrap_block"): POSITIVE,
    ("extraction", "seed"): NON_NEGATIVE,
    ("extraction", "energy_leak_threshold"): POSITIVE,
    ("extraction", "poor_fit_r2"): FRACTION,
    ("extraction", "ecs_max"): POSITIVE,
    ("emulator", "forcing_source"): Choice(("diagnosed", "co2", "file")),
    ("emulator", "variance_kept"): Interval(0, 1),
    ("emulator", "max_components"): POSITIVE,
    ("emulator", "kernel"): Choice(("matern52", "rbf")),
    ("emulator", "random_state"): NON_NEGATIVE,
    ("prediction", "thresholds"): POSITIVE,
    ("prediction", "quantiles"): Interval(0, 1, high_open=True),
    ("prediction", "n_samples"): POSITIVE,
    ("prediction", "random_state"): NON_NEGATIVE,
    ("compute", "kind"): Choice(KINDS),
    ("compute", "workers"): POSITIVE,
    ("compute", "threads_per_worker"): POSITIVE,
    ("compute", "cores"): POSITIVE,
    ("compute", "jobs"): POSITIVE,
    ("compute", "memory"): ByteSize(),
    ("compute", "memory_limit"): ByteSize(),
    ("compute", "walltime"): Walltime(),
}


def _is_window(name: str, hint) -> bool:
    """Year windows: `*_years` fields typed tuple[int, int], both ends inclusive, from year 1."""
    return name.endswith("_years") and hint == tuple[int, int]


# ---------------------------------------------------------------------------------------------
# Types


class _Mismatch(Exception):
    pass


def _union_args(hint) -> tuple | None:
    if typing.get_origin(hint) in (typing.Union, types.UnionType):
        return typing.get_args(hint)
    return None


def _describe(hint) -> str:
    args = _union_args(hint)
    if args is not None:
        return " or ".join(_describe(a) for a in args if a is not type(None))
    if typing.get_origin(hint) is typing.Literal:
        return "one of " + ", ".join(_toml_value(v) for v in typing.get_args(hint))
    if hint is bool:
        return "true or false"
    if hint is int:
        return "an integer"
    if hint is float:
        return "a number"
    if hint is str:
        return "a string"
    if hint is Path:
        return "a path (string)"
    if hint is dict or typing.get_origin(hint) is dict:
        return "a table"
    if typing.get_origin(hint) is tuple:
        args = typing.get_args(hint)
        if len(args) == 2 and args[1] is Ellipsis:
            element = _describe(args[0])
            plural = {"an integer": "integers", "a number": "numbers", "a string": "strings",
                      "a table": "tables", "true or false": "booleans"}.get(element, element)
            return "an array of tables" if plural == "tables" else f"an array of {plural}"
        if all(a is int for a in args):
            return f"an array of {len(args)} integers"
        return f"an array of {len(args)} values"
    return getattr(hint, "__name__", str(hint))


def _kind_of(value) -> str:
    if isinstance(value, bool):
        return "a boolean"
    if isinstance(value, int):
        return "an integer"
    if isinstance(value, float):
        return "a number"
    if isinstance(value, str):
        return "a string"
    if isinstance(value, (list, tuple)):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, (datetime.date, datetime.time)):
        return f"a {type(value).__name__}"
    return type(value).__name__


def _freeze(value):
    """Nested TOML values made immutable and comparable: arrays → tuples, tables → dicts."""
    if isinstance(value, (list, tuple)):
        return tuple(_freeze(v) for v in value)
    if isinstance(value, dict):
        return {str(k): _freeze(v) for k, v in value.items()}
    if isinstance(value, Path):
        return str(value)
    return value


def _coerce(value, hint):
    """`value` as the annotated type, or _Mismatch. Strict: no string→number, no float→int."""
    args = _union_args(hint)
    if args is not None:
        if value is None and type(None) in args:
            return None
        for arg in args:
            if arg is type(None):
                continue
            try:
                return _coerce(value, arg)
            except _Mismatch:
                pass
        raise _Mismatch
    if typing.get_origin(hint) is typing.Literal:
        if any(value == allowed and type(value) is type(allowed) for allowed in typing.get_args(hint)):
            return value
        raise _Mismatch
    if hint is bool:
        if isinstance(value, bool):
            return value
        raise _Mismatch
    if hint is int:
        if isinstance(value, int) and not isinstance(value, bool):
            return value
        raise _Mismatch
    if hint is float:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return float(value)
        raise _Mismatch
    if hint is str:
        if isinstance(value, str):
            return value
        raise _Mismatch
    if hint is Path:
        if isinstance(value, (str, Path)) and str(value):
            return Path(value)
        raise _Mismatch
    if hint is dict or typing.get_origin(hint) is dict:
        if isinstance(value, dict):
            return _freeze(value)
        raise _Mismatch
    if typing.get_origin(hint) is tuple:
        if not isinstance(value, (list, tuple)):
            raise _Mismatch
        args = typing.get_args(hint)
        if len(args) == 2 and args[1] is Ellipsis:
            return tuple(_coerce(v, args[0]) for v in value)
        if len(value) != len(args):
            raise _Mismatch
        return tuple(_coerce(v, a) for v, a in zip(value, args))
    if hint is typing.Any or hint is object:
        return _freeze(value)
    if isinstance(hint, type) and isinstance(value, hint):
        return value
    raise _Mismatch


# ---------------------------------------------------------------------------------------------
# Reading


def load_config(path: str | os.PathLike, *, check_paths: bool = True) -> BatchConfig:
    """Read and validate a TOML batch config.

    Parameters
    ----------
    path : the TOML file; relative paths inside it are taken from its folder.
    check_paths : also require that the archive root and any input files named exist.

    Raises
    ------
    ConfigError : one line naming the file, the section and key, and what to change.
    """
    path = Path(path)
    try:
        with open(path, "rb") as handle:
            data = tomllib.load(handle)
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such config file") from None
    except IsADirectoryError:
        raise ConfigError(f"{path}: is a folder, not a config file") from None
    except tomllib.TOMLDecodeError as error:
        raise ConfigError(f"{path}: not valid TOML: {error}") from None
    return config_from_dict(data, source=str(path), base_dir=path.resolve().parent, check_paths=check_paths)


def config_from_dict(
    data: dict,
    *,
    source: str = "<config>",
    base_dir: str | os.PathLike | None = None,
    check_paths: bool = True,
) -> BatchConfig:
    """Validate a parsed config (as `tomllib` returns it) into a `BatchConfig`.

    `source` names the config in error messages; relative paths are taken from `base_dir`
    (default: the current folder).
    """
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    keys = section_keys()
    all_keys = {key: section for section, table in keys.items() for key in table}
    if not isinstance(data, dict):
        raise ConfigError(f"{source}: a config is a TOML document of tables, got {_kind_of(data)}")
    values: dict[str, dict[str, object]] = {target: {} for target in _TARGET_CLASSES}
    for section, table in data.items():
        if section not in keys:
            raise ConfigError(f"{source}: {_unknown_section(section, all_keys)}")
        if not isinstance(table, dict):
            raise ConfigError(f"{source}: [{section}] must be a table, got {section} = {_toml_value(table)}")
        for key, raw in table.items():
            if key not in keys[section]:
                raise ConfigError(f"{source}: {_unknown_key(section, key, keys)}")
            target, name = keys[section][key]
            values[target][name] = _read_value(source, section, key, raw, base)
    return _build(values, source, check_paths)


def _unknown_section(section: str, all_keys: dict[str, str]) -> str:
    if section in all_keys:
        return f"'{section}' must be inside a section: put it under [{all_keys[section]}]"
    close = difflib.get_close_matches(section, SECTIONS, n=1)
    hint = f"did you mean [{close[0]}]?" if close else f"sections are {', '.join(f'[{s}]' for s in SECTIONS)}"
    return f"unknown section [{section}]; {hint}"


def _unknown_key(section: str, key: str, keys: dict[str, dict]) -> str:
    close = difflib.get_close_matches(key, list(keys[section]), n=1)
    if close:
        return f"[{section}] unknown key '{key}'; did you mean '{close[0]}'?"
    elsewhere = [s for s in SECTIONS if key in keys[s]]
    if elsewhere:
        return f"[{section}] unknown key '{key}'; it belongs in [{elsewhere[0]}]"
    return f"[{section}] unknown key '{key}'; valid keys: {', '.join(keys[section])}"


def _read_value(source: str, section: str, key: str, raw, base: Path):
    target, name = section_keys()[section][key]
    hint = _hints(_TARGET_CLASSES[target])[name]
    try:
        value = _coerce(raw, hint)
    except _Mismatch:
        expected = _describe(hint)
        if _is_window(name, hint):
            expected += " [start, end]"
        raise ConfigError(
            f"{source}: [{section}] {key} must be {expected}, got {_toml_value(raw)} ({_kind_of(raw)})"
        ) from None
    if value is not None and _is_path_key(section, key, hint):
        resolved = _resolve(value, base)
        value = resolved if isinstance(value, Path) else str(resolved)
    return value


def _is_path_key(section: str, key: str, hint) -> bool:
    annotated = hint is Path or Path in (_union_args(hint) or ())
    return annotated or (section, key) in PATH_KEYS or key.endswith("_file")


def _resolve(value, base: Path) -> Path:
    path = Path(value).expanduser()
    if not path.is_absolute():
        path = base / path
    return Path(os.path.normpath(path))


def _where(target: str, name: str) -> str:
    for section, table in section_keys().items():
        if table.get(name) == (target, name):
            return f"[{section}] {name}"
    return f"[{target}] {name}"


def _build(values: dict[str, dict], source: str, check_paths: bool) -> BatchConfig:
    for target, fields_ in values.items():
        hints = _hints(_TARGET_CLASSES[target])
        for name, value in fields_.items():
            _check_value(source, target, name, value, hints[name])
    parts = {target: _TARGET_CLASSES[target](**fields_) for target, fields_ in values.items()}
    config = BatchConfig(**parts, source=source)
    _check_together(config, source, check_paths)
    return config


def _check_value(source: str, target: str, name: str, value, hint) -> None:
    if value is None:
        return
    where = _where(target, name)
    if _is_window(name, hint):
        start, end = value
        if not 1 <= start <= end:
            raise ConfigError(
                f"{source}: {where} must be [start, end] with 1 <= start <= end "
                f"(years count from 1 at the branch), got {_toml_value(value)}"
            )
    rule = RULES.get((target, name))
    if rule is None:
        return
    elements = value if isinstance(value, tuple) else (value,)
    for element in elements:
        problem = rule.problem(element)
        if problem:
            raise ConfigError(f"{source}: {where} {problem}, got {_toml_value(value)}")


def _check_together(config: BatchConfig, source: str, check_paths: bool) -> None:
    """Rules that tie several keys together, and the paths that must exist."""
    ex = config.extraction
    fit = getattr(ex, "fit_years", None)
    for name in ("early_years", "late_years"):
        window = getattr(ex, name, None)
        if fit and window and not (fit[0] <= window[0] and window[1] <= fit[1]):
            raise ConfigError(
                f"{source}: {_where('extraction', name)} {_toml_value(window)} must lie within "
                f"fit_years {_toml_value(fit)}; shorten it or widen fit_years"
            )
    block = getattr(ex, "bootstrap_block", None)
    if fit and block and block > fit[1] - fit[0] + 1:
        raise ConfigError(
            f"{source}: [extraction] bootstrap_block ({block} years) is longer than fit_years "
            f"{_toml_value(fit)} ({fit[1] - fit[0] + 1} years)"
        )
    both = sorted(set(getattr(ex, "include_models", ())) & set(getattr(ex, "exclude_models", ())))
    if both:
        raise ConfigError(f"{source}: [archive] model {both[0]} is in both include_models and exclude_models")

    em = config.emulator
    inputs = tuple(getattr(em, "inputs", ()))
    if "inputs" in _field_names(EmulatorSettings):
        if not inputs:
            raise ConfigError(f"{source}: [emulator] inputs must name at least one sensitivity-table column")
        if len(set(inputs)) != len(inputs):
            raise ConfigError(f"{source}: [emulator] inputs lists a column twice: {_toml_value(inputs)}")
    for source_kind, file_key in (("file", "forcing_file"), ("co2", "co2_file")):
        if getattr(em, "forcing_source", None) == source_kind and getattr(em, file_key, "") is None:
            raise ConfigError(f"{source}: [emulator] forcing_source = \"{source_kind}\" needs {file_key}")
    _check_cases(config, source, inputs)

    co = config.compute
    if co.kind == "address" and not co.address:
        raise ConfigError(f"{source}: [compute] kind = \"address\" needs address (e.g. \"tcp://host:8786\")")
    if co.kind in JOB_QUEUE_KINDS:
        missing = [k for k in ("cores", "memory") if getattr(co, k) is None]
        if missing:
            raise ConfigError(
                f"{source}: [compute] kind = \"{co.kind}\" needs {' and '.join(missing)} (per job), "
                "e.g. cores = 8, memory = \"32GiB\""
            )
        if co.threads_per_worker > co.cores:
            raise ConfigError(
                f"{source}: [compute] threads_per_worker ({co.threads_per_worker}) exceeds cores per job ({co.cores})"
            )

    if check_paths:
        root = config.archive.root
        if root is not None and not root.is_dir():
            what = "is not a folder" if root.exists() else "does not exist"
            raise ConfigError(f"{source}: [archive] root {root} {what}")
        for name in _field_names(EmulatorSettings):
            value = getattr(em, name)
            if name.endswith("_file") and value is not None and not Path(value).is_file():
                raise ConfigError(f"{source}: [emulator] {name} {value} does not exist")


def _field_names(cls) -> list[str]:
    return [f.name for f in _config_fields(cls)]


def _check_cases(config: BatchConfig, source: str, inputs: tuple[str, ...]) -> None:
    """Each case: a `name`, and values for emulator inputs (a number, or a distribution table)."""
    names = set()
    for number, case in enumerate(getattr(config.prediction, "cases", ()), start=1):
        name = case.get("name")
        label = f"[[prediction.cases]] #{number}"
        if not isinstance(name, str) or not name:
            raise ConfigError(f"{source}: {label} needs name = \"...\" (a non-empty string)")
        if name in names:
            raise ConfigError(f"{source}: {label}: case name '{name}' is used twice")
        names.add(name)
        for key, value in case.items():
            if key == "name":
                continue
            if key == "samples_file":  # input samples from a CSV file, one column per input
                if not isinstance(value, str) or not value:
                    raise ConfigError(f"{source}: case '{name}': samples_file must be a path (string)")
                continue
            if inputs and key not in inputs:
                close = difflib.get_close_matches(key, inputs, n=1)
                hint = f"did you mean '{close[0]}'?" if close else f"emulator inputs are {', '.join(inputs)}"
                raise ConfigError(f"{source}: case '{name}': '{key}' is not an emulator input; {hint}")
            if isinstance(value, dict):
                if not isinstance(value.get("distribution"), str):
                    raise ConfigError(
                        f"{source}: case '{name}': {key} is a table, so it needs distribution = \"...\""
                    )
            elif isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ConfigError(
                    f"{source}: case '{name}': {key} must be a number or a distribution table, "
                    f"got {_toml_value(value)} ({_kind_of(value)})"
                )


# ---------------------------------------------------------------------------------------------
# Command-line overrides

#: Command-line names that differ from the config key they override.
CLI_ALIASES = {"out": ("output", "dir"), "archive": ("archive", "root")}


def merge_overrides(config: BatchConfig, *, check_paths: bool = True, **cli_values) -> BatchConfig:
    """A new config with command-line values in place of the config's.

    Keywords are config keys (`workers=4`, `force=True`, `scenario="ssp-x"`), a key qualified
    by its section where a name is in two sections (`prediction__random_state=1`, or
    `**{"prediction.random_state": 1}`), or the aliases `out` (output dir) and `archive`
    (archive root). None means "flag not given" and changes nothing. Relative paths are taken
    from the current folder. The result is validated like a config file.
    """
    keys = section_keys()
    data = config_to_dict(config)
    for flag, value in cli_values.items():
        if value is None:
            continue
        section, key = _override_target(flag, keys)
        target, name = keys[section][key]
        if _is_path_key(section, key, _hints(_TARGET_CLASSES[target])[name]):
            value = str(_resolve(value, Path.cwd()))
        data.setdefault(section, {})[key] = _plain(value)
    return config_from_dict(data, source=f"{config.source} + command line", check_paths=check_paths)


def _override_target(flag: str, keys: dict[str, dict]) -> tuple[str, str]:
    if flag in CLI_ALIASES:
        return CLI_ALIASES[flag]
    for separator in (".", "__"):
        if separator in flag:
            section, key = flag.split(separator, 1)
            if section not in keys:
                raise ConfigError(f"command line: {_unknown_section(section, {})}")
            if key not in keys[section]:
                raise ConfigError(f"command line: {_unknown_key(section, key, keys)}")
            return section, key
    owners = [section for section in SECTIONS if flag in keys[section]]
    if len(owners) == 1:
        return owners[0], flag
    if len(owners) > 1:
        options = " or ".join(f"{s}.{flag}" for s in owners)
        raise ConfigError(f"command line: '{flag}' is a key of several sections; say {options}")
    every = [key for table in keys.values() for key in table] + list(CLI_ALIASES)
    close = difflib.get_close_matches(flag, every, n=1)
    hint = f"; did you mean '{close[0]}'?" if close else ""
    raise ConfigError(f"command line: '{flag}' is not a config key{hint}")


# ---------------------------------------------------------------------------------------------
# Writing


def config_to_dict(config: BatchConfig) -> dict[str, dict]:
    """The config as plain TOML values ({section: {key: value}}); unset (None) keys left out."""
    data: dict[str, dict] = {}
    for section, table in section_keys().items():
        data[section] = {}
        for key, (target, name) in table.items():
            value = getattr(getattr(config, target), name)
            if value is not None:
                data[section][key] = _plain(value)
    return data


def _plain(value):
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    return value


def dump_config(config: BatchConfig) -> str:
    """TOML text of the effective config (defaults filled in, paths absolute).

    `load_config` reads it back to an equal config.
    """
    lines = [
        "# Effective configuration of a sensemble batch: defaults filled in, paths absolute.",
        f"# Read from: {config.source}",
        "# Keys left out have no value (none); see configs/*.toml for what each key means.",
    ]
    for section, table in config_to_dict(config).items():
        lines.append("")
        lines.append(f"[{section}]")
        arrays_of_tables = {}
        for key, value in table.items():
            if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
                arrays_of_tables[key] = value
                continue
            lines.append(f"{_toml_key(key)} = {_toml_value(value)}")
        for key, tables in arrays_of_tables.items():
            for entry in tables:
                lines.append("")
                lines.append(f"[[{section}.{_toml_key(key)}]]")
                lines.extend(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in entry.items())
    return "\n".join(lines) + "\n"


def shipped_config(name: str) -> Path:
    """Path of a config shipped in the project's `configs/` folder, e.g. `shipped_config("demo")`."""
    here = Path(__file__).resolve().parent
    # installed: sensemble/configs/ (package data); editable install or checkout: configs/ at the repository's top
    candidates = [here / "configs" / f"{name}.toml", here.parents[1] / "configs" / f"{name}.toml"]
    path = next((p for p in candidates if p.is_file()), candidates[-1])
    if not path.is_file():
        raise ConfigError(f"{path}: no shipped config '{name}' (configs/ is not next to the installed package)")
    return path


def save_config(config: BatchConfig, path: str | os.PathLike) -> Path:
    """Write `dump_config(config)` to `path` atomically (temporary file, then rename)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(dump_config(config))
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise
    return path


_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")
_ESCAPES = {'"': '\\"', "\\": "\\\\", "\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}


def _toml_key(key: str) -> str:
    return key if _BARE_KEY.fullmatch(key) else _toml_string(key)


def _toml_string(text: str) -> str:
    out = []
    for char in text:
        if char in _ESCAPES:
            out.append(_ESCAPES[char])
        elif ord(char) < 0x20 or ord(char) == 0x7F:
            out.append(f"\\u{ord(char):04x}")
        else:
            out.append(char)
    return '"' + "".join(out) + '"'


def _number(value) -> str:
    return str(int(value)) if float(value).is_integer() else repr(float(value))


def _toml_value(value) -> str:
    """A TOML literal for the simple types a config holds (also used in error messages)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)  # shortest text that reads back to the same float; valid TOML
    if isinstance(value, (str, Path)):
        return _toml_string(str(value))
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_toml_key(str(k))} = {_toml_value(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (datetime.date, datetime.time)):  # TOML dates and times (never a valid setting)
        return value.isoformat()
    raise TypeError(f"no TOML form for {type(value).__name__}")
