"""The control run: where an experiment branches from it, and its drift removed from the experiment.

Experiments are compared with the part of the control that runs alongside them (the "parallel
segment"), so that a slow drift of the control climate is not mistaken for a response. The drift is
a polynomial in time (linear by default, quadratic on request) fitted to each control variable over
the parallel segment and subtracted from the experiment year by year.

All functions take and return annual series as described in DEVELOPERS.md ("Annual global-mean
series of one run"): Datasets with dimension ``year``. Outputs count ``year`` from 1 at the branch
and carry the run's own calendar year as coordinate ``calendar_year``.
"""
from __future__ import annotations

import datetime
import math
from collections.abc import Mapping

import cftime
import numpy as np
import xarray as xr

from sensemble.contract.flags import BRANCH_ASSUMED, CHAIN_LACKS, CONTROL_LACKS, CONTROL_SHORT


class ControlError(ValueError):
    """The control cannot serve an experiment: branch outside it, too short, mismatched series."""


def _describe(attrs: Mapping) -> str:
    parts = [str(attrs[key]) for key in ("model", "member", "experiment_id") if attrs.get(key)]
    return " ".join(parts) if parts else "a run"


def _years(ds: xr.Dataset, what: str) -> np.ndarray:
    if "year" not in ds.dims:
        raise ControlError(f"{what} of {_describe(ds.attrs)} has no 'year' dimension (dims {tuple(ds.dims)})")
    years = np.asarray(ds["year"].values)
    if years.size == 0:
        raise ControlError(f"{what} of {_describe(ds.attrs)} has no years")
    if np.any(np.diff(years) != 1):
        raise ControlError(f"{what} of {_describe(ds.attrs)} has gaps or unordered years ({years[0]}-{years[-1]})")
    return years.astype(int)


def _scalar(value):
    # netCDF attributes may arrive as one-element arrays
    if isinstance(value, np.ndarray) and value.size == 1:
        return value.item()
    return value


def _missing(value) -> bool:
    if value is None:
        return True
    if isinstance(value, str):
        return value.strip() == ""
    try:
        return bool(np.isnan(value))
    except TypeError:
        return False


def branch_year(experiment_attrs: Mapping, control: xr.Dataset) -> tuple[int, list[str]]:
    """Control calendar year in which the experiment starts (the year of `branch_point`).

    Returns
    -------
    (year, flags)
        ``flags`` holds ``branch_assumed`` when the experiment carries no branch information and
        the control's first year is used.
    """
    year, _, flags = branch_point(experiment_attrs, control)
    return year, flags


def branch_point(experiment_attrs: Mapping, control: xr.Dataset) -> tuple[int, int, list[str]]:
    """Control calendar year and month (1–12) in which the experiment starts.

    ``branch_time_in_parent`` is decoded with ``parent_time_units`` in the control's calendar
    (``control.attrs["calendar"]``, the parent's) through cftime. A CMIP5 run gives its ``branch_time``
    in the parent's own time units without naming them (``branch_time_convention = "CMIP5"``, set by
    `extractor.runs`): the control's ``time_units`` are used. The branch month is the month containing
    that instant, except that an instant within the last day of a month counts as the start of the next
    (some models record the branch at the end of the last day, e.g. 31 Dec 24:00 as 31 Dec 12:00 or
    23:59); a branch on 1 Jan Y 00:00 is January of year Y. A branch in any other month than January is
    legal: `drift_corrected` then matches the experiment's years with the control's months.

    Returns
    -------
    (year, month, flags)
        ``flags`` holds ``branch_assumed`` when the experiment carries no branch information and
        the control's first month is used.

    Raises
    ------
    ControlError
        Undecodable branch information, or a branch outside the control.
    """
    control_years = _years(control, "control")
    first_month = int(control.attrs.get("first_month", 1))
    who = _describe(experiment_attrs)
    branch_time = _scalar(experiment_attrs.get("branch_time_in_parent"))
    units = _scalar(experiment_attrs.get("parent_time_units"))
    if _missing(units) and experiment_attrs.get("branch_time_convention") == "CMIP5":
        units = _scalar(control.attrs.get("time_units"))
    if _missing(branch_time) or _missing(units):
        return int(control_years[0]), first_month, [BRANCH_ASSUMED]
    calendar = control.attrs.get("calendar")
    if _missing(calendar):
        raise ControlError(
            f"control of {_describe(control.attrs)} has no 'calendar' attribute; "
            f"cannot decode the branch of {who}"
        )
    try:
        when = cftime.num2date(float(branch_time), str(units), calendar=str(calendar))
        year, month = when.year + when.month // 12, when.month % 12 + 1
        next_month = cftime.datetime(year, month, 1, calendar=when.calendar, has_year_zero=when.has_year_zero)
    except (ValueError, TypeError) as err:
        raise ControlError(
            f"{who}: cannot decode branch_time_in_parent={branch_time!r} in {units!r} "
            f"({calendar} calendar): {err}"
        ) from None
    if next_month - when > datetime.timedelta(days=1):
        year, month = when.year, when.month
    start = control_years[0] + (first_month - 1) / 12
    if not start <= _position(year, month) < control_years[-1] + 1 + (first_month - 1) / 12:
        raise ControlError(
            f"{who} branches in control year {year} (branch_time_in_parent={branch_time!r} {units}), "
            f"outside the control {_describe(control.attrs)} years {control_years[0]}-{control_years[-1]}"
        )
    return int(year), int(month), []


def _position(year, month=1) -> float:
    """Time in years of the start of a month: the clock on which control and experiment years are matched."""
    return np.asarray(year, dtype=float) + (np.asarray(month, dtype=float) - 1.0) / 12.0


def _drift(segment: xr.Dataset, at: np.ndarray, order: int) -> dict[str, np.ndarray]:
    """Polynomial of ``order`` in time fitted to each variable of ``segment``, evaluated at times ``at``.

    Times are the starts of the years in years (`_position`; a segment whose years begin in another month
    than January, ``attrs["first_month"]``, is placed accordingly), measured from the segment's first year
    so the fit is well conditioned.
    """
    origin = int(segment["year"].values[0])
    x = _position(segment["year"].values, segment.attrs.get("first_month", 1)) - origin
    design = np.vander(x, order + 1, increasing=True)
    target = np.vander(np.asarray(at, dtype=float) - origin, order + 1, increasing=True)
    fitted = {}
    for name, da in segment.data_vars.items():
        coef, *_ = np.linalg.lstsq(design, np.asarray(da.values, dtype=np.float64), rcond=None)
        fitted[name] = target @ coef
    return fitted


def _check_order(order: int) -> int:
    if order not in (1, 2):
        raise ControlError(f"drift order must be 1 (linear) or 2 (quadratic); got {order!r}")
    return int(order)


def _relabel(values: Mapping[str, np.ndarray], template: xr.Dataset, calendar_years: np.ndarray) -> xr.Dataset:
    n = calendar_years.size
    coords = {"year": ("year", np.arange(1, n + 1)), "calendar_year": ("year", calendar_years)}
    data = {
        name: xr.Variable("year", values[name], attrs=dict(template[name].attrs)) for name in values
    }
    out = xr.Dataset(data, coords=coords, attrs=dict(template.attrs))
    out["year"].attrs.update(long_name="years since the branch from the control (1 = first year)")
    out["calendar_year"].attrs.update(long_name="calendar year of the run's own calendar")
    return out


def _net_flux(ds: xr.Dataset) -> np.ndarray | None:
    if all(name in ds.data_vars for name in ("rsdt", "rsut", "rlut")):
        return (ds["rsdt"] - ds["rsut"] - ds["rlut"]).values
    if "rtnt" in ds.data_vars:
        return ds["rtnt"].values
    return None


def drift_corrected(
    experiment: xr.Dataset,
    control: xr.Dataset,
    branch_year: int,
    order: int = 1,
    min_years: int = 30,
    branch_month: int = 1,
) -> tuple[xr.Dataset, list[str]]:
    """Experiment minus the control's drift over the parallel segment.

    The experiment's year k (k = 1 … n) is the twelve months from month ``branch_month`` of control
    year ``branch_year + k - 1``. Each variable of the control is fitted over the control years
    overlapping those months by a polynomial of ``order`` (1 or 2) in time; the fit is evaluated at
    the matching months of all n years (extrapolated where the control ends early) and subtracted.
    A branch in mid-year is thus matched month for month: the drift fitted to the control's annual
    means, as a function of each year's start, is evaluated at the start of each experiment year
    (exact for a polynomial drift of order ≤ 2, whose annual means are the same polynomial shifted
    by a constant). Because the fit is linear in the data, correcting fluxes and then forming N
    equals correcting N.

    Parameters
    ----------
    experiment, control : xarray.Dataset
        Annual series (dimension ``year`` = calendar year, consecutive).
    branch_year : int
        From :func:`branch_year`.
    order : {1, 2}
    min_years : int
        Fewest control years that still allow a fit; an experiment shorter than this has its drift
        fitted over the first ``min_years`` control years from the branch.

    Returns
    -------
    (anomalies, flags)
        ``anomalies``: every variable the experiment and the control share, dimension ``year`` = 1..n,
        coordinate ``calendar_year`` (the experiment's years), the experiment's attributes plus
        ``branch_year``, ``drift_order``, ``control_years`` (the segment fitted) and
        ``control_rtnt_mean`` (mean net TOA flux of the control over that segment, W m-2, for the
        energy-leak check; NaN when the control lacks the fluxes). ``flags``: ``control_short``
        when the control ends before the experiment does; ``control_lacks_<var>`` for each experiment
        variable the control does not have (left out of the anomalies).

    Raises
    ------
    ControlError
        Fewer than ``min_years`` control years in the parallel segment; gaps in either series.
    """
    order = _check_order(order)
    calendar_years = _years(experiment, "experiment")
    control_years = _years(control, "control")
    n = calendar_years.size
    parallel = _position(np.arange(branch_year, branch_year + n), branch_month)
    # a short experiment still gets a drift fitted over at least `min_years` of control where they exist
    span = max(n, int(min_years))
    # the control years overlapping the experiment's span of months
    starts = _position(control_years, control.attrs.get("first_month", 1))
    overlapping = (starts + 1 > parallel[0] + 1e-9) & (starts < parallel[0] + span - 1e-9)
    segment = control.isel(year=np.flatnonzero(overlapping))
    segment.attrs = dict(control.attrs)
    available = segment.sizes["year"]
    who = _describe(experiment.attrs)
    if available < max(int(min_years), order + 1):
        raise ControlError(
            f"{who}: the control {_describe(control.attrs)} has {available} years from branch year "
            f"{branch_year} (control years {control_years[0]}-{control_years[-1]}); "
            f"at least {min_years} are needed for the drift fit"
        )
    flags = []
    if available < min(n, span) or starts[overlapping][-1] + 1 < parallel[-1] + 1 - 1e-9:
        flags.append(CONTROL_SHORT)
    shared = [name for name in experiment.data_vars if name in control.data_vars]
    flags += [f"{CONTROL_LACKS}{name}" for name in experiment.data_vars if name not in control.data_vars]
    if not shared:
        raise ControlError(f"{who}: the control {_describe(control.attrs)} has none of its variables")
    drift = _drift(segment[shared], parallel, order)
    values = {name: np.asarray(experiment[name].values, dtype=np.float64) - drift[name] for name in shared}
    out = _relabel(values, experiment[shared], calendar_years)
    net = _net_flux(segment)
    out.attrs.update(
        branch_year=int(branch_year),
        branch_month=int(branch_month),
        drift_order=order,
        control_years=f"{int(segment['year'].values[0])}-{int(segment['year'].values[-1])}",
        control_rtnt_mean=float(np.mean(net)) if net is not None else math.nan,
    )
    return out, flags


def control_residuals(control: xr.Dataset, order: int = 1) -> xr.Dataset:
    """The control minus its own whole-run drift fit: internal variability, ``year`` = 1..n.

    ``calendar_year`` holds the control's years; attributes are kept, plus ``drift_order``.
    """
    order = _check_order(order)
    years = _years(control, "control")
    if years.size <= order + 1:
        raise ControlError(f"control {_describe(control.attrs)} has {years.size} years; too few for a drift fit")
    drift = _drift(control, _position(years, control.attrs.get("first_month", 1)), order)
    values = {name: np.asarray(control[name].values, dtype=np.float64) - drift[name] for name in control.data_vars}
    out = _relabel(values, control, years)
    out.attrs.update(drift_order=order)
    return out


# Branch information of a chained run is that of its first part, where the chain leaves the control.
_BRANCH_ATTRS = ("branch_time_in_parent", "parent_time_units", "parent_experiment_id")


def join_chain(first: xr.Dataset, continuation: xr.Dataset) -> xr.Dataset:
    """A scenario joined to the historical-type run it continues, along ``year``.

    The continuation must start the year after ``first`` ends and share its calendar. The result
    carries the continuation's attributes (its ``experiment_id``) with the branch information of
    ``first`` (so it aligns with the control from where ``first`` left it), ``chain`` =
    ``"<first id>;<continuation id>"``, the files and flags of both. Variables only one part has
    are left out and flagged ``chain_lacks_<var>``.
    """
    first_years = _years(first, "first part of chain")
    next_years = _years(continuation, "continuation of chain")
    first_id = first.attrs.get("experiment_id", "first run")
    next_id = continuation.attrs.get("experiment_id", "continuation")
    model = first.attrs.get("model", "")
    if next_years[0] != first_years[-1] + 1:
        raise ControlError(
            f"{model} {next_id} starts in {next_years[0]} but {first_id} ends in {first_years[-1]}; "
            f"a continuation must start the year after ({first_years[-1] + 1})".strip()
        )
    calendars = (first.attrs.get("calendar"), continuation.attrs.get("calendar"))
    if calendars[0] != calendars[1]:
        raise ControlError(
            f"{model} {first_id} uses calendar {calendars[0]!r} but {next_id} uses {calendars[1]!r}; "
            "they cannot be joined".strip()
        )
    shared = [name for name in first.data_vars if name in continuation.data_vars]
    lacking = sorted(set(first.data_vars) ^ set(continuation.data_vars))
    joined = xr.concat([first[shared], continuation[shared]], dim="year", combine_attrs="drop_conflicts")
    attrs = dict(continuation.attrs)
    for key in _BRANCH_ATTRS:
        if key in first.attrs:
            attrs[key] = first.attrs[key]
        else:
            attrs.pop(key, None)
    attrs["chain"] = f"{first_id};{next_id}"
    attrs["files"] = ";".join(f for f in (first.attrs.get("files", ""), continuation.attrs.get("files", "")) if f)
    flags = {f for part in (first, continuation) for f in str(part.attrs.get("flags", "")).split(";") if f}
    flags |= {f"{CHAIN_LACKS}{name}" for name in lacking}
    attrs["flags"] = ";".join(sorted(flags))
    joined.attrs = attrs
    return joined
