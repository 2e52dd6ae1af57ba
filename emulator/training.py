"""The training set of the emulator, read from an extractor output folder (files only, see DEVELOPERS.md).

Reads `sensitivity.csv` (inputs) and `series/<model>_<member>.nc` (NetCDF4 groups per experiment):
the scenario's `tas` (targets) and `rtnt` (forcing diagnosis), the abrupt run (calibration) and the
control residuals (internal variability). Runs that cannot be used are skipped and recorded, never
dropped silently.
"""
from __future__ import annotations

import json
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import netCDF4
import numpy as np
import pandas as pd
import xarray as xr

from sensemble.contract import series as schema
from sensemble.contract.names import series_file_name
from sensemble.contract.table import TABLE_CSV

from .errors import EmulatorInputError

__all__ = ["TrainingSet", "load_training_set", "load_physics_set", "available_scenarios"]


@dataclass
class TrainingSet:
    """What the emulator learns from: one row per usable (model, member) run.

    Attributes
    ----------
    inputs : names of the input columns (sensitivity-table columns)
    X : (n_runs, n_inputs) input values
    Y : (n_runs, n_years) scenario warming `tas` (K)
    years : (n_years,) the series' `year` coordinate (1 = first year after the branch)
    calendar_years : (n_years,) the scenario's calendar years when all runs agree, else None
    models, members : (n_runs,) labels
    scenario : the scenario's experiment id
    scenario_rtnt : (n_runs, n_years) scenario N anomalies (W m-2)
    abrupt_tas, abrupt_rtnt : per-run abrupt-run series (lists of 1-D arrays; None where absent)
    control_tas : per-run control residuals of `tas` (list of 1-D arrays; None where absent)
    table : the sensitivity-table rows of the runs kept
    skipped : DataFrame (model, member, reason) of the runs left out
    """

    inputs: tuple[str, ...]
    X: np.ndarray
    Y: np.ndarray
    years: np.ndarray
    calendar_years: np.ndarray | None
    models: np.ndarray
    members: np.ndarray
    scenario: str
    scenario_rtnt: np.ndarray
    abrupt_tas: list
    abrupt_rtnt: list
    control_tas: list
    table: pd.DataFrame
    skipped: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=["model", "member", "reason"]))
    source: str = ""
    forcing_ratio: float = 2.0  # erf_4x / F2x the extraction used (series files' `forcing_ratio`)
    fit_years: tuple[int, int] | None = None  # the table's Gregory window (sensitivity.nc's configuration)
    flags: tuple[str, ...] = ()  # recorded fallbacks, e.g. forcing_ratio_assumed

    def fit_window(self, i: int) -> tuple[int, int] | None:
        """The Gregory window of run i: the extraction's `fit_years`, else years 1..the table's `n_years`."""
        if self.fit_years is not None:
            return tuple(self.fit_years)
        n = self.table["n_years"].iloc[i] if "n_years" in self.table else np.nan
        return (1, int(n)) if np.isfinite(n) and n > 0 else None

    @property
    def n_runs(self) -> int:
        return self.Y.shape[0]

    def subset(self, keep) -> "TrainingSet":
        """The runs selected by a boolean mask or index array (labels and series follow)."""
        idx = np.arange(self.n_runs)[np.asarray(keep)]
        pick = lambda seq: [seq[i] for i in idx]  # noqa: E731
        return TrainingSet(
            inputs=self.inputs, X=self.X[idx], Y=self.Y[idx], years=self.years, calendar_years=self.calendar_years,
            models=self.models[idx], members=self.members[idx], scenario=self.scenario,
            scenario_rtnt=self.scenario_rtnt[idx], abrupt_tas=pick(self.abrupt_tas),
            abrupt_rtnt=pick(self.abrupt_rtnt), control_tas=pick(self.control_tas),
            table=self.table.iloc[idx].reset_index(drop=True), skipped=self.skipped, source=self.source,
            forcing_ratio=self.forcing_ratio, fit_years=self.fit_years, flags=self.flags,
        )


def _series_path(extract_dir: Path, model: str, member: str) -> Path:
    return extract_dir / schema.SERIES_FOLDER / series_file_name(model, member)


def _series_index(extract_dir: Path) -> dict:
    """{(model, member): path} from the files' own root attributes (file names may be sanitised)."""
    index = {}
    for path in sorted(Path(extract_dir, schema.SERIES_FOLDER).glob("*.nc")):
        try:
            root, _ = _groups(path)
        except OSError:
            continue
        if schema.MODEL in root and schema.MEMBER in root:
            index[(str(root[schema.MODEL]), str(root[schema.MEMBER]))] = path
    return index


def _groups(path: Path) -> tuple[dict, dict]:
    """Root attributes and {group name: group attributes} of a series file."""
    with netCDF4.Dataset(path) as nc:
        root = {k: nc.getncattr(k) for k in nc.ncattrs()}
        groups = {name: {k: g.getncattr(k) for k in g.ncattrs()} for name, g in nc.groups.items()}
    return root, groups


def _scenarios_of(root: dict, groups: dict) -> list[str]:
    listed = [s for s in str(root.get(schema.SCENARIOS, "")).split(schema.SEPARATOR) if s]
    tagged = [name for name, attrs in groups.items() if attrs.get(schema.ROLE) == schema.SCENARIO]
    return [s for s in dict.fromkeys(listed + tagged) if s in groups]


def available_scenarios(extract_dir) -> dict[str, int]:
    """{scenario id: number of runs holding it} over the folder's series files."""
    counts: Counter = Counter()
    for path in sorted(Path(extract_dir, schema.SERIES_FOLDER).glob("*.nc")):
        counts.update(_scenarios_of(*_groups(path)))
    return dict(counts)


def _role_group(root: dict, groups: dict, role: str) -> str | None:
    name = root.get(schema.role_attribute(role))
    if name in groups:
        return name
    tagged = [n for n, a in groups.items() if a.get(schema.ROLE) == role]
    return tagged[0] if len(tagged) == 1 else None


def _read_group(path: Path, group: str, variables=(schema.TAS, schema.RTNT)) -> xr.Dataset:
    with xr.open_dataset(path, group=group, engine="netcdf4") as ds:
        missing = [v for v in variables if v not in ds]
        if missing:
            raise EmulatorInputError(f"group {group!r} lacks {', '.join(missing)}", path=path)
        return ds[list(variables)].load()


def _read_table(extract_dir: Path, inputs) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """The sensitivity table of an extractor output folder, with the input columns checked."""
    table_path = extract_dir / TABLE_CSV
    if not table_path.exists():
        raise EmulatorInputError("no sensitivity.csv", path=extract_dir, hint="point to an extractor output folder")
    table = pd.read_csv(table_path, dtype={"model": str, "member": str, "flags": str}, keep_default_na=True)
    inputs = tuple(inputs)
    unknown = [c for c in inputs if c not in table.columns]
    if unknown:
        raise EmulatorInputError(f"input column(s) {', '.join(unknown)} not in the table", path=table_path,
                                 hint=f"choose among {', '.join(c for c in table.columns if c not in ('model', 'member', 'flags'))}")
    return table, inputs


def load_training_set(extract_dir, scenario: str | None = None, inputs=("ecs_eff",)) -> TrainingSet:
    """Read an extractor output folder into a `TrainingSet`.

    Parameters
    ----------
    extract_dir : folder holding `sensitivity.csv` and `series/`
    scenario : experiment id of the target scenario; None: the only one present (error if several)
    inputs : sensitivity-table columns used as emulator inputs

    Runs are skipped, and recorded in `skipped`, when an input is missing, the series file or the scenario
    group is absent, or the scenario's length differs from the most common length.
    """
    extract_dir = Path(extract_dir)
    table, inputs = _read_table(extract_dir, inputs)
    available = available_scenarios(extract_dir)
    if not available:
        raise EmulatorInputError("no scenario runs in the series files", path=extract_dir / schema.SERIES_FOLDER,
                                 hint="extract at least one scenario experiment")
    if scenario is None:
        if len(available) > 1:
            raise EmulatorInputError(f"several scenarios: {', '.join(sorted(available))}", path=extract_dir,
                                     hint="choose one with scenario=…")
        scenario = next(iter(available))
    elif scenario not in available:
        raise EmulatorInputError(f"scenario {scenario!r} not found; available: {', '.join(sorted(available)) or 'none'}",
                                 path=extract_dir)

    index = _series_index(extract_dir)
    skipped, records = [], []
    for _, row in table.iterrows():
        model, member = str(row["model"]), str(row["member"])
        values = row[list(inputs)].astype(float).to_numpy()
        if not np.all(np.isfinite(values)):
            bad = [c for c, v in zip(inputs, values) if not np.isfinite(v)]
            skipped.append((model, member, f"missing input {', '.join(bad)}"))
            continue
        path = index.get((model, member), _series_path(extract_dir, model, member))
        if not path.exists():
            skipped.append((model, member, f"no series file {path.name}"))
            continue
        root, groups = _groups(path)
        if scenario not in groups:
            skipped.append((model, member, f"no {scenario} group in {path.name}"))
            continue
        scen = _read_group(path, scenario)
        rec = dict(row=row, model=model, member=member, x=values, tas=scen[schema.TAS].to_numpy().astype(float),
                   rtnt=scen[schema.RTNT].to_numpy().astype(float),
                   calendar=(scen[schema.CALENDAR_YEAR].to_numpy() if schema.CALENDAR_YEAR in scen.coords else None))
        rec["forcing_ratio"] = root.get(schema.FORCING_RATIO)
        abrupt = _role_group(root, groups, schema.ABRUPT)
        control = _role_group(root, groups, schema.CONTROL)
        rec["abrupt"] = _read_group(path, abrupt) if abrupt else None
        rec["control"] = _read_group(path, control, (schema.TAS,))[schema.TAS].to_numpy().astype(float) if control else None
        records.append(rec)

    if not records:
        raise EmulatorInputError(f"no usable run for scenario {scenario!r}", path=extract_dir,
                                 hint="; ".join(f"{m} {r}: {why}" for m, r, why in skipped[:5]))
    length = Counter(len(r["tas"]) for r in records).most_common(1)[0][0]
    kept = []
    for r in records:
        if len(r["tas"]) != length:
            skipped.append((r["model"], r["member"], f"{scenario} has {len(r['tas'])} years, most runs {length}"))
        elif not np.all(np.isfinite(r["tas"])):
            skipped.append((r["model"], r["member"], f"{scenario} tas has missing years"))
        else:
            kept.append(r)
    if not kept:
        raise EmulatorInputError(f"no usable run for scenario {scenario!r}", path=extract_dir)
    forcing_ratio, fit_years, flags = _extraction_settings(extract_dir, kept)
    calendars = [r["calendar"] for r in kept]
    same_calendar = all(c is not None and np.array_equal(c, calendars[0]) for c in calendars)
    return TrainingSet(
        inputs=inputs,
        X=np.array([r["x"] for r in kept], dtype=float),
        Y=np.array([r["tas"] for r in kept], dtype=float),
        years=np.arange(1, length + 1),
        calendar_years=np.asarray(calendars[0], dtype=int) if same_calendar else None,
        models=np.array([r["model"] for r in kept], dtype=object),
        members=np.array([r["member"] for r in kept], dtype=object),
        scenario=scenario,
        scenario_rtnt=np.array([r["rtnt"] for r in kept], dtype=float),
        abrupt_tas=[r["abrupt"][schema.TAS].to_numpy().astype(float) if r["abrupt"] is not None else None for r in kept],
        abrupt_rtnt=[r["abrupt"][schema.RTNT].to_numpy().astype(float) if r["abrupt"] is not None else None for r in kept],
        control_tas=[r["control"] for r in kept],
        table=pd.DataFrame([r["row"] for r in kept]).reset_index(drop=True),
        skipped=pd.DataFrame(skipped, columns=["model", "member", "reason"]),
        source=str(extract_dir),
        forcing_ratio=forcing_ratio,
        fit_years=fit_years,
        flags=flags,
    )


def _extraction_settings(extract_dir: Path, records) -> tuple[float, tuple[int, int] | None, tuple[str, ...]]:
    """(forcing_ratio, fit_years, flags) of the extraction: the ratio from the series files' root attribute
    (absent: 2, flagged `forcing_ratio_assumed`; different between runs: an error), the Gregory window from
    sensitivity.nc's recorded configuration (absent: None, each run's table `n_years` then)."""
    ratios = {float(r["forcing_ratio"]) for r in records if r.get("forcing_ratio") is not None}
    if len(ratios) > 1:
        raise EmulatorInputError(f"the series files were extracted with different forcing_ratio values {sorted(ratios)}",
                                 path=extract_dir / "series", hint="extract all runs with one forcing_ratio")
    flags = () if ratios else ("forcing_ratio_assumed",)
    ratio = ratios.pop() if ratios else 2.0
    fit_years = None
    nc = extract_dir / "sensitivity.nc"
    if nc.exists():
        try:
            with netCDF4.Dataset(nc) as ds:
                config = json.loads(ds.getncattr("sensemble_config")) if "sensemble_config" in ds.ncattrs() else {}
            window = config.get("fit_years")
            fit_years = (int(window[0]), int(window[1])) if window else None
        except (OSError, ValueError, TypeError, IndexError):
            fit_years = None
    return ratio, fit_years, flags


def load_physics_set(extract_dir, inputs=("ecs_eff",)) -> TrainingSet:
    """What the parameter route learns from: every run's inputs, abrupt series and control residuals, no
    scenario (`Y` has no years, `scenario` is empty). A run without inputs, series file or abrupt run is
    skipped and recorded, as in `load_training_set`."""
    extract_dir = Path(extract_dir)
    table, inputs = _read_table(extract_dir, inputs)
    index = _series_index(extract_dir)
    skipped, kept = [], []
    for _, row in table.iterrows():
        model, member = str(row["model"]), str(row["member"])
        values = row[list(inputs)].astype(float).to_numpy()
        path = index.get((model, member), _series_path(extract_dir, model, member))
        if not np.all(np.isfinite(values)):
            skipped.append((model, member, "missing input " + ", ".join(c for c, v in zip(inputs, values)
                                                                         if not np.isfinite(v))))
            continue
        if not path.exists():
            skipped.append((model, member, f"no series file {path.name}"))
            continue
        root, groups = _groups(path)
        abrupt, control = _role_group(root, groups, schema.ABRUPT), _role_group(root, groups, schema.CONTROL)
        if abrupt is None:
            skipped.append((model, member, f"no abrupt run in {path.name}"))
            continue
        series = _read_group(path, abrupt)
        kept.append(dict(row=row, model=model, member=member, x=values,
                         abrupt_tas=series[schema.TAS].to_numpy().astype(float),
                         abrupt_rtnt=series[schema.RTNT].to_numpy().astype(float),
                         control=_read_group(path, control, (schema.TAS,))[schema.TAS].to_numpy().astype(float)
                         if control else None))
    if not kept:
        raise EmulatorInputError("no run with inputs and an abrupt run", path=extract_dir,
                                 hint="; ".join(f"{m} {r}: {why}" for m, r, why in skipped[:5]))
    n = len(kept)
    return TrainingSet(
        inputs=inputs, X=np.array([r["x"] for r in kept], dtype=float), Y=np.zeros((n, 0)),
        years=np.arange(1, 1), calendar_years=None,
        models=np.array([r["model"] for r in kept], dtype=object),
        members=np.array([r["member"] for r in kept], dtype=object), scenario="",
        scenario_rtnt=np.zeros((n, 0)), abrupt_tas=[r["abrupt_tas"] for r in kept],
        abrupt_rtnt=[r["abrupt_rtnt"] for r in kept], control_tas=[r["control"] for r in kept],
        table=pd.DataFrame([r["row"] for r in kept]).reset_index(drop=True),
        skipped=pd.DataFrame(skipped, columns=["model", "member", "reason"]), source=str(extract_dir),
    )
