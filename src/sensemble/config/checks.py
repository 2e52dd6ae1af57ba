"""Rules that tie several config keys together, and the paths that must exist — checked before any data is read.

Each rule refuses a config in one line naming the key and, where there is one, the closest valid value; a rule
belongs here only when no single field can state it (a single field's range is declared beside the field).
"""
from __future__ import annotations

import difflib
from pathlib import Path

from sensemble.compute import JOB_QUEUE_KINDS
from sensemble.contract.constraints import format_value
from sensemble.contract.table import ALL_COLUMNS, TEXT_COLUMNS
from sensemble.emulator.settings import EmulatorSettings
from sensemble.extractor.settings import SENSITIVITY_VARIABLES

from .coercion import kind_of
from .schema import BatchConfig, ConfigError, field_names, where


def check_together(config: BatchConfig, source: str, check_paths: bool) -> None:
    """Raise `ConfigError` for the first rule across keys that `config` breaks."""
    _check_extraction(config, source)
    inputs = _check_emulator(config, source)
    _check_cases(config, source, inputs)
    _check_pathways(config, source, check_paths)
    _check_grid(config, source, inputs)
    _check_compute(config, source)
    if check_paths:
        _check_paths(config, source)


def _check_extraction(config: BatchConfig, source: str) -> None:
    ex = config.extraction
    fit = getattr(ex, "fit_years", None)
    for name in ("early_years", "late_years"):
        window = getattr(ex, name, None)
        if fit and window and not (fit[0] <= window[0] and window[1] <= fit[1]):
            raise ConfigError(
                f"{source}: {where('extraction', name)} {format_value(window)} must lie within "
                f"fit_years {format_value(fit)}; shorten it or widen fit_years"
            )
    block = getattr(ex, "bootstrap_block", None)
    if fit and block and block > fit[1] - fit[0] + 1:
        raise ConfigError(
            f"{source}: [extraction] bootstrap_block ({block} years) is longer than fit_years "
            f"{format_value(fit)} ({fit[1] - fit[0] + 1} years)"
        )
    both = sorted(set(getattr(ex, "include_models", ())) & set(getattr(ex, "exclude_models", ())))
    if both:
        raise ConfigError(f"{source}: [archive] model {both[0]} is in both include_models and exclude_models")
    _check_roles(ex, source)
    required = tuple(getattr(ex, "required_variables", SENSITIVITY_VARIABLES))
    missing = [v for v in SENSITIVITY_VARIABLES if v not in required]
    if missing:
        raise ConfigError(
            f"{source}: {where('extraction', 'required_variables')} must include {format_value(missing[0])} "
            f"(the sensitivity needs {', '.join(SENSITIVITY_VARIABLES)}: ΔT and N = rsdt − rsut − rlut), "
            f"got {format_value(list(required))}; the closest valid value is {format_value(list(required) + missing)}"
        )


#: The experiment roles of each generation of archive layout (a mixed archive uses both).
ROLE_GROUPS = (("control", "abrupt", "onepct"), ("cmip5_control", "cmip5_abrupt", "cmip5_onepct"))


def _check_roles(ex, source: str) -> None:
    """Each role names its own experiment; a scenario is not one of the roles."""
    defaults = type(ex)()
    role_ids: dict[str, str] = {}
    for group in ROLE_GROUPS:
        seen: dict[str, str] = {}
        for name in (n for n in group if hasattr(ex, n)):
            experiment = getattr(ex, name)
            if not experiment.strip():
                raise ConfigError(f"{source}: {where('extraction', name)} must name an experiment id, got \"\"; "
                                  f"the default is {format_value(getattr(defaults, name))}")
            if experiment in seen:
                raise ConfigError(f"{source}: [archive] {name} and {seen[experiment]} both name "
                                  f"{format_value(experiment)}; each role needs its own experiment id")
            seen[experiment] = name
            role_ids.setdefault(experiment, name)
    for experiment in getattr(ex, "scenarios", None) or ():
        if experiment in role_ids:
            raise ConfigError(f"{source}: [archive] scenarios lists {format_value(experiment)}, which is the "
                              f"{role_ids[experiment]} experiment; list only scenario experiment ids")


def _check_emulator(config: BatchConfig, source: str) -> tuple[str, ...]:
    em = config.emulator
    scenarios = getattr(config.extraction, "scenarios", None)
    wanted = getattr(em, "scenario", None)
    if isinstance(wanted, str) and scenarios is not None and wanted not in scenarios:
        close = difflib.get_close_matches(wanted, scenarios, n=1)
        hint = f"the closest valid value is {format_value(close[0])}" if close else \
            f"add it to [archive] scenarios {format_value(list(scenarios))}"
        raise ConfigError(f"{source}: [emulator] scenario {format_value(wanted)} is not among the [archive] scenarios "
                          f"that are read; {hint}")
    inputs = tuple(getattr(em, "inputs", ()))
    if "inputs" in field_names(EmulatorSettings):
        if not inputs:
            raise ConfigError(f"{source}: [emulator] inputs must name at least one sensitivity-table column")
        if len(set(inputs)) != len(inputs):
            raise ConfigError(f"{source}: [emulator] inputs lists a column twice: {format_value(inputs)}")
        columns = _table_columns()
        for name in inputs:
            if name not in columns:
                close = difflib.get_close_matches(name, columns, n=1)
                hint = f"; the closest valid value is {format_value(close[0])}" if close else \
                    f"; columns are {', '.join(columns)}"
                raise ConfigError(f"{source}: [emulator] inputs names {format_value(name)}, which is not a "
                                  f"numeric column of the sensitivity table{hint}")
    for source_kind, file_key in (("file", "forcing_file"), ("co2", "co2_file")):
        if getattr(em, "forcing_source", None) == source_kind and getattr(em, file_key, "") is None:
            raise ConfigError(f"{source}: [emulator] forcing_source = \"{source_kind}\" needs {file_key}")
    return inputs


def _table_columns() -> tuple[str, ...]:
    """The sensitivity table's numeric columns: what the emulator can take as inputs."""
    return tuple(c for c in ALL_COLUMNS if c not in TEXT_COLUMNS)


def _check_pathways(config: BatchConfig, source: str, check_paths: bool) -> None:
    """[[emulator.pathways]]: each names one experiment, forcing file or CO2 file, and a known route."""
    items = getattr(config.emulator, "pathways", ())
    if not items:
        return
    from sensemble.emulator.errors import EmulatorInputError
    from sensemble.emulator.pathway_specs import pathway_specs  # light: not the emulator itself

    if not all(isinstance(item, dict) for item in items):
        raise ConfigError(f"{source}: [[emulator.pathways]] entries must be tables")
    try:
        pathway_specs(items, check_files=check_paths)
    except EmulatorInputError as err:
        raise ConfigError(f"{source}: [[emulator.pathways]] {err}") from None


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
                    f"got {format_value(value)} ({kind_of(value)})"
                )


def _check_grid(config: BatchConfig, source: str, inputs: tuple[str, ...]) -> None:
    """[prediction] grid: {input: [numbers…]}, one array per emulator input."""
    grid = getattr(config.prediction, "grid", None)
    if not grid:
        return
    for key, values in grid.items():
        if inputs and key not in inputs:
            close = difflib.get_close_matches(key, inputs, n=1)
            hint = f"did you mean '{close[0]}'?" if close else f"emulator inputs are {', '.join(inputs)}"
            raise ConfigError(f"{source}: [prediction] grid: '{key}' is not an emulator input; {hint}")
        numbers = isinstance(values, (list, tuple)) and values and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)
        if not numbers:
            raise ConfigError(f"{source}: [prediction] grid: {key} must be a non-empty array of numbers, "
                              f"got {format_value(values)}")


def _check_compute(config: BatchConfig, source: str) -> None:
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


def _check_paths(config: BatchConfig, source: str) -> None:
    root = config.archive.root
    if root is not None and not (root.is_dir() or (root.is_file() and root.suffix == ".json")):
        what = "is not a folder or an ESM catalogue (.json)" if root.exists() else "does not exist"
        raise ConfigError(f"{source}: [archive] root {root} {what}")
    for name in field_names(EmulatorSettings):
        value = getattr(config.emulator, name)
        if name.endswith("_file") and value is not None and not Path(value).is_file():
            raise ConfigError(f"{source}: [emulator] {name} {value} does not exist")
