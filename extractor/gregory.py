"""Gregory regressions of TOA imbalance ΔN on warming ΔT (Gregory et al. 2004, GRL).

ΔN = F + λ ΔT over years of an abrupt-forcing run: the intercept F is the effective radiative
forcing, the slope λ the feedback parameter (λ < 0 for a stable climate), and the effective
climate sensitivity is ``ecs_eff = -F / (forcing_ratio * λ)`` (``forcing_ratio`` = 2 for 4×CO2,
the forcing of a quadrupling taken as twice that of a doubling).

Standard errors count the autocorrelation of internal variability (extractor.serial) and, when the
control's internal variability is given (:class:`ControlVariability`), the error of the control drift line
subtracted from the run; plain OLS errors, which assume independent years, are kept only as ``*_se_ols``.

Inputs are annual anomaly series: :class:`xarray.DataArray` with dimension ``year`` counting from
1 at the branch (as ``extractor.control.drift_corrected`` returns), or plain 1-D arrays whose
first element is year 1. Windows ``years=(first, last)`` include both ends.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import xarray as xr

from sensemble.extractor.serial import (AR1Noise, contrast_dofs, cross_covariance, drift_covariance,
                                       drift_cross_covariance, estimate_ar1, ols_sandwich, summed_dof)
from sensemble.extractor.settings import ExtractionSettings

_DEFAULTS = ExtractionSettings()


class FitWindowError(ValueError):
    """A fit window the series cannot supply (too short, gaps, missing values)."""


@dataclass(frozen=True)
class ControlVariability:
    """The control's internal variability, for the uncertainty of fits to drift-corrected anomalies.

    Attributes
    ----------
    residuals : xarray.Dataset
        The control minus its own drift fit (:func:`extractor.control.control_residuals`): ``tas``,
        ``rtnt`` and whichever flux components the fits use, along ``year``.
    drift_order : int
        Order of the drift polynomial subtracted from the experiment.
    drift_years : int
        Control years the experiment's drift was fitted over, from the branch on (the parallel segment).
    """

    residuals: xr.Dataset
    drift_order: int
    drift_years: int

    @classmethod
    def of(cls, residuals: xr.Dataset, anomalies: xr.Dataset) -> "ControlVariability":
        """From the control's residuals and the anomalies ``drift_corrected`` returned (its attributes)."""
        first, _, last = str(anomalies.attrs["control_years"]).partition("-")
        return cls(residuals, int(anomalies.attrs["drift_order"]), int(last) - int(first) + 1)

    def noise(self, regressand: str, slope: float, regressor: str = "tas") -> AR1Noise:
        """AR(1) parameters of ``regressand − slope·regressor`` in the control: a fit's error process."""
        z = (np.asarray(self.residuals[regressand].values, dtype=np.float64)
             - slope * np.asarray(self.residuals[regressor].values, dtype=np.float64))
        design = np.vander(np.arange(z.size, dtype=float), int(self.residuals.attrs.get("drift_order", 1)) + 1,
                           increasing=True)
        return estimate_ar1(z, design)

    def correlation(self, regressand: str, slope_a: float, slope_b: float, regressor: str = "tas") -> float:
        """Correlation in the control of ``regressand − slope·regressor`` at two slopes (lag 0)."""
        n, t = (np.asarray(self.residuals[v].values, dtype=np.float64) for v in (regressand, regressor))
        a, b = n - slope_a * t, n - slope_b * t
        return float(np.clip((a @ b) / np.sqrt((a @ a) * (b @ b)), -1.0, 1.0))


@dataclass(frozen=True)
class GregoryFit:
    """Ordinary least-squares Gregory fit ΔN = erf + feedback·ΔT.

    Attributes
    ----------
    erf, erf_se : float
        Intercept (W m-2) and its standard error (autocorrelated internal variability, plus the drift
        line's error when the control's variability was given).
    feedback, feedback_se : float
        Slope (W m-2 K-1) and its standard error (likewise).
    ecs_eff : float
        ``-erf / (forcing_ratio * feedback)`` (K).
    r2 : float
        Coefficient of determination of the fit.
    n_years : int
        Number of annual pairs fitted.
    erf_feedback_cov : float
        Covariance of intercept and slope (same sources as the standard errors).
    erf_se_ols, feedback_se_ols : float
        Textbook OLS standard errors (independent years), for comparison with reference libraries.
    lag1 : float
        Lag-1 autocorrelation of the error process the standard errors assume.
    feedback_dof, ecs_dof : float
        Degrees of freedom of the estimated variance of the feedback and of erf + forcing_ratio·ecs·feedback
        (the quantity Fieller's ECS interval standardizes), from the control's length and its estimated σ
        and ρ (:func:`extractor.serial.variance_dof`); inf without the control's variability.
    """

    erf: float
    erf_se: float
    feedback: float
    feedback_se: float
    ecs_eff: float
    r2: float
    n_years: int
    erf_feedback_cov: float = float("nan")
    erf_se_ols: float = float("nan")
    feedback_se_ols: float = float("nan")
    lag1: float = float("nan")
    feedback_dof: float = float("inf")
    ecs_dof: float = float("inf")

    @property
    def covariance(self) -> np.ndarray:
        """2×2 covariance of (erf, feedback)."""
        return np.array([[self.erf_se**2, self.erf_feedback_cov], [self.erf_feedback_cov, self.feedback_se**2]])


@dataclass(frozen=True)
class SegmentFits:
    """Early and late Gregory slopes (feedback change as warming goes on)."""

    feedback_early: float
    feedback_late: float
    feedback_change: float  # feedback_late - feedback_early
    erf_late: float  # intercept of the late segment (W m-2)
    ecs_late: float  # -erf_late / (forcing_ratio * feedback_late)
    early: GregoryFit | None = None  # the two fits, with their standard errors
    late: GregoryFit | None = None
    feedback_change_se: float = float("nan")  # both fits' errors and their covariance (shared drift line)
    feedback_change_dof: float = float("inf")


@dataclass(frozen=True)
class QuadraticFit:
    """ΔN = erf + feedback·ΔT + curvature·ΔT² by least squares."""

    erf: float
    feedback: float  # slope at ΔT = 0 (W m-2 K-1)
    curvature: float  # W m-2 K-2
    curvature_se: float  # autocorrelated internal variability (+ drift line error), as GregoryFit
    n_years: int
    curvature_se_ols: float = float("nan")  # textbook OLS, for comparison with reference libraries
    curvature_dof: float = float("inf")  # of curvature_se², as GregoryFit.feedback_dof


@dataclass(frozen=True)
class ComponentFeedbacks:
    """Gregory slopes of the clear-sky LW, clear-sky SW and cloud-radiative parts of ΔN on ΔT.

    They sum to the feedback of ΔN (OLS is linear in the regressand and N = LW_cs + SW_cs + CRE).
    """

    feedback_lw_cs: float
    feedback_sw_cs: float
    feedback_cre: float
    feedback_lw_cs_se: float = float("nan")  # standard errors as GregoryFit.feedback_se
    feedback_sw_cs_se: float = float("nan")
    feedback_cre_se: float = float("nan")


def _as_annual(series, name: str) -> xr.DataArray:
    if isinstance(series, xr.DataArray):
        if "year" not in series.dims or series.ndim != 1:
            raise FitWindowError(f"{name} must be a 1-D series along 'year'; it has dims {series.dims}")
        if "year" not in series.coords:
            series = series.assign_coords(year=np.arange(1, series.sizes["year"] + 1))
        return series
    values = np.asarray(series, dtype=float)
    if values.ndim != 1:
        raise FitWindowError(f"{name} must be 1-D; it has shape {values.shape}")
    return xr.DataArray(values, dims="year", coords={"year": np.arange(1, values.size + 1)}, name=name)


def window(series, years: tuple[int, int], what: str = "fit", name: str = "series") -> np.ndarray:
    """Values of an annual series over ``years`` (inclusive), as float64, checked complete.

    Raises :class:`FitWindowError` naming the needed and the available years when the window
    reaches past the run, when years are missing inside it, or when a value is missing.
    """
    da = _as_annual(series, name)
    first, last = int(years[0]), int(years[1])
    if last < first:
        raise FitWindowError(f"{what} window {first}-{last} is empty (last year before first)")
    labels = np.asarray(da["year"].values)
    where = f" of {da.attrs['model']}" if "model" in da.attrs else ""
    if labels.size == 0 or first < labels.min() or last > labels.max():
        available = f"years {labels.min()}-{labels.max()}, {labels.size} years" if labels.size else "no years"
        raise FitWindowError(
            f"{what} needs years {first}-{last} ({last - first + 1} years) of {name}{where}; "
            f"the run has {available}"
        )
    picked = da.sel(year=slice(first, last))
    if picked.sizes["year"] != last - first + 1:
        raise FitWindowError(
            f"{what} needs every year {first}-{last} of {name}{where}; "
            f"{last - first + 1 - picked.sizes['year']} of them are missing"
        )
    values = np.asarray(picked.values, dtype=np.float64)
    if not np.all(np.isfinite(values)):
        raise FitWindowError(
            f"{what}: {name}{where} has {int((~np.isfinite(values)).sum())} missing values in years {first}-{last}"
        )
    return values


def _pairs(dT, dN, years, what):
    x = window(dT, years, what, "tas anomaly")
    y = window(dN, years, what, "rtnt anomaly")
    if x.size < 3:
        raise FitWindowError(f"{what} needs at least 3 years; window {years[0]}-{years[1]} has {x.size}")
    return x, y


def _ecs(erf: float, feedback: float, forcing_ratio: float) -> float:
    with np.errstate(divide="ignore", invalid="ignore"):
        return float(-np.float64(erf) / (forcing_ratio * np.float64(feedback)))


def _ols(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float, float]:
    """Intercept, its se, slope, its se, r² of y = a + b x (textbook OLS, n - 2 dof)."""
    n = x.size
    xm, ym = x.mean(), y.mean()
    dx, dy = x - xm, y - ym
    sxx = dx @ dx
    if sxx == 0:
        raise FitWindowError("Gregory fit: ΔT is constant over the window; the slope is undefined")
    slope = (dx @ dy) / sxx
    intercept = ym - slope * xm
    resid = dy - slope * dx
    s2 = (resid @ resid) / (n - 2)
    slope_se = np.sqrt(s2 / sxx)
    intercept_se = np.sqrt(s2 * (1.0 / n + xm * xm / sxx))
    syy = dy @ dy
    r2 = 1.0 - (resid @ resid) / syy if syy > 0 else 1.0
    return float(intercept), float(intercept_se), float(slope), float(slope_se), float(r2)


def _covariance(design: np.ndarray, resid: np.ndarray, years, control: ControlVariability | None,
                regressand: str, slope: float, contrasts=()) -> tuple[np.ndarray, AR1Noise, list[float]]:
    """Covariance of fitted coefficients: the run's autocorrelated internal variability, plus the drift line's.

    Without the control's variability, its AR(1) parameters come from the fit's own residuals and the drift
    line's error is left out. With it, they come from the control (``regressand − slope·tas``, the
    combination a Gregory fit's error is made of), whose residuals hold no curvature of the response; the
    degrees of freedom of each ``contrasts`` vector's variance (:func:`extractor.serial.variance_dof`) are
    returned too (inf without the control).
    """
    if control is None:
        noise = estimate_ar1(resid, design)
        return ols_sandwich(design, noise), noise, [float("inf")] * len(contrasts)
    noise = control.noise(regressand, slope)
    since_branch = np.arange(int(years[0]), int(years[1]) + 1) - 1

    def at(lag1: float) -> np.ndarray:
        shifted = AR1Noise(noise.sd, lag1)
        return ols_sandwich(design, shifted) + drift_covariance(design, since_branch, control.drift_years,
                                                                control.drift_order, shifted)

    cov = at(noise.lag1)
    dofs = contrast_dofs(at, noise.lag1, int(control.residuals.sizes["year"]), contrasts)
    return cov, noise, dofs


def gregory_fit(dT, dN, years=_DEFAULTS.fit_years, forcing_ratio: float = _DEFAULTS.forcing_ratio,
                control: ControlVariability | None = None, regressand: str = "rtnt", dof: bool = False) -> GregoryFit:
    """OLS regression of annual ΔN on ΔT over ``years`` (Gregory et al. 2004).

    Parameters
    ----------
    dT, dN : xarray.DataArray or array-like
        Annual anomalies of ``tas`` (K) and ``rtnt`` (W m-2) along ``year`` (1 = first year).
    years : (int, int)
        First and last year fitted, inclusive.
    forcing_ratio : float
        Forcing of the run divided by that of a CO2 doubling (2 for abrupt 4×CO2).
    control : ControlVariability, optional
        The control's internal variability and drift fit: the standard errors then carry the error of
        the drift line too. Without it they carry the run's own autocorrelated variability only.
    regressand : str
        Name of ``dN``'s variable in ``control.residuals``.
    dof : bool
        Also give ``feedback_dof`` and ``ecs_dof`` (with ``control``): measured for the coverage benchmark and
        not adopted by the table, so off by default (they triple the covariance's cost).

    Returns
    -------
    GregoryFit

    Examples
    --------
    >>> import numpy as np
    >>> dT = np.linspace(2.0, 6.0, 150)
    >>> fit = gregory_fit(dT, 7.0 - 1.0 * dT)
    >>> round(fit.erf, 6), round(fit.feedback, 6), round(fit.ecs_eff, 6)
    (7.0, -1.0, 3.5)
    """
    x, y = _pairs(dT, dN, years, "Gregory fit" if regressand == "rtnt" else f"{regressand} feedback")
    erf, erf_se_ols, feedback, feedback_se_ols, r2 = _ols(x, y)
    design = np.column_stack([np.ones_like(x), x])
    u = -erf / feedback if feedback != 0 else 0.0  # forcing_ratio·ecs: Fieller's contrast at the estimate
    cov, noise, dofs = _covariance(design, y - erf - feedback * x, years, control, regressand,
                                   feedback, contrasts=([0.0, 1.0], [1.0, u]) if dof else ())
    return GregoryFit(
        erf=erf,
        erf_se=float(np.sqrt(cov[0, 0])),
        feedback=feedback,
        feedback_se=float(np.sqrt(cov[1, 1])),
        ecs_eff=_ecs(erf, feedback, forcing_ratio),
        r2=r2,
        n_years=int(x.size),
        erf_feedback_cov=float(cov[0, 1]),
        erf_se_ols=erf_se_ols,
        feedback_se_ols=feedback_se_ols,
        lag1=noise.lag1,
        feedback_dof=dofs[0] if dofs else float("inf"),
        ecs_dof=dofs[1] if dofs else float("inf"),
    )


def segment_fits(
    dT,
    dN,
    early=_DEFAULTS.early_years,
    late=_DEFAULTS.late_years,
    forcing_ratio: float = _DEFAULTS.forcing_ratio,
    control: ControlVariability | None = None,
    dof: bool = False,
) -> SegmentFits:
    """Separate Gregory fits over an early and a late window; the late one gives ``ecs_late``.

    Pass ``control`` for standard errors that carry the drift line's error (see :func:`gregory_fit`, also for
    ``dof``); for the short early segment it also gives the error process far better than 20 residuals could.
    """
    early_fit = gregory_fit(dT, dN, early, forcing_ratio, control, dof=dof)
    late_fit = gregory_fit(dT, dN, late, forcing_ratio, control, dof=dof)
    cross = _segments_cross(dT, dN, early, late, early_fit, late_fit, control)
    change_var = early_fit.feedback_se**2 + late_fit.feedback_se**2 - 2.0 * cross
    return SegmentFits(
        feedback_early=early_fit.feedback,
        feedback_late=late_fit.feedback,
        feedback_change=late_fit.feedback - early_fit.feedback,
        erf_late=late_fit.erf,
        ecs_late=late_fit.ecs_eff,
        early=early_fit,
        late=late_fit,
        feedback_change_se=float(np.sqrt(max(change_var, 0.0))),
        feedback_change_dof=summed_dof((early_fit.feedback_se**2, early_fit.feedback_dof),
                                        (late_fit.feedback_se**2, late_fit.feedback_dof)),
    )



def _segments_cross(dT, dN, early, late, early_fit: GregoryFit, late_fit: GregoryFit,
                    control: ControlVariability | None) -> float:
    """Covariance of the early and the late slope: errors of adjacent years, and the drift line both share.

    Their error combinations ΔN − λ_e ΔT and ΔN − λ_l ΔT are taken with cross-covariance r·σ_e σ_l ρ^|k|,
    ρ = √(ρ_e ρ_l) and r their correlation in the control's residuals (r = 1 without the control, where
    the drift line's share is left out as in :func:`gregory_fit`; common practice, no source).
    """
    pairs = [_pairs(dT, dN, years, "feedback change") for years in (early, late)]
    designs = [np.column_stack([np.ones_like(x), x]) for x, _ in pairs]
    years = [np.arange(int(y[0]), int(y[1]) + 1) for y in (early, late)]
    fits = (early_fit, late_fit)
    if control is not None:
        noises = [control.noise("rtnt", f.feedback) for f in fits]
        corr = control.correlation("rtnt", early_fit.feedback, late_fit.feedback)
    else:
        noises = [estimate_ar1(y - f.erf - f.feedback * x, d) for (x, y), f, d in zip(pairs, fits, designs)]
        corr = 1.0
    lag1 = float(np.sqrt(noises[0].lag1 * noises[1].lag1))
    c = corr * noises[0].sd * noises[1].sd
    cov = cross_covariance(designs[0], years[0], designs[1], years[1], c, lag1)
    if control is not None:
        cov = cov + drift_cross_covariance(designs[0], years[0] - 1, designs[1], years[1] - 1,
                                           control.drift_years, control.drift_order, c, lag1)
    return float(cov[1, 1])


def quadratic_fit(dT, dN, years=_DEFAULTS.fit_years, control: ControlVariability | None = None,
                  dof: bool = False) -> QuadraticFit:
    """Least-squares ΔN = F + λΔT + aΔT²; ``curvature`` = a (> 0: feedback weakening with warming).

    ``curvature_se`` as the standard errors of :func:`gregory_fit` (the error process taken at the
    local slope λ + 2aΔT̄ of the mean warming).
    """
    x, y = _pairs(dT, dN, years, "quadratic Gregory fit")
    if x.size < 4:
        raise FitWindowError(f"quadratic Gregory fit needs at least 4 years; it has {x.size}")
    design = np.column_stack([np.ones_like(x), x, x * x])
    coef, _, rank, _ = np.linalg.lstsq(design, y, rcond=None)
    if rank < 3:
        raise FitWindowError("quadratic Gregory fit: ΔT takes fewer than 3 distinct values over the window")
    resid = y - design @ coef
    s2 = (resid @ resid) / (x.size - 3)
    cov_ols = s2 * np.linalg.inv(design.T @ design)
    cov, _, dofs = _covariance(design, resid, years, control, "rtnt", float(coef[1] + 2 * coef[2] * x.mean()),
                               contrasts=([0.0, 0.0, 1.0],) if dof else ())
    return QuadraticFit(
        erf=float(coef[0]),
        feedback=float(coef[1]),
        curvature=float(coef[2]),
        curvature_se=float(np.sqrt(cov[2, 2])),
        n_years=int(x.size),
        curvature_se_ols=float(np.sqrt(cov_ols[2, 2])),
        curvature_dof=dofs[0] if dofs else float("inf"),
    )


def component_feedbacks(anomalies: xr.Dataset, years=_DEFAULTS.fit_years,
                        control: ControlVariability | None = None) -> ComponentFeedbacks | None:
    """OLS slopes of ``lw_cs``, ``sw_cs`` and ``cre`` anomalies on ``tas`` over ``years``, with standard errors.

    Returns None when the series has no clear-sky split (the run lacks ``rsutcs``/``rlutcs``);
    the table then leaves these columns empty. The control's variability is used for a component only
    when the control has that component.
    """
    names = ("lw_cs", "sw_cs", "cre")
    if not all(name in anomalies.data_vars for name in names):
        return None
    values = {}
    for name in names:
        usable = control if control is not None and name in control.residuals else None
        fit = gregory_fit(anomalies["tas"], anomalies[name], years, control=usable, regressand=name)
        values[f"feedback_{name}"], values[f"feedback_{name}_se"] = fit.feedback, fit.feedback_se
    return ComponentFeedbacks(**values)
