"""The CMIP5 way of filing a demo run, for archives that mix generations (`generate(..., mixed=True)`).

CMIP5 differs from CMIP6 (the default layout of `files.py`) in everything an archive reader sees:

- directories ``output1/<institute>/<model>/<experiment>/<frequency>/atmos/<table>/<ensemble>/<version>/<variable>/``;
- file names without a grid label: ``<variable>_<table>_<model>_<experiment>_<ensemble>[_<start>-<end>].nc``;
- experiment ids without hyphens (``abrupt4xCO2``), members ``r<N>i<N>p<N>`` and fixed fields under ``r0i0p0``;
- global attributes ``model_id``, ``institute_id``, ``realization``/``initialization_method``/``physics_version``,
  ``parent_experiment_rip`` and ``branch_time`` in the parent's own time units (no ``parent_time_units``);
- netCDF-3 classic files, uncompressed, as much of CMIP5 was published.

The models stay invented; only the filing conventions follow the CMIP5 data reference syntax.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from sensemble.contract.cf import CONVENTIONS as CF_CONVENTIONS

CMIP5 = "CMIP5"
CMIP6 = "CMIP6"
CMIP5_FORMAT = "NETCDF3_CLASSIC"
CMIP5_FIXED_MEMBER = "r0i0p0"
# CMIP5 spelled the quadrupling experiment without a hyphen; the other demo ids are the same in both
_CMIP5_EXPERIMENTS = {"abrupt-4xCO2": "abrupt4xCO2"}
# CMIP6 attributes that CMIP5 files do not carry
_CMIP6_ONLY = ("source_id", "variant_label", "member_id", "realization_index", "initialization_index",
               "physics_index", "forcing_index", "grid_label", "nominal_resolution", "sub_experiment_id",
               "activity_id", "institution_id", "variable_id", "parent_variant_label", "parent_source_id",
               "parent_activity_id", "parent_time_units", "branch_time_in_parent", "branch_time_in_child",
               "branch_method")


def experiment(experiment_id: str) -> str:
    """The CMIP5 spelling of a demo experiment id."""
    return _CMIP5_EXPERIMENTS.get(experiment_id, experiment_id)


def member(variant_label: str) -> str:
    """``r1i1p1f1`` → ``r1i1p1``: CMIP5 members have no forcing index."""
    return variant_label.split("f")[0]


def folder(archive: Path, institute: str, model: str, experiment_id: str, ensemble: str, table: str,
           variable: str, version: str) -> Path:
    """The CMIP5 DRS directory of one variable (``experiment_id`` and ``ensemble`` already in CMIP5 spelling)."""
    frequency = "fx" if table == "fx" else "mon"
    return (Path(archive) / "output1" / institute / model / experiment_id / frequency / "atmos" / table / ensemble
            / version / variable)


def file_name(variable: str, table: str, model: str, experiment_id: str, ensemble: str,
              time_range: str | None = None) -> str:
    stem = f"{variable}_{table}_{model}_{experiment_id}_{ensemble}"
    return f"{stem}_{time_range}.nc" if time_range else f"{stem}.nc"


def attributes(cmip6: dict, branch: dict | None, ensemble: str) -> dict:
    """CMIP5 global attributes from the CMIP6 ones the demo writes (``ensemble`` in CMIP5 spelling)."""
    attrs = {k: v for k, v in cmip6.items() if k not in _CMIP6_ONLY}
    indices = [int(x) for x in ensemble[1:].replace("i", " ").replace("p", " ").split()]
    attrs.update({
        "Conventions": CF_CONVENTIONS,  # the CF version the files follow (CF §2.6.1), not the one CMIP5 used
        "project_id": "DEMO",
        "model_id": cmip6["source_id"],
        "institute_id": cmip6["institution_id"],
        "experiment_id": experiment(cmip6["experiment_id"]),
        "modeling_realm": "atmos",
        "table_id": f"Table {cmip6['table_id']} (invented demo table)",
        "realization": np.int32(indices[0]),
        "initialization_method": np.int32(indices[1]),
        "physics_version": np.int32(indices[2]),
    })
    if branch is None:
        attrs.update(parent_experiment_id="N/A", parent_experiment_rip="N/A", branch_time=0.0)
    else:
        # CMIP5: branch_time is in the parent's own time units, which the file does not name
        attrs.update(parent_experiment_id=experiment(branch["parent_experiment_id"]),
                     parent_experiment_rip=member(branch["parent_variant_label"]),
                     branch_time=float(branch["branch_time_in_parent"]))
    return attrs
