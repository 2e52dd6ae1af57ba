"""sensemble: climate sensitivity from model ensembles, and warming pathways emulated for sensitivities no model has.

The Python entry points (the command line runs the same steps):

`make_demo_archive`   an archive of invented models with known truth, for trying things out
`extract`             archive → sensitivity table (pandas) + global-mean series (xarray), `ExtractionResult`
`emulate`             extraction → fitted emulator, validation, warming pathways and crossing years
`EnsembleEmulator`    the emulator as a scikit-learn-style estimator (`fit(training_set)`, `clone` works)
`PathwayEmulator`     its Gaussian-process part (`fit(X, Y)`, `predict`, `sample_paths`)
`ExtractionSettings`, `EmulatorSettings`, `PredictionSettings`, `ComputeSettings`   every setting, with defaults
`load_config`         a TOML batch config → `BatchConfig`, checked before any data is read

Every setting is checked by the rules declared beside it before any file is read; a bad one raises `ConfigError`
(one line: the key, what it must be, the closest valid value).
"""
from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("sensemble")
except PackageNotFoundError:  # a source tree that was never installed
    __version__ = "0+unknown"

from sensemble.api import ExtractionResult, emulate, extract, make_demo_archive
from sensemble.compute import ComputeSettings
from sensemble.config import BatchConfig, ConfigError, load_config
from sensemble.emulator.settings import EmulatorSettings, PredictionSettings
from sensemble.extractor.settings import ExtractionSettings

# The estimators need scikit-learn (about a second to import): they are imported when first used, so that
# `import sensemble` (and the command line's start) stays light. They are the real classes, with their signatures.
_LAZY = {"EnsembleEmulator": "sensemble.emulator.ensemble", "PathwayEmulator": "sensemble.emulator.gp"}

__all__ = ["__version__", "make_demo_archive", "extract", "ExtractionResult", "emulate", "EnsembleEmulator",
           "PathwayEmulator", "ExtractionSettings", "EmulatorSettings", "PredictionSettings", "ComputeSettings",
           "BatchConfig", "ConfigError", "load_config"]


def __getattr__(name):
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'sensemble' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
