"""The sensitivity table: its columns in the contract's order, their units and long names, and a typed row."""
from __future__ import annotations

import math
from dataclasses import dataclass

#: the table's files inside an extraction's output folder
TABLE_CSV = "sensitivity.csv"
TABLE_NC = "sensitivity.nc"

# The contract's columns, in order (DESIGN.md, "Outputs of extraction"), then our extras.
COLUMNS = (
    "model", "member", "erf_4x", "erf_4x_se", "feedback", "feedback_se", "ecs_eff", "ecs_eff_q05",
    "ecs_eff_q95", "feedback_early", "feedback_late", "feedback_change", "ecs_late", "curvature", "tcr",
    "n_years", "flags",
)
EXTRA_COLUMNS = ("feedback_lw_cs", "feedback_sw_cs", "feedback_cre", "erf_4x_odr", "feedback_odr", "ecs_eff_odr",
                 "mip_era", "origin", "ecs_late_q05", "ecs_late_q95", "feedback_early_se", "feedback_late_se",
                 "feedback_change_se", "curvature_se", "feedback_lw_cs_se", "feedback_sw_cs_se", "feedback_cre_se")
ALL_COLUMNS = COLUMNS + EXTRA_COLUMNS
#: columns that hold text; every other column is a number (an empty cell when it could not be computed)
TEXT_COLUMNS = ("model", "member", "flags", "mip_era", "origin")

#: How the ECS intervals (ecs_eff_q05/q95, ecs_late_q05/q95) are made, by the name ``[extraction] ecs_interval``
#: takes; the table states the one used in its attribute ``ecs_interval_method``. Coverage measured by
#: tests/benchmarks/coverage_extraction.py (README, "Uncertainty").
ECS_INTERVAL_METHODS = {
    "fieller": "Fieller interval of the ratio -erf / (forcing_ratio * feedback), from the Gregory fit's covariance "
               "under AR(1) internal variability (estimated from the control) plus the error of the control drift "
               "line subtracted from the run; for ecs_late, around the late fit corrected for the noise in dT (errors "
               "in variables)",
    "block_bootstrap": "percentiles of a circular moving-block bootstrap over the run's years (the former method: "
                       "it under-covers, and cannot see the drift line's error)",
}
#: the long name's reference to the method
_INTERVAL = "of the 90 % interval (method: global attribute ecs_interval_method)"
#: what the Fieller interval of ecs_late adds: it is made around the late fit corrected for the noise in dT, so it
#: need not be centred on the ecs_late column (the OLS value), which it may on rare occasions leave out
_LATE_FIELLER = ("made around the late fit corrected for the noise in dT (errors in variables), not around the OLS "
                 "ecs_late")
_LATE_CENTRE = f"; by the fieller method {_LATE_FIELLER}"

#: units and long names of the numeric columns
COLUMN_META = {
    "erf_4x": ("W m-2", "effective radiative forcing of CO2 quadrupling (Gregory intercept)"),
    "erf_4x_se": ("W m-2", "standard error of erf_4x (autocorrelated internal variability and drift line error)"),
    "feedback": ("W m-2 K-1", "climate feedback parameter (Gregory slope; negative is stable)"),
    "feedback_se": ("W m-2 K-1", "standard error of feedback (autocorrelated internal variability and drift line "
                                 "error)"),
    "ecs_eff": ("K", "effective climate sensitivity, -erf_4x / (forcing_ratio * feedback)"),
    "ecs_eff_q05": ("K", f"lower end (5 %) of ecs_eff {_INTERVAL}"),
    "ecs_eff_q95": ("K", f"upper end (95 %) of ecs_eff {_INTERVAL}; inf: no upper bound"),
    "feedback_early": ("W m-2 K-1", "feedback over the early segment"),
    "feedback_late": ("W m-2 K-1", "feedback over the late segment"),
    "feedback_change": ("W m-2 K-1", "feedback_late - feedback_early"),
    "ecs_late": ("K", "effective climate sensitivity from the late segment"),
    "curvature": ("W m-2 K-2", "quadratic coefficient a in dN = F + lambda dT + a dT^2"),
    "tcr": ("K", "transient climate response: mean warming in years 61-80 of the 1 % per year CO2 run"),
    "n_years": ("1", "number of annual means in the Gregory fit"),
    "feedback_lw_cs": ("W m-2 K-1", "clear-sky longwave component of feedback"),
    "feedback_sw_cs": ("W m-2 K-1", "clear-sky shortwave component of feedback"),
    "feedback_cre": ("W m-2 K-1", "cloud radiative effect component of feedback"),
    "erf_4x_odr": ("W m-2", "erf_4x from an orthogonal-distance (errors-in-variables) fit"),
    "feedback_odr": ("W m-2 K-1", "feedback from an orthogonal-distance (errors-in-variables) fit"),
    "ecs_eff_odr": ("K", "ecs_eff from an orthogonal-distance (errors-in-variables) fit"),
    "ecs_late_q05": ("K", f"lower end (5 %) of ecs_late {_INTERVAL}{_LATE_CENTRE}"),
    "ecs_late_q95": ("K", f"upper end (95 %) of ecs_late {_INTERVAL}{_LATE_CENTRE}; inf: no upper bound"),
    **{f"{name}_se": (units, f"standard error of {name} (autocorrelated internal variability and drift line error"
                             + (", and the two segments' covariance)" if name == "feedback_change" else ")"))
       for name, units in (("feedback_early", "W m-2 K-1"), ("feedback_late", "W m-2 K-1"),
                           ("feedback_change", "W m-2 K-1"), ("curvature", "W m-2 K-2"),
                           ("feedback_lw_cs", "W m-2 K-1"), ("feedback_sw_cs", "W m-2 K-1"),
                           ("feedback_cre", "W m-2 K-1"))},
}
TEXT_META = {
    "model": "source_id of the model",
    "member": "variant_label of the member",
    "flags": "quality flags, semicolon-separated",
    "mip_era": "generation of the model's runs (CMIP5 or CMIP6), from the file names or the catalogue",
    "origin": "where the runs were read: netcdf files, zarr stores, or an esm catalogue (with its path)",
}
NUMERIC = tuple(c for c in ALL_COLUMNS if c not in TEXT_COLUMNS)


def column_long_name(column: str, *, tcr_years: tuple[int, int] | None = None,
                     ecs_interval: str | None = None) -> str:
    """The long name of a numeric column as an extraction's settings make it.

    ``tcr_years``: the TCR window used (years of the 1 % run, both ends inclusive); ``ecs_interval``: the
    `ECS_INTERVAL_METHODS` key of the method that formed the ECS intervals, which the long name then states.
    Left out, the default long name of `COLUMN_META` is given.

    >>> column_long_name("tcr", tcr_years=(51, 70))
    'transient climate response: mean warming in years 51-70 of the 1 % per year CO2 run'
    >>> column_long_name("ecs_eff_q05", ecs_interval="block_bootstrap")[:88]
    'lower end (5 %) of the 90 % interval of ecs_eff, percentiles of a circular moving-block '
    """
    if column == "tcr" and tcr_years is not None:
        first, last = (int(year) for year in tcr_years)
        return f"transient climate response: mean warming in years {first}-{last} of the 1 % per year CO2 run"
    if column in _INTERVAL_ENDS and ecs_interval is not None:
        end, of = _INTERVAL_ENDS[column]
        text = f"{end} of the 90 % interval of {of}, {ECS_INTERVAL_METHODS[ecs_interval]} (global attribute " \
               "ecs_interval_method)"
        if of == "ecs_late" and ecs_interval == "fieller":
            text += f"; {_LATE_FIELLER}"
        return text + ("; inf: no upper bound" if end.startswith("upper") else "")
    return COLUMN_META[column][1]


_INTERVAL_ENDS = {"ecs_eff_q05": ("lower end (5 %)", "ecs_eff"), "ecs_eff_q95": ("upper end (95 %)", "ecs_eff"),
                  "ecs_late_q05": ("lower end (5 %)", "ecs_late"), "ecs_late_q95": ("upper end (95 %)", "ecs_late")}


@dataclass
class SensitivityRow:
    """One row of the table: one (model, member). ``None`` means "could not be computed" (see ``flags``).

    >>> row = SensitivityRow("ALDER-1", "r1i1p1f1", ecs_eff=3.2)
    >>> row.as_dict()["ecs_eff"], tuple(row.as_dict()) == ALL_COLUMNS
    (3.2, True)
    """

    model: str
    member: str
    erf_4x: float | None = None
    erf_4x_se: float | None = None
    feedback: float | None = None
    feedback_se: float | None = None
    ecs_eff: float | None = None
    ecs_eff_q05: float | None = None
    ecs_eff_q95: float | None = None
    feedback_early: float | None = None
    feedback_late: float | None = None
    feedback_change: float | None = None
    ecs_late: float | None = None
    curvature: float | None = None
    tcr: float | None = None
    n_years: int | None = None
    flags: str = ""
    feedback_lw_cs: float | None = None
    feedback_sw_cs: float | None = None
    feedback_cre: float | None = None
    erf_4x_odr: float | None = None
    feedback_odr: float | None = None
    ecs_eff_odr: float | None = None
    mip_era: str | None = None
    origin: str | None = None
    ecs_late_q05: float | None = None
    ecs_late_q95: float | None = None
    feedback_early_se: float | None = None
    feedback_late_se: float | None = None
    feedback_change_se: float | None = None
    curvature_se: float | None = None
    feedback_lw_cs_se: float | None = None
    feedback_sw_cs_se: float | None = None
    feedback_cre_se: float | None = None

    def __post_init__(self):
        # plain Python numbers (numpy scalars do not survive JSON), whole years as int
        for name in NUMERIC:
            value = getattr(self, name)
            if value is not None:
                setattr(self, name, int(value) if name == "n_years" else float(value))

    def as_dict(self) -> dict:
        """The row as ``{column: value}`` in the table's column order."""
        return {name: getattr(self, name) for name in ALL_COLUMNS}

    @classmethod
    def from_dict(cls, row: dict) -> "SensitivityRow":
        """A row from ``{column: value}``; unknown columns are an error (``TypeError``)."""
        return cls(**{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in row.items()})

