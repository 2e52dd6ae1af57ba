"""Per-model science: one unit's computed series → annual means, anomalies against the control, fits, one row.

Everything here works on small annual series after the batch's one compute; nothing reads the archive.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from sensemble.contract import series as schema
from sensemble.contract.flags import NO_ABRUPT, NO_ONEPCT, ONEPCT_SHORT, UNLINKED
from sensemble.contract.names import safe_name
from sensemble.contract.table import SensitivityRow

from .annual import annual_means
from .budget import toa_budget
from .catalog import RunFiles
from .control import ControlError, branch_point, control_residuals, drift_corrected, join_chain
from .diagnose import message, run_error, window_hint
from .errors import ArchiveError
from .flags import join_flags, quality_flags
from .ecs_interval import bootstrap_ecs, gregory_ecs_interval
from .flags import ECS_UNBOUNDED
from .gregory import (ControlVariability, FitWindowError, GregoryFit, component_feedbacks, gregory_fit,
                      quadratic_fit, segment_fits)
from .orthogonal import odr_fit
from .regressor_noise import corrected_fit
from .series import series_group
from .settings import ExtractionSettings
from .transient import tcr as transient_response
from .units import Unit


@dataclass
class UnitScience:
    """What one unit's science gives: its row, its series-file groups, its scenarios, the abrupt anomalies."""

    row: SensitivityRow
    groups: dict[str, xr.Dataset]
    scenarios: list[str]
    abrupt: xr.Dataset | None


def anomalies(run_annual: xr.Dataset, control_annual: xr.Dataset, settings: ExtractionSettings,
              run: RunFiles | None = None, control_run: RunFiles | None = None) -> tuple[xr.Dataset, list[str]]:
    """A run's annual means as drift-corrected anomalies against the control, with their flags."""
    try:
        year0, month0, flags = branch_point(run_annual.attrs, control_annual)
    except ControlError as err:
        raise run_error(err, run, run_annual, "fix branch_time_in_parent and parent_time_units in the global "
                        f"attributes of the {run_annual.attrs.get('experiment_id', 'run')} files so that they give "
                        "the branch as a time of the control, or delete both to start at the control's first year "
                        "(flagged branch_assumed)") from None
    try:
        anomalies, more = drift_corrected(run_annual, control_annual, year0, order=settings.drift_order,
                                          min_years=settings.min_control_years, branch_month=month0)
    except ControlError as err:
        raise run_error(err, control_run, run_annual, "supply a longer control run, or lower [extraction] "
                        f"min_control_years (now {settings.min_control_years}) in the config") from None
    anomalies.attrs["branch_year"] = int(year0)
    return anomalies, list(flags) + list(more)


def scenario_chains(annual: dict[str, xr.Dataset], settings: ExtractionSettings,
                    control_id: str | None = None) -> tuple[dict[str, xr.Dataset], list[str]]:
    """Runs other than the control, abrupt and 1 % roles, joined to their parents up to the control.

    ``control_id``: the control's experiment id (default ``settings.control``; a CMIP5 unit's may differ).
    """
    flags = []
    control_id = control_id or settings.control
    by_id = {ds.attrs.get("experiment_id", k): ds for k, ds in annual.items()}
    children = {}
    for exp_id, ds in by_id.items():
        parent = ds.attrs.get("parent_experiment_id", "")
        if parent and parent != control_id and parent in by_id:
            children.setdefault(parent, []).append(exp_id)
    chains = {}
    for exp_id, ds in by_id.items():
        parent = ds.attrs.get("parent_experiment_id", "")
        if parent == control_id:
            if exp_id in children:
                continue  # extracted joined to its continuations
            chains[exp_id] = ds
        elif parent in by_id and by_id[parent].attrs.get("parent_experiment_id") == control_id:
            chains[exp_id] = join_chain(by_id[parent], ds)
        else:
            flags.append(f"{UNLINKED}{safe_name(exp_id)}")
    if settings.scenarios is not None:
        chains = {k: v for k, v in chains.items() if k in settings.scenarios}
    return chains, flags


def _noise(residuals: xr.Dataset, name: str) -> float | None:
    """Standard deviation of the control's drift-removed annual means: the internal variability of `name`."""
    if name not in residuals:
        return None
    # the drift fit used up drift_order + 1 degrees of freedom
    sd = float(np.std(residuals[name].values, ddof=int(residuals.attrs["drift_order"]) + 1))
    return sd if sd > 0 else None


def ecs_intervals(fit: GregoryFit, late: GregoryFit, dT, dN, settings: ExtractionSettings,
                  flags: list[str], control: ControlVariability | None = None) -> dict:
    """``ecs_eff_q05/q95`` and ``ecs_late_q05/q95`` by the configured method; an open or missing one is flagged.

    With the control's variability, Fieller's ``ecs_late`` interval is made around the late fit corrected for
    the noise in ΔT (extractor.regressor_noise; over the late segment ΔT spans little and that noise pulls the
    OLS slope by a third of its standard error). The ``ecs_late`` column itself stays the OLS value.
    """
    if settings.ecs_interval == "block_bootstrap":
        def interval(years):
            return bootstrap_ecs(dT, dN, years=years, block=settings.bootstrap_block,
                                 n_samples=settings.bootstrap_samples, seed=settings.seed,
                                 forcing_ratio=settings.forcing_ratio)
        ecs, ecs_late = interval(settings.fit_years), interval(settings.late_years)
    else:
        ecs = gregory_ecs_interval(fit, settings.forcing_ratio)
        if control is not None:
            late = corrected_fit(late, dT, dN, settings.late_years, control, settings.forcing_ratio)
        ecs_late = gregory_ecs_interval(late, settings.forcing_ratio)
    values = {}
    for name, (low, high) in (("ecs_eff", ecs), ("ecs_late", ecs_late)):
        if not (np.isfinite(low) and np.isfinite(high)):
            flags.append(f"{name}_{ECS_UNBOUNDED}")
        values[f"{name}_q05"] = None if np.isnan(low) else low
        values[f"{name}_q95"] = None if np.isnan(high) else high
    return values


def _short_run_hint(abrupt: xr.Dataset, settings: ExtractionSettings, keys: tuple[str, ...]) -> str:
    """What to do about a run shorter than a fit window: shorten the window only when the run is whole.

    A run that lost years to incomplete data (months missing at an end) is not short: fitting it over a
    shorter window would give a number over other years than the other models' — so say what is missing.
    """
    dropped = str(abrupt.attrs.get("partial_years_dropped", "")).replace(";", ", ")
    if dropped:
        return (f"the run's files lack months of the years {dropped} (dropped as incomplete): supply the missing "
                "months; shortening the fit window instead would fit other years than the other models'")
    return window_hint(settings, keys)


def fit_row(unit: Unit, abrupt: xr.Dataset | None, tcr_value: float | None, control_annual: xr.Dataset,
            residuals: xr.Dataset, settings: ExtractionSettings, flags: list[str]) -> SensitivityRow:
    """The Gregory fits of the abrupt anomalies (if any), the TCR and the quality flags as one table row."""
    values = {"model": unit.model, "member": unit.member, "tcr": tcr_value, "mip_era": unit.mip_era,
              "origin": unit.control.origin if unit.control is not None else None}
    fit = None
    if abrupt is not None:
        dT, dN = abrupt["tas"], abrupt["rtnt"]
        keys = ("fit_years",)
        try:
            variability = ControlVariability.of(residuals, abrupt)
            fit = gregory_fit(dT, dN, years=settings.fit_years, forcing_ratio=settings.forcing_ratio,
                              control=variability)
            keys = ("early_years", "late_years")
            seg = segment_fits(dT, dN, early=settings.early_years, late=settings.late_years,
                               forcing_ratio=settings.forcing_ratio, control=variability)
            keys = ("fit_years",)
            quad = quadratic_fit(dT, dN, years=settings.fit_years, control=variability)
            keys = ("fit_years", "late_years") + (("bootstrap_block",) if settings.ecs_interval == "block_bootstrap"
                                                  else ())
            values.update(ecs_intervals(fit, seg.late, dT, dN, settings, flags, variability))
        except FitWindowError as err:
            raise run_error(err, unit.abrupt, abrupt, _short_run_hint(abrupt, settings, keys)) from None
        values.update(erf_4x=fit.erf, erf_4x_se=fit.erf_se, feedback=fit.feedback, feedback_se=fit.feedback_se,
                      ecs_eff=fit.ecs_eff, feedback_early=seg.feedback_early,
                      feedback_late=seg.feedback_late, feedback_change=seg.feedback_change, ecs_late=seg.ecs_late,
                      curvature=quad.curvature, n_years=fit.n_years, feedback_early_se=seg.early.feedback_se,
                      feedback_late_se=seg.late.feedback_se, feedback_change_se=seg.feedback_change_se,
                      curvature_se=quad.curvature_se)
        if settings.orthogonal_fit:
            # errors in both variables (scipy.odr), noise scales from the control's internal variability
            odr = odr_fit(dT, dN, years=settings.fit_years, forcing_ratio=settings.forcing_ratio,
                          tas_noise=_noise(residuals, "tas"), rtnt_noise=_noise(residuals, "rtnt"))
            values.update(erf_4x_odr=odr.erf, feedback_odr=odr.feedback, ecs_eff_odr=odr.ecs_eff)
        comps = component_feedbacks(abrupt, years=settings.fit_years, control=variability)
        if comps is not None:
            values.update(feedback_lw_cs=comps.feedback_lw_cs, feedback_sw_cs=comps.feedback_sw_cs,
                          feedback_cre=comps.feedback_cre, feedback_lw_cs_se=comps.feedback_lw_cs_se,
                          feedback_sw_cs_se=comps.feedback_sw_cs_se, feedback_cre_se=comps.feedback_cre_se)
    else:
        flags.append(NO_ABRUPT)
    if unit.onepct is None:
        flags.append(NO_ONEPCT)
    control_n = float(control_annual["rtnt"].mean()) if "rtnt" in control_annual else float("nan")
    flags.extend(quality_flags(fit, control_n, settings))
    return SensitivityRow(**values, flags=join_flags(flags))


def unit_science(unit: Unit, series: dict[str, xr.Dataset], settings: ExtractionSettings) -> UnitScience:
    """Everything after the compute for one (model, member): annual means, anomalies, fits, series groups."""
    flags = list(unit.flags)
    annual = {}
    for run in unit.runs():
        try:
            # years as blocks of twelve months from each run's first month: a run branched in mid-year
            # keeps all its whole years (for a run starting in January these are its calendar years)
            ds = annual_means(series[run.label], start="first_month")
        except ArchiveError as err:
            raise run_error(err.message, run, None, err.hint or "check the time axis of the run's files") from None
        ds = toa_budget(ds)
        flags.extend(f for f in str(ds.attrs.get("flags", "")).split(";") if f)
        annual[run.experiment_id] = ds
    control = annual[unit.control.experiment_id]
    try:
        residuals = control_residuals(control, order=settings.drift_order)
    except ControlError as err:
        raise run_error(err, unit.control, control, "supply a longer control run") from None
    groups = {unit.control.experiment_id: series_group(residuals, schema.CONTROL)}

    abrupt_anom = tcr_value = None
    if unit.abrupt is not None:
        abrupt_anom, more = anomalies(annual[unit.abrupt.experiment_id], control, settings, unit.abrupt,
                                      unit.control)
        flags.extend(more)
        groups[unit.abrupt.experiment_id] = series_group(abrupt_anom, schema.ABRUPT)
    if unit.onepct is not None:
        onepct_anom, more = anomalies(annual[unit.onepct.experiment_id], control, settings, unit.onepct,
                                      unit.control)
        flags.extend(more)
        groups[unit.onepct.experiment_id] = series_group(onepct_anom, schema.ONEPCT)
        try:
            tcr_value = float(transient_response(onepct_anom["tas"], years=settings.tcr_years))
        except FitWindowError:
            # the Gregory results stand on their own: keep them, leave tcr empty and say why
            flags.append(ONEPCT_SHORT)

    others = {r.experiment_id: annual[r.experiment_id] for r in unit.others}
    try:
        chains, more = scenario_chains(others, settings, unit.control.experiment_id)
    except ControlError as err:
        raise ArchiveError(message(err), model=unit.model, member=unit.member,
                           hint="check parent_experiment_id and the years of the scenario runs, or leave them out "
                           "with [archive] scenarios in the config") from None
    flags.extend(more)
    for exp_id, ds in chains.items():
        anom, more = anomalies(ds, control, settings, next((r for r in unit.others if r.experiment_id == exp_id),
                                                           None), unit.control)
        flags.extend(more)
        groups[exp_id] = series_group(anom, schema.SCENARIO)

    row = fit_row(unit, abrupt_anom, tcr_value, control, residuals, settings, flags)
    return UnitScience(row, groups, sorted(chains), abrupt_anom)
