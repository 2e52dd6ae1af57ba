"""Command-line values laid over a config: `merge_overrides(config, workers=4, out="results")`."""
from __future__ import annotations

import difflib
from pathlib import Path

from .reading import config_from_dict, resolve, unknown_key, unknown_section
from .schema import SECTIONS, BatchConfig, ConfigError, is_path_key, section_keys, type_of
from .writing import config_to_dict, plain

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
        section, key = override_target(flag, keys)
        target, name = keys[section][key]
        if is_path_key(section, key, type_of(target, name)):
            value = str(resolve(value, Path.cwd()))
        data.setdefault(section, {})[key] = plain(value)
    return config_from_dict(data, source=f"{config.source} + command line", check_paths=check_paths)


def override_target(flag: str, keys: dict[str, dict]) -> tuple[str, str]:
    """The (section, key) a keyword names; `ConfigError` with the closest key when it names none."""
    if flag in CLI_ALIASES:
        return CLI_ALIASES[flag]
    for separator in (".", "__"):
        if separator in flag:
            section, key = flag.split(separator, 1)
            if section not in keys:
                raise ConfigError(f"command line: {unknown_section(section, {})}")
            if key not in keys[section]:
                raise ConfigError(f"command line: {unknown_key(section, key, keys)}")
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
