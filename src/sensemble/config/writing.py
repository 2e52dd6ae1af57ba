"""Writing a config back as TOML: the effective settings of a batch, defaults filled in, paths absolute.

The TOML text comes from `tomli_w` (the writer that pairs with the standard library's `tomllib` reader);
`load_config` reads what `dump_config` writes back to an equal config.
"""
from __future__ import annotations

import os
from pathlib import Path

import tomli_w

from sensemble.contract.atomic import write_text

from .schema import BatchConfig, section_keys


def config_to_dict(config: BatchConfig) -> dict[str, dict]:
    """The config as plain TOML values ({section: {key: value}}); unset (None) keys left out."""
    data: dict[str, dict] = {}
    for section, table in section_keys().items():
        data[section] = {}
        for key, (target, name) in table.items():
            value = getattr(getattr(config, target), name)
            if value is not None:
                data[section][key] = plain(value)
    return data


def plain(value):
    """A settings value as TOML holds it: paths as strings, tuples as arrays."""
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    return value


def dump_config(config: BatchConfig) -> str:
    """TOML text of the effective config (defaults filled in, paths absolute)."""
    header = (
        "# Effective configuration of a sensemble batch: defaults filled in, paths absolute.\n"
        f"# Read from: {' '.join(config.source.split())}\n"
        "# Keys left out have no value (none); see configs/*.toml for what each key means.\n\n"
    )
    return header + tomli_w.dumps(config_to_dict(config))


def save_config(config: BatchConfig, path: str | os.PathLike) -> Path:
    """Write `dump_config(config)` to `path` atomically (temporary file, then rename)."""
    return write_text(path, dump_config(config))
