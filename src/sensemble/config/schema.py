"""What a batch config holds: its sections, the settings class each fills, and where each key's rules live.

Keys and types come from the settings dataclasses themselves (fields and annotations), so a field added to a
settings class is a config key at once; allowed values and ranges come from the `_parameter_constraints` each
class declares beside its fields (sensemble.contract.constraints). Every key may be left out: it then takes the
dataclass default. TOML has no "none": leave a key out to keep a default of none.
"""
from __future__ import annotations

import dataclasses
import typing
from dataclasses import dataclass, field
from pathlib import Path

from sensemble.compute import ComputeSettings
from sensemble.contract.errors import SensembleError
from sensemble.emulator.settings import EmulatorSettings, PredictionSettings
from sensemble.extractor.settings import ExtractionSettings


class ConfigError(SensembleError, ValueError):
    """A config that cannot be used; the message is one line naming the file, key and fix.

    One of the project's errors (`SensembleError`, one line), and still a `ValueError` for callers that catch that.
    """


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


SECTIONS = ("archive", "extraction", "emulator", "prediction", "compute", "output")
# ExtractionSettings fields that describe the archive rather than the fits: they are read
# from [archive]. Names not (or no longer) in ExtractionSettings are skipped.
ARCHIVE_FIELDS = (
    "control", "abrupt", "onepct", "cmip5_control", "cmip5_abrupt", "cmip5_onepct", "scenarios",
    "include_models", "exclude_models", "variables", "required_variables",
)
#: BatchConfig attribute → the settings class it holds.
TARGET_CLASSES = {
    "archive": ArchiveConfig,
    "extraction": ExtractionSettings,
    "emulator": EmulatorSettings,
    "prediction": PredictionSettings,
    "compute": ComputeSettings,
    "output": OutputSettings,
}
# Path-valued keys, resolved against the config's folder; besides these, every key whose
# name ends in "_file" and every field annotated as a Path. (compute.local_directory is not one: it names scratch
# space on the compute nodes, often through an environment variable such as $TMPDIR.)
PATH_KEYS = {("archive", "root"), ("output", "dir"), ("compute", "log_directory")}


def config_fields(cls) -> list[dataclasses.Field]:
    """The fields of a settings class that are config keys (those left out of comparison are not settings)."""
    return [f for f in dataclasses.fields(cls) if f.compare]


def field_names(cls) -> list[str]:
    return [f.name for f in config_fields(cls)]


def section_keys() -> dict[str, dict[str, tuple[str, str]]]:
    """The valid keys of every section: {section: {key: (target, field name)}}."""
    extraction_names = field_names(ExtractionSettings)
    keys: dict[str, dict[str, tuple[str, str]]] = {name: {} for name in SECTIONS}
    keys["archive"]["root"] = ("archive", "root")
    for name in ARCHIVE_FIELDS:
        if name in extraction_names:
            keys["archive"][name] = ("extraction", name)
    for name in extraction_names:
        if name not in keys["archive"]:
            keys["extraction"][name] = ("extraction", name)
    for section in ("emulator", "prediction", "compute", "output"):
        for name in field_names(TARGET_CLASSES[section]):
            keys[section][name] = (section, name)
    return keys


def type_of(target: str, name: str):
    """The annotated type of a settings field."""
    return typing.get_type_hints(TARGET_CLASSES[target])[name]


def constraints_of(target: str, name: str) -> list:
    """The declared constraints of a settings field ([] when it declares none)."""
    return list(getattr(TARGET_CLASSES[target], "_parameter_constraints", {}).get(name, ()))


def where(target: str, name: str) -> str:
    """How a message names a field: its section and key, e.g. "[archive] scenarios"."""
    for section, table in section_keys().items():
        if table.get(name) == (target, name):
            return f"[{section}] {name}"
    return f"[{target}] {name}"


def is_path_key(section: str, key: str, hint) -> bool:
    annotated = hint is Path or Path in (typing.get_args(hint) or ())
    return annotated or (section, key) in PATH_KEYS or key.endswith("_file")
