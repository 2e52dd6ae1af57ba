"""Batch configs: a TOML file read into typed settings, every mistake reported in one line before any data is read.

Sections and the settings they fill:

``[archive]``     `root` (→ `ArchiveConfig`), and the archive-side fields of `ExtractionSettings`:
                  experiment roles `control`, `abrupt`, `onepct`, `scenarios`, `include_models`,
                  `exclude_models`, `variables`, `required_variables`
``[extraction]``  every other field of `sensemble.extractor.settings.ExtractionSettings`
``[emulator]``    `sensemble.emulator.settings.EmulatorSettings`
``[prediction]``  `sensemble.emulator.settings.PredictionSettings` (`[[prediction.cases]]` tables)
``[compute]``     `sensemble.compute.ComputeSettings`
``[output]``      `OutputSettings`

One concept per module: `schema` (sections, keys, where each key's rules live), `coercion` (TOML value → the
field's type), `reading` (TOML → `BatchConfig`), `checks` (rules across keys, paths), `overrides` (command-line
values), `writing` (`BatchConfig` → TOML). A key's allowed values are declared beside its field, in the settings
class's `_parameter_constraints` (sensemble.contract.constraints).
"""
from .overrides import CLI_ALIASES, merge_overrides
from .reading import config_from_dict, load_config, shipped_config
from .schema import ARCHIVE_FIELDS, SECTIONS, ArchiveConfig, BatchConfig, ConfigError, OutputSettings, section_keys
from .writing import config_to_dict, dump_config, save_config

__all__ = [
    "ARCHIVE_FIELDS", "SECTIONS", "CLI_ALIASES", "ArchiveConfig", "BatchConfig", "ConfigError", "OutputSettings",
    "config_from_dict", "config_to_dict", "dump_config", "load_config", "merge_overrides", "save_config",
    "section_keys", "shipped_config",
]
