"""Finding runs in an archive: file names and directories only, no file is opened.

An archive is a tree of CMIP-style NetCDF files of either generation, laid out in the CMIP
data reference syntax (DRS) or flat (all files in one or a few folders)::

    CMIP6  …/<source_id>/<experiment_id>/<member_id>/<table_id>/<variable_id>/<grid_label>/<version>/
           <variable_id>_<table_id>_<source_id>_<experiment_id>_<member_id>_<grid_label>[_<start>-<end>].nc
    CMIP5  …/output1/<institute>/<model>/<experiment>/mon/atmos/Amon/<ensemble>/<version>/<variable>/
           <variable>_<table>_<model>_<experiment>_<ensemble>[_<start>-<end>].nc

The file name carries the facets either way. A CMIP5 name has no grid label (its runs get grid label
``""``) and its ensemble member reads ``r<N>i<N>p<N>`` (``r0i0p0`` for fixed fields); the generation
of each file is recorded as ``mip_era`` (``CMIP5`` or ``CMIP6``) so that roles can be mapped per era.

`scan` groups the files into runs (one model, member and experiment) and lists what it
could not use in `Catalog.problems`, so nothing is dropped without a word. Whether the
files themselves agree with their names is checked when they are opened (`extractor.runs`).
"""
from __future__ import annotations

import dataclasses
import os
import re
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path

from sensemble.contract.flags import AREACELLA_OTHER_MEMBER

from .settings import ExtractionSettings
from .stores import ZARR_MARKERS

AREA_VARIABLE = "areacella"
FIXED_TABLE = "fx"
CMIP5, CMIP6 = "CMIP5", "CMIP6"
#: CMIP5's ensemble member of fixed fields (no realization, initialization or physics)
CMIP5_FIXED_MEMBER = "r0i0p0"

# DRS version directories are "v" + date (vYYYYMMDD); some archives use "v1", "v2"
_VERSION = re.compile(r"^v\d+$")
_TIME_RANGE = re.compile(r"^(\d+)(?:-(\d+))?(-clim)?$")


@dataclass(frozen=True)
class FileFacets:
    """The facets one file name (and, in a DRS tree, its directories) carries."""

    path: Path
    variable_id: str
    table_id: str
    source_id: str
    experiment_id: str
    member_id: str
    grid_label: str
    time_range: str | None
    version: str | None
    mip_era: str = CMIP6
    origin: str = "netcdf"  # netcdf, zarr, or "esm catalogue <path>"

    @property
    def start(self) -> str:
        if not self.time_range:
            return ""
        return self.time_range.split("-")[0]


@dataclass
class RunFiles:
    """The files of one run: one model, one member, one experiment.

    Attributes
    ----------
    model, member, experiment_id : str
        Facets from the file names (the files' own attributes may later overrule them).
    files : dict
        Variable id → files, sorted by the time range in their names.
    areacella : Path or None
        Cell areas on the run's grid, possibly from another experiment of the same model.
    version : str or None
        The DRS version directory used (the newest found); ``None`` for a flat archive.
        When variables come from different versions, the newest is named.
    grid_label : str
        The grid the run's variables are on.
    flags : list of str
        Quality flags found while cataloguing (e.g. ``areacella_other_member``).
    """

    model: str
    member: str
    experiment_id: str
    files: dict[str, list[Path]]
    areacella: Path | None = None
    version: str | None = None
    grid_label: str = ""
    flags: list[str] = field(default_factory=list)
    mip_era: str = CMIP6
    origin: str = "netcdf"

    @property
    def variables(self) -> list[str]:
        return list(self.files)

    @property
    def label(self) -> str:
        return f"model {self.model} member {self.member} {self.experiment_id}"

    def all_files(self) -> list[Path]:
        paths = [p for ps in self.files.values() for p in ps]
        if self.areacella is not None:
            paths.append(self.areacella)
        return paths


@dataclass
class Catalog:
    """Runs found in an archive, and what could not be used."""

    root: Path
    runs: list[RunFiles] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)

    def models(self) -> list[str]:
        return sorted({r.model for r in self.runs})

    def members(self, model: str) -> list[str]:
        return sorted({r.member for r in self.runs if r.model == model})

    def experiments(self, model: str, member: str) -> list[str]:
        return sorted({r.experiment_id for r in self.runs if r.model == model and r.member == member})

    def get(self, model: str, member: str, experiment_id: str) -> RunFiles | None:
        """The run of this model, member and experiment, or ``None`` when the archive has none."""
        for run in self.runs:
            if (run.model, run.member, run.experiment_id) == (model, member, experiment_id):
                return run
        return None

    def runs_of(self, model: str, member: str | None = None) -> list[RunFiles]:
        return [r for r in self.runs if r.model == model and (member is None or r.member == member)]


def parse_file_name(path: Path) -> FileFacets | None:
    """Facets of one file from its name and (when in a DRS tree) its directories.

    Returns ``None`` when the name follows neither pattern. CMIP facet values never hold
    underscores (experiment ids and source ids use hyphens), so splitting on ``_`` is
    unambiguous, and the generations are told apart by the number of parts: a CMIP6 name has
    a grid label (6 parts, 7 with a time range), a CMIP5 name none (5 parts, 6 with a time range
    — a sixth part made of digits is a date range, never a grid label).
    """
    path = Path(path)
    if path.suffix != ".nc":
        return None
    parts = path.stem.split("_")
    if not 5 <= len(parts) <= 7 or not all(parts):
        return None
    era = CMIP6
    if len(parts) == 5 or (len(parts) == 6 and _TIME_RANGE.match(parts[5])):
        era, parts = CMIP5, parts[:5] + [""] + parts[5:]
    variable_id, table_id, source_id, experiment_id, member_id, grid_label = parts[:6]
    time_range = None
    if len(parts) == 7:
        if not _TIME_RANGE.match(parts[6]):
            return None
        time_range = parts[6]
    return FileFacets(
        path=path,
        variable_id=variable_id,
        table_id=table_id,
        source_id=source_id,
        experiment_id=experiment_id,
        member_id=member_id,
        grid_label=grid_label,
        time_range=time_range,
        version=_drs_version(path),
        mip_era=era,
    )


def _folder_facets(root: Path, problems: list[str]):
    """Facets of every NetCDF file and Zarr store under ``root`` (one walk; a store's insides are not entered)."""
    for folder, subfolders, names in os.walk(root):
        subfolders.sort()
        here = Path(folder)
        if here != root and any(marker in names for marker in ZARR_MARKERS):
            subfolders.clear()
            facets = parse_store_path(here)
            if facets is None:
                problems.append(f"store {here}: neither its name (<variable>_<table>_<source>_<experiment>_<member>_"
                                "<grid>.zarr) nor its folders (<source>/<experiment>/<member>/<table>/<variable>/"
                                "<grid>/<version>) give the dataset's facets — store skipped; file it in the CMIP "
                                "directory layout")
            else:
                yield facets
            continue
        for name in sorted(names):
            if not name.endswith(".nc"):
                continue
            path = here / name
            facets = parse_file_name(path)
            if facets is None:
                problems.append(
                    f"file {path}: name does not follow "
                    "<variable>_<table>_<source>_<experiment>_<member>_<grid>[_<start>-<end>].nc (CMIP6) or "
                    "<variable>_<table>_<model>_<experiment>_<ensemble>[_<start>-<end>].nc (CMIP5) — file skipped, "
                    "rename it"
                )
                continue
            yield facets


def parse_store_path(path) -> FileFacets | None:
    """Facets of a Zarr store (one CMIP6 dataset) from its name or, as cloud collections file them, its folders.

    ``…/<source_id>/<experiment_id>/<member_id>/<table_id>/<variable_id>/<grid_label>/<version>/`` (the version
    folder is the store; without a version the grid folder is) or a store named like a file,
    ``<variable>_<table>_<source>_<experiment>_<member>_<grid>.zarr``. Works on local paths and URLs alike.
    """
    text = str(path).rstrip("/")
    parts = text.split("/")
    if parts[-1].endswith(".zarr"):
        named = parse_file_name(Path(parts[-1][: -len(".zarr")] + ".nc"))
        if named is not None:
            return dataclasses.replace(named, path=path, version=None, origin="zarr")
    version = parts[-1] if _VERSION.match(parts[-1]) else None
    facets = parts[-7:-1] if version else parts[-6:]
    if len(facets) != 6 or not all(facets):
        return None
    source_id, experiment_id, member_id, table_id, variable_id, grid_label = facets
    return FileFacets(path=path, variable_id=variable_id, table_id=table_id, source_id=source_id,
                      experiment_id=experiment_id, member_id=member_id, grid_label=grid_label, time_range=None,
                      version=version, mip_era=CMIP6, origin="zarr")


def _drs_version(path: Path) -> str | None:
    """The version directory (``v…``) holding the file, else None (flat archive).

    CMIP6 puts the version last (``…/<grid_label>/<version>/<file>``), CMIP5 before the variable
    (``…/<ensemble>/<version>/<variable>/<file>``). Whether the other directories agree with the name is
    not judged here: runs are identified by their names (see `extractor.runs` for the files' attributes).
    """
    for folder in (path.parent.name, path.parent.parent.name):
        if _VERSION.match(folder):
            return folder
    return None


def _version_key(version: str | None) -> tuple[int, int]:
    if version is None:
        return (0, 0)
    return (1, int(version[1:]))


def _is_monthly(table_id: str) -> bool:
    # CMIP tables of monthly fields: Amon, Emon, CFmon, AERmon, …
    return table_id.endswith("mon")


def scan(root: str | Path, settings: ExtractionSettings | None = None) -> Catalog:
    """Catalogue the runs under ``root`` by file names alone.

    Parameters
    ----------
    root : path
        Top of the archive (DRS tree or flat folder; ``*.nc`` files and Zarr stores are found at any
        depth), or an ESM catalogue's JSON file (`extractor.esm_catalogue`) whose rows name the datasets.
    settings : ExtractionSettings, optional
        Which variables to take, which are required, which models to include or exclude.

    Returns
    -------
    Catalog
        ``runs`` sorted by model, member, experiment; ``problems`` as one-line messages:
        unparsable file names, non-monthly tables, variables on a second grid,
        missing required variables.
    """
    settings = settings or ExtractionSettings()
    root = Path(root)
    catalog = Catalog(root=root)
    if not root.exists():
        catalog.problems.append(f"archive {root}: does not exist — check the path")
        return catalog

    wanted = set(settings.variables) | set(settings.required_variables)
    include = set(settings.include_models)
    exclude = set(settings.exclude_models)

    # (model, member, experiment, variable, grid) → version → files
    by_series: dict[tuple, dict[str | None, list[FileFacets]]] = defaultdict(lambda: defaultdict(list))
    areas: list[FileFacets] = []
    if root.is_file() and root.suffix == ".json":
        from .esm_catalogue import catalogue_facets  # the catalogue's rows name the datasets

        try:
            found = catalogue_facets(root, catalog.problems)
        except ValueError as err:  # the catalogue itself is unreadable: nothing in it can be extracted
            catalog.problems.append(str(err))
            return catalog
    else:
        found = _folder_facets(root, catalog.problems)
    for facets in found:
        path = facets.path
        if include and facets.source_id not in include:
            continue
        if facets.source_id in exclude:
            continue
        if facets.variable_id == AREA_VARIABLE:
            if facets.table_id == FIXED_TABLE:
                areas.append(facets)
            else:
                catalog.problems.append(f"model {facets.source_id}: file {path}: areacella outside table fx — "
                                        "file skipped; publish cell areas under table fx")
            continue
        if facets.variable_id not in wanted:
            continue
        if not _is_monthly(facets.table_id):
            catalog.problems.append(
                f"model {facets.source_id}: file {path}: table {facets.table_id} is not monthly — file skipped; "
                "give monthly fields (a table such as Amon)"
            )
            continue
        key = (facets.source_id, facets.member_id, facets.experiment_id, facets.variable_id, facets.grid_label,
               facets.mip_era)
        by_series[key][facets.version].append(facets)

    # newest version of each variable
    newest: dict[tuple, tuple[str | None, list[FileFacets]]] = {}
    for key, versions in by_series.items():
        version = max(versions, key=_version_key)
        newest[key] = (version, versions[version])

    # group into runs, one grid per run
    grouped: dict[tuple, dict[str, dict[str, tuple[str | None, list[FileFacets]]]]] = defaultdict(
        lambda: defaultdict(dict)
    )
    for (model, member, experiment, variable, grid, era), chosen in newest.items():
        grouped[(model, member, experiment, era)][grid][variable] = chosen

    for (model, member, experiment, era), grids in sorted(grouped.items()):
        grid = _choose_grid(grids, settings.required_variables)
        for other in sorted(set(grids) - {grid}):
            catalog.problems.append(
                f"model {model} member {member}: {experiment} has {', '.join(sorted(grids[other]))} "
                f"also on grid {other}; using grid {grid} — to use grid {other}, leave the grid {grid} files out"
            )
        chosen = grids[grid]
        files = {
            v: [f.path for f in sorted(chosen[v][1], key=lambda f: (_start_key(f.start), str(f.path)))]
            for v in settings.variables
            if v in chosen
        }
        versions = [chosen[v][0] for v in chosen if chosen[v][0] is not None]
        run = RunFiles(
            model=model,
            member=member,
            experiment_id=experiment,
            files=files,
            version=max(versions, key=_version_key) if versions else None,
            grid_label=grid,
            mip_era=era,
            origin=next(f.origin for v in chosen for f in chosen[v][1]),
        )
        for variable in settings.required_variables:
            if variable not in files:
                catalog.problems.append(f"model {model} member {member}: {experiment} has no {variable}")
        _attach_area(run, areas)
        catalog.runs.append(run)
    return catalog


def _start_key(start: str) -> int:
    return int(start) if start.isdigit() else -1


def _choose_grid(grids: dict[str, dict], required: tuple[str, ...]) -> str:
    # the grid holding most required variables, then most variables; native grid "gn" first
    def score(label: str):
        names = grids[label]
        return (sum(v in names for v in required), len(names), label == "gn", label)

    return max(grids, key=score)


def _attach_area(run: RunFiles, areas: list[FileFacets]) -> None:
    """Cell areas for a run: same model and grid; the same member if possible, else any member.

    Cell areas are fixed fields published once per model, typically with the control run,
    so any experiment of the model will do; the same experiment is preferred, then the newest version.
    """
    candidates = [a for a in areas if a.source_id == run.model and a.grid_label == run.grid_label
                  and a.mip_era == run.mip_era]
    if not candidates:
        return

    def own(a: FileFacets) -> bool:
        # CMIP5 publishes fixed fields under member r0i0p0 only: that is every member's own
        return a.member_id == run.member or (a.mip_era == CMIP5 and a.member_id == CMIP5_FIXED_MEMBER)

    def preference(a: FileFacets):
        return (own(a), a.experiment_id == run.experiment_id, _version_key(a.version), str(a.path))

    best = max(candidates, key=preference)
    run.areacella = best.path
    if not own(best):
        run.flags.append(AREACELLA_OTHER_MEMBER)
