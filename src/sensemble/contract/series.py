"""The series files the extractor writes and the emulator reads: ``OUT/series/<model>_<member>.nc``.

NetCDF4, one group per experiment id. Root attributes name the model and member, the experiment id that plays
each role (``role_control``, ``role_abrupt``, ``role_onepct``), the scenarios (``;``-joined), the
``forcing_ratio`` the fits used (erf_4x / erf_2x) and the cache record. Each group has dimension ``year``
(1 = first year after the branch from the control), coordinate ``calendar_year``, the annual global-mean
variables below, and attributes ``role``, ``experiment_id``, ``branch_year_in_control`` and, for a scenario
joined to the historical-type run it continues, ``chain``.
"""
from __future__ import annotations

#: changes whenever the layout below changes, so that cached series files of an older layout are recomputed
SCHEMA_VERSION = "2"

#: folder of the series files inside an extraction's output folder
SERIES_FOLDER = "series"

# experiment roles
CONTROL = "control"
ABRUPT = "abrupt"
ONEPCT = "onepct"
SCENARIO = "scenario"
ROLES = (CONTROL, ABRUPT, ONEPCT, SCENARIO)
#: the roles named by a root attribute (a scenario is listed in `SCENARIOS` instead)
SINGLE_ROLES = (CONTROL, ABRUPT, ONEPCT)

# root attributes
MODEL = "model"
MEMBER = "member"
MIP_ERA = "mip_era"
SCENARIOS = "scenarios"
FORCING_RATIO = "forcing_ratio"
FINGERPRINT = "fingerprint"
SENSITIVITY_ROW = "sensitivity_row"
INPUT_FILES = "input_files"

# group attributes
ROLE = "role"
EXPERIMENT_ID = "experiment_id"
BRANCH_YEAR = "branch_year_in_control"
CHAIN = "chain"

# dimension, coordinate, variables
YEAR = "year"
CALENDAR_YEAR = "calendar_year"
TAS = "tas"
RTNT = "rtnt"
VARIABLES = (TAS, RTNT, "rtnt_cs", "lw_cs", "sw_cs", "cre")

#: separator of the ``;``-joined lists (scenarios, chain, files)
SEPARATOR = ";"


def role_attribute(role: str) -> str:
    """The root attribute naming the experiment id of a role.

    >>> role_attribute(ABRUPT)
    'role_abrupt'
    """
    if role not in SINGLE_ROLES:
        raise ValueError(f"no root attribute for role {role!r}; roles with one: {', '.join(SINGLE_ROLES)}")
    return f"role_{role}"
