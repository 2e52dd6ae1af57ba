"""Emulator stage: extractor output files → two-layer physics mean + Gaussian-process pathway emulator →
predictions, crossings, validation, figures. Entry point: `emulate` (emulator.run).

Names are imported lazily so that `import sensemble.emulator.ebm` (used by the demo generator) stays light.
"""
from __future__ import annotations

import importlib

_EXPORTS = {
    "emulate": "run", "EmulationResult": "run", "format_summary": "run",
    "EmulatorSettings": "settings", "PredictionSettings": "settings",
    "PathwayEmulator": "gp", "EnsembleEmulator": "ensemble", "load_training_set": "training", "calibrate_two_layer": "calibrate",
    "save_emulator": "persist", "load_emulator": "persist", "EmulatorInputError": "errors",
    "parse_point": "predict", "parse_distribution": "predict",
    "ParameterEmulator": "parameters", "ParameterPathwayEmulator": "parameter_pathways",
    "emulate_pathways": "scenario_batch", "format_pathways_summary": "scenario_batch",
}
__all__ = sorted(_EXPORTS)


def __getattr__(name):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module sensemble.emulator has no attribute {name!r}")
