"""Gregory regressions of TOA imbalance ΔN on warming ΔT (Gregory et al. 2004, GRL).

ΔN = F + λ ΔT over years of an abrupt-forcing run: the intercept F is the effective radiative
forcing, the slope λ the feedback parameter (λ < 0 for a stable climate), and the effective
climate sensitivity is ``ecs_eff = -F / (forcing_ratio * λ)`` (``forcing_ratio`` = 2 for 4×CO2,
the forcing of a quadrupling taken as twice that of a doubling).

Inputs are annual anomaly series: :class:`xarray.DataArray` with dimension ``year`` counting from
1 at the branch (as ``extractor.control.drift_corrected`` returns), or plain 1-D arrays whose
first element is year 1. Windows ``years=(first, last)`` include both ends.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from sensemble.extractor.settings import ExtractionSettings

_DEFAULTS = ExtractionSettings()


class FitWindowError(ValueError):
    """A fit window the series cannot supply (too short, gaps, missing values)."""


@dataclass(frozen=True)
class GregoryFit:
    """Ordinary least-squares Gregory fit ΔN = erf + feedback·ΔT.

    Attributes
    ----------
    erf, erf_se : float
        Intercept (W m-2) and its OLS standard error.
    feedback, feedback_se : float
        Slope (W m-2 K-1) and its OLS standard error.
    ecs_eff : float
        ``-erf / (forcing_ratio * feedback)`` (K).
    r2 : float
        Coefficient of determination of the fit.
    n_years : int
        Number of annual pairs fitted.
    """

    erf: float
    erf_se: float
    feedback: float
    feedback_se: float
    ecs_eff: float
    r2: float
    n_years: int


@dataclass(frozen=True)
class SegmentFits:
    """Early and late Gregory slopes (feedback change as warming goes on)."""

    feedback_early: float
    feedback_late: float
    feedback_change: float  # feedback_late - feedback_early
    erf_late: float  # intercept of the late segment (W m-2)
    ecs_late: float  # -erf_late / (forcing_ratio * feedback_late)


@dataclass(frozen=True)
class QuadraticFit:
    """ΔN = erf + feedback·ΔT + curvature·ΔT² by least squares."""

    erf: float
    feedback: float  # slope at ΔT = 0 (W m-2 K-1)
    curvature: float  # W m-2 K-2
    curvature_se: float
    n_years: int


@dataclass(frozen=True)
class OrthogonalFit:
    """Errors-in-variables Gregory fit by orthogonal distance regression (scipy.odr).

    ``tas_noise`` and ``rtnt_noise`` are the standard deviations assumed for the errors in ΔT
    and ΔN; ODR minimises the sum of squared distances scaled by them.
    """

    erf: float
    erf_se: float
    feedback: float
    feedback_se: float
    ecs_eff: float
    n_years: int
    tas_noise: float
    rtnt_noise: float


@dataclass(frozen=True)
class ComponentFeedbacks:
    """Gregory slopes of the clear-sky LW, clear-sky SW and cloud-radiative parts of ΔN on ΔT.

    They sum to the feedback of ΔN (OLS is linear in the regressand and N = LW_cs + SW_cs + CRE).
    """

    feedback_lw_cs: float
    feedback_sw_cs: float
    feedback_cre: float


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


def gregory_fit(dT, dN, years=_DEFAULTS.fit_years, forcing_ratio: float = _DEFAULTS.forcing_ratio) -> GregoryFit:
    """OLS regression of annual ΔN on ΔT over ``years`` (Gregory et al. 2004).

    Parameters
    ----------
    dT, dN : xarray.DataArray or array-like
        Annual anomalies of ``tas`` (K) and ``rtnt`` (W m-2) along ``year`` (1 = first year).
    years : (int, int)
        First and last year fitted, inclusive.
    forcing_ratio : float
        Forcing of the run divided by that of a CO2 doubling (2 for abrupt 4×CO2).

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
    x, y = _pairs(dT, dN, years, "Gregory fit")
    erf, erf_se, feedback, feedback_se, r2 = _ols(x, y)
    return GregoryFit(
        erf=erf,
        erf_se=erf_se,
        feedback=feedback,
        feedback_se=feedback_se,
        ecs_eff=_ecs(erf, feedback, forcing_ratio),
        r2=r2,
        n_years=int(x.size),
    )


def bootstrap_ecs(
    dT,
    dN,
    years=_DEFAULTS.fit_years,
    block: int = _DEFAULTS.bootstrap_block,
    n_samples: int = _DEFAULTS.bootstrap_samples,
    seed: int | np.random.Generator | None = _DEFAULTS.seed,
    forcing_ratio: float = _DEFAULTS.forcing_ratio,
    quantiles: tuple[float, float] = (0.05, 0.95),
) -> tuple[float, float]:
    """5–95 % interval of ``ecs_eff`` from a moving-block bootstrap over years.

    Each bootstrap sample is built from blocks of ``block`` consecutive (ΔT, ΔN) pairs,
    concatenated and cut to the window length ``n`` (Künsch 1989 moving-block bootstrap, which
    keeps the year-to-year autocorrelation of internal variability within a block); each sample
    is refitted by OLS. Percentile interval. All samples are drawn and fitted at once (vectorised).

    Blocks wrap around the end of the window (the circular block bootstrap of Politis & Romano
    1992, from memory): with plain moving blocks the first and last years fall in fewer blocks
    than the rest, and in an abrupt run those are the high-leverage early years, so the interval
    was shifted towards higher ECS. Wrapping gives every year the same weight.

    Parameters
    ----------
    seed : int, numpy Generator or None
        The same seed gives the same interval.

    Returns
    -------
    (q05, q95) : tuple of float
    """
    x, y = _pairs(dT, dN, years, "bootstrap of ecs_eff")
    n = x.size
    block = int(block)
    if not 1 <= block <= n:
        raise FitWindowError(f"bootstrap block length {block} must be between 1 and the window length {n}")
    if int(n_samples) < 1:
        raise ValueError(f"bootstrap needs at least one sample; n_samples={n_samples}")
    rng = np.random.default_rng(seed)
    n_blocks = -(-n // block)
    starts = rng.integers(0, n, size=(int(n_samples), n_blocks))
    index = ((starts[:, :, None] + np.arange(block)) % n).reshape(int(n_samples), n_blocks * block)[:, :n]
    xs, ys = x[index], y[index]
    dx = xs - xs.mean(axis=1, keepdims=True)
    dy = ys - ys.mean(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.einsum("ij,ij->i", dx, dy) / np.einsum("ij,ij->i", dx, dx)
        intercept = ys.mean(axis=1) - slope * xs.mean(axis=1)
        ecs = -intercept / (forcing_ratio * slope)
    # a resample with constant ΔT has no slope; such samples cannot be used (kept out of both tails)
    ecs = ecs[np.isfinite(ecs)]
    if ecs.size == 0:
        raise FitWindowError("bootstrap of ecs_eff: no resample had a defined slope")
    q_low, q_high = np.quantile(ecs, quantiles)
    return float(q_low), float(q_high)


def segment_fits(
    dT,
    dN,
    early=_DEFAULTS.early_years,
    late=_DEFAULTS.late_years,
    forcing_ratio: float = _DEFAULTS.forcing_ratio,
) -> SegmentFits:
    """Separate Gregory fits over an early and a late window; the late one gives ``ecs_late``."""
    early_fit = gregory_fit(dT, dN, early, forcing_ratio)
    late_fit = gregory_fit(dT, dN, late, forcing_ratio)
    return SegmentFits(
        feedback_early=early_fit.feedback,
        feedback_late=late_fit.feedback,
        feedback_change=late_fit.feedback - early_fit.feedback,
        erf_late=late_fit.erf,
        ecs_late=late_fit.ecs_eff,
    )


def quadratic_fit(dT, dN, years=_DEFAULTS.fit_years) -> QuadraticFit:
    """Least-squares ΔN = F + λΔT + aΔT²; ``curvature`` = a (> 0: feedback weakening with warming)."""
    x, y = _pairs(dT, dN, years, "quadratic Gregory fit")
    if x.size < 4:
        raise FitWindowError(f"quadratic Gregory fit needs at least 4 years; it has {x.size}")
    design = np.column_stack([np.ones_like(x), x, x * x])
    coef, _, rank, _ = np.linalg.lstsq(design, y, rcond=None)
    if rank < 3:
        raise FitWindowError("quadratic Gregory fit: ΔT takes fewer than 3 distinct values over the window")
    resid = y - design @ coef
    s2 = (resid @ resid) / (x.size - 3)
    cov = s2 * np.linalg.inv(design.T @ design)
    return QuadraticFit(
        erf=float(coef[0]),
        feedback=float(coef[1]),
        curvature=float(coef[2]),
        curvature_se=float(np.sqrt(cov[2, 2])),
        n_years=int(x.size),
    )


def noise_scale(values: np.ndarray) -> float:
    """Year-to-year noise of a series: robust standard deviation of first differences / √2.

    For a slowly varying signal plus independent annual noise, differencing removes the signal
    and doubles the noise variance (common practice, no source). The spread is measured by the
    median absolute deviation (× 1.4826, its ratio to σ for normal data) so that the few large
    steps of the fast response in the first years of an abrupt run do not count as noise.
    """
    steps = np.diff(np.asarray(values, dtype=float))
    mad = np.median(np.abs(steps - np.median(steps)))
    return float(1.4826 * mad / np.sqrt(2.0))


def odr_fit(
    dT,
    dN,
    years=_DEFAULTS.fit_years,
    forcing_ratio: float = _DEFAULTS.forcing_ratio,
    tas_noise: float | None = None,
    rtnt_noise: float | None = None,
) -> OrthogonalFit:
    """Errors-in-variables Gregory fit by orthogonal distance regression (scipy.odr).

    OLS puts all noise in ΔN; internal variability also moves ΔT, which biases the OLS slope
    towards zero. ODR weighs the distance in each variable by the inverse variance of its
    errors, so the result does not depend on the units of ΔT and ΔN. The error scales are the
    standard deviations of the internal variability of ``tas`` and ``rtnt`` — pass the control's
    (``control_residuals(...).std()``) when at hand; by default they are estimated from the
    year-to-year changes of the window itself (:func:`noise_scale`).
    Standard errors are ODR's (``sd_beta``, scaled by the residual variance).
    """
    x, y = _pairs(dT, dN, years, "orthogonal Gregory fit")
    sx = noise_scale(x) if tas_noise is None else float(tas_noise)
    sy = noise_scale(y) if rtnt_noise is None else float(rtnt_noise)
    if not (sx > 0 and sy > 0):
        raise FitWindowError(f"orthogonal Gregory fit needs positive noise scales; got ΔT {sx}, ΔN {sy}")
    with warnings.catch_warnings():
        # scipy >= 1.17 announces the module's move to a separate package; it still works here
        warnings.simplefilter("ignore", DeprecationWarning)
        from scipy import odr

    start = _ols(x, y)
    result = odr.ODR(
        odr.RealData(x, y, sx=sx, sy=sy),
        odr.Model(
            lambda beta, t: beta[0] + beta[1] * t,
            # exact derivatives instead of ODRPACK's finite differences
            fjacb=lambda beta, t: np.vstack([np.ones_like(t), t]),
            fjacd=lambda beta, t: np.full_like(t, beta[1]),
        ),
        beta0=[start[0], start[2]],
        # ODRPACK's default stopping tolerances leave ~1e-5 relative error on a straight line
        sstol=1e-14,
        partol=1e-14,
        maxit=200,
    ).run()
    if result.info > 3:
        raise FitWindowError(f"orthogonal Gregory fit did not converge: {'; '.join(result.stopreason)}")
    erf, feedback = (float(b) for b in result.beta)
    erf_se, feedback_se = (float(s) for s in result.sd_beta)
    return OrthogonalFit(
        erf=erf,
        erf_se=erf_se,
        feedback=feedback,
        feedback_se=feedback_se,
        ecs_eff=_ecs(erf, feedback, forcing_ratio),
        n_years=int(x.size),
        tas_noise=sx,
        rtnt_noise=sy,
    )


def component_feedbacks(anomalies: xr.Dataset, years=_DEFAULTS.fit_years) -> ComponentFeedbacks | None:
    """OLS slopes of ``lw_cs``, ``sw_cs`` and ``cre`` anomalies on ``tas`` over ``years``.

    Returns None when the series has no clear-sky split (the run lacks ``rsutcs``/``rlutcs``);
    the table then leaves these columns empty.
    """
    names = ("lw_cs", "sw_cs", "cre")
    if not all(name in anomalies.data_vars for name in names):
        return None
    slopes = {}
    for name in names:
        x, y = _pairs(anomalies["tas"], anomalies[name], years, f"{name} feedback")
        slopes[name] = _ols(x, y)[2]
    return ComponentFeedbacks(
        feedback_lw_cs=slopes["lw_cs"], feedback_sw_cs=slopes["sw_cs"], feedback_cre=slopes["cre"]
    )
