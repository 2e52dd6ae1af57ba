"""An ESM catalogue as the archive: a JSON description and a CSV table whose rows name the datasets.

The JSON follows the ESM collection specification that intake-esm reads (``catalog_file`` — the CSV, relative
to the JSON's folder unless absolute —, or the rows inline as ``catalog_dict``; ``assets.column_name`` — the
column holding each dataset's location —, ``assets.format`` or ``assets.format_column_name``;
``aggregation_control.variable_column_name``). Each row is one dataset: a Zarr store (local folder or fsspec
URL such as ``gs://…``) or a NetCDF file; a relative local location is taken from the CSV's folder.

The facets come from the columns, CMIP6 names first, CMIP5 ones as fallbacks (``model``, ``experiment``,
``ensemble_member``, ``mip_table``); ``mip_era`` (or ``project``) says the generation, else a member without a
forcing index (``r1i1p1``) or a catalogue without ``grid_label`` means CMIP5. Only the JSON and CSV are read
here, with the standard library: intake-esm itself is not needed to read a catalogue (and would add a dozen
packages to the install).
"""
from __future__ import annotations

import csv
import io
import json
import re
from pathlib import Path

from .catalog import CMIP5, CMIP6, FileFacets, parse_file_name
from .stores import is_url

# facet → catalogue columns that may hold it, in order of preference (CMIP6 names, then CMIP5 ones)
COLUMNS = {
    "source_id": ("source_id", "model", "model_id"),
    "experiment_id": ("experiment_id", "experiment"),
    "member_id": ("member_id", "variant_label", "ensemble_member", "member"),
    "table_id": ("table_id", "mip_table", "cmor_table", "table"),
    "variable_id": ("variable_id", "variable"),
    "grid_label": ("grid_label",),
    "version": ("version", "dataset_version"),
    "time_range": ("time_range",),
    "mip_era": ("mip_era", "project", "project_id"),
}
_CMIP5_MEMBER = re.compile(r"^r\d+i\d+p\d+$")
_VERSION = re.compile(r"^v?\d+$")


class CatalogueError(ValueError):
    """The catalogue itself cannot be read: its JSON, its CSV or a required column."""


def _read_rows(path: Path, spec: dict) -> list[dict]:
    if "catalog_dict" in spec:
        return [dict(row) for row in spec["catalog_dict"]]
    name = spec.get("catalog_file")
    if not name:
        raise CatalogueError(f"catalogue {path}: has neither catalog_file nor catalog_dict — name the CSV of "
                             "datasets in catalog_file")
    table = Path(name) if Path(name).is_absolute() else path.parent / name
    try:
        text = table.read_text(encoding="utf-8")
    except OSError as err:
        raise CatalogueError(f"catalogue {path}: its table {table} cannot be read ({err.strerror or err}) — "
                             "check catalog_file") from None
    return list(csv.DictReader(io.StringIO(text)))


def _value(row: dict, facet: str, overrides: dict) -> str:
    for column in (overrides.get(facet),) + COLUMNS[facet]:
        if column and str(row.get(column) or "").strip():
            return str(row[column]).strip()
    return ""


def catalogue_facets(path: str | Path, problems: list[str]) -> list[FileFacets]:
    """The datasets a catalogue names, as facets; rows that cannot be used are listed in ``problems``.

    Raises
    ------
    CatalogueError
        The JSON is not a catalogue, its CSV cannot be read, or no column gives the datasets' locations.
    """
    path = Path(path)
    try:
        spec = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as err:
        raise CatalogueError(f"catalogue {path}: cannot be read as JSON ({err}) — give an ESM catalogue's "
                             ".json file") from None
    if not isinstance(spec, dict):
        raise CatalogueError(f"catalogue {path}: is not an ESM catalogue (a JSON object) — give its .json file")
    assets = spec.get("assets") or {}
    location_column = assets.get("column_name")
    if not location_column:
        raise CatalogueError(f"catalogue {path}: assets.column_name is missing — name the column holding each "
                             "dataset's path or URL")
    overrides = {"variable_id": (spec.get("aggregation_control") or {}).get("variable_column_name")}
    rows = _read_rows(path, spec)
    table_folder = path.parent
    if spec.get("catalog_file") and Path(spec["catalog_file"]).is_absolute():
        table_folder = Path(spec["catalog_file"]).parent
    elif spec.get("catalog_file"):
        table_folder = (path.parent / spec["catalog_file"]).parent
    has_grid = any(_value(row, "grid_label", overrides) for row in rows)
    found = []
    for number, row in enumerate(rows, start=2):  # line 1 of the CSV is its header
        location = str(row.get(location_column) or "").strip()
        facets = {facet: _value(row, facet, overrides) for facet in COLUMNS}
        missing = [f for f in ("source_id", "experiment_id", "member_id", "table_id", "variable_id") if not facets[f]]
        if not location or missing:
            problems.append(f"catalogue {path}: row {number}: no {', '.join(missing or [location_column])} — row "
                            "skipped; fill the column")
            continue
        if not is_url(location) and not Path(location).is_absolute():
            location = table_folder / location
        elif not is_url(location):
            location = Path(location)
        era = facets["mip_era"].upper()
        if era not in (CMIP5, CMIP6):
            era = CMIP5 if (_CMIP5_MEMBER.match(facets["member_id"]) or not has_grid) else CMIP6
        time_range = facets["time_range"] or None
        if time_range is None and str(location).endswith(".nc"):
            named = parse_file_name(Path(str(location).rsplit("/", 1)[-1]))
            time_range = named.time_range if named is not None else None
        version = facets["version"]
        if version and _VERSION.match(version):
            version = version if version.startswith("v") else f"v{version}"
        else:
            version = None
        found.append(FileFacets(path=location, variable_id=facets["variable_id"], table_id=facets["table_id"],
                                source_id=facets["source_id"], experiment_id=facets["experiment_id"],
                                member_id=facets["member_id"], grid_label=facets["grid_label"] if era == CMIP6 else "",
                                time_range=time_range, version=version, mip_era=era, origin=f"esm catalogue {path}"))
    return found
