"""Reading a TOML batch config into a validated `BatchConfig`, every mistake reported in one line.

A config is data only: it is parsed with `tomllib` and nothing in it is ever executed. Relative paths are taken
from the config file's folder. Order of checks: sections and keys (closest valid key suggested), each value's type,
each value's declared constraints, then the rules that tie keys together (`checks.py`) — all before any data is read.
"""
from __future__ import annotations

import difflib
import os
import tomllib
from pathlib import Path

from sensemble.contract.constraints import YearWindow, format_value, problem

from .checks import check_together
from .coercion import Mismatch, coerce, describe, kind_of
from .schema import (
    SECTIONS, TARGET_CLASSES, BatchConfig, ConfigError, constraints_of, is_path_key, section_keys, type_of, where,
)


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
        raise ConfigError(f"{source}: a config is a TOML document of tables, got {kind_of(data)}")
    values: dict[str, dict[str, object]] = {target: {} for target in TARGET_CLASSES}
    for section, table in data.items():
        if section not in keys:
            raise ConfigError(f"{source}: {unknown_section(section, all_keys)}")
        if not isinstance(table, dict):
            raise ConfigError(f"{source}: [{section}] must be a table, got {section} = {format_value(table)}")
        for key, raw in table.items():
            if key not in keys[section]:
                raise ConfigError(f"{source}: {unknown_key(section, key, keys)}")
            target, name = keys[section][key]
            values[target][name] = _read_value(source, section, key, raw, base)
    for target, fields_ in values.items():
        for name, value in fields_.items():
            _check_value(source, target, name, value)
    config = BatchConfig(**{target: TARGET_CLASSES[target](**fields_) for target, fields_ in values.items()},
                         source=source)
    check_together(config, source, check_paths)
    return config


def unknown_section(section: str, all_keys: dict[str, str]) -> str:
    if section in all_keys:
        return f"'{section}' must be inside a section: put it under [{all_keys[section]}]"
    close = difflib.get_close_matches(section, SECTIONS, n=1)
    hint = f"did you mean [{close[0]}]?" if close else f"sections are {', '.join(f'[{s}]' for s in SECTIONS)}"
    return f"unknown section [{section}]; {hint}"


def unknown_key(section: str, key: str, keys: dict[str, dict]) -> str:
    close = difflib.get_close_matches(key, list(keys[section]), n=1)
    if close:
        return f"[{section}] unknown key '{key}'; did you mean '{close[0]}'?"
    elsewhere = [s for s in SECTIONS if key in keys[s]]
    if elsewhere:
        return f"[{section}] unknown key '{key}'; it belongs in [{elsewhere[0]}]"
    return f"[{section}] unknown key '{key}'; valid keys: {', '.join(keys[section])}"


def _read_value(source: str, section: str, key: str, raw, base: Path):
    target, name = section_keys()[section][key]
    hint = type_of(target, name)
    try:
        value = coerce(raw, hint)
    except Mismatch:
        expected = describe(hint)
        if any(isinstance(c, YearWindow) for c in constraints_of(target, name)):
            expected += " [start, end]"
        raise ConfigError(
            f"{source}: [{section}] {key} must be {expected}, got {format_value(raw)} ({kind_of(raw)})"
        ) from None
    if value is not None and is_path_key(section, key, hint):
        resolved = resolve(value, base)
        value = resolved if isinstance(value, Path) else str(resolved)
    if (section, key) == ("emulator", "pathways"):
        # the files a pathway table names are taken from the config's folder, like every other *_file key
        value = tuple({k: (str(resolve(v, base)) if k.endswith("_file") and isinstance(v, str) and v else v)
                       for k, v in item.items()} if isinstance(item, dict) else item for item in value)
    return value


def _check_value(source: str, target: str, name: str, value) -> None:
    if value is None:
        return
    declared = constraints_of(target, name)
    phrase = declared and problem(value, declared)
    if phrase:
        raise ConfigError(f"{source}: {where(target, name)} {phrase}")


def resolve(value, base: Path) -> Path:
    """A path from a config: `~` expanded, relative ones taken from `base`, normalised."""
    path = Path(value).expanduser()
    if not path.is_absolute():
        path = base / path
    return Path(os.path.normpath(path))


def shipped_config(name: str) -> Path:
    """Path of a config shipped in the project's `configs/` folder, e.g. `shipped_config("demo")`."""
    package = Path(__file__).resolve().parents[1]
    # installed: sensemble/configs/ (package data); editable install or checkout: configs/ at the repository's top
    candidates = [package / "configs" / f"{name}.toml", package.parents[1] / "configs" / f"{name}.toml"]
    path = next((p for p in candidates if p.is_file()), candidates[-1])
    if not path.is_file():
        raise ConfigError(f"{path}: no shipped config '{name}' (configs/ is not next to the installed package)")
    return path
