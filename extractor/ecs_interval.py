"""The interval of an effective climate sensitivity, a ratio of two fitted coefficients.

``ecs = -erf / (forcing_ratio * feedback)``. Its interval must carry every noise in the two coefficients:
the run's autocorrelated internal variability and the error of the control drift line subtracted from the
run — both are in the covariance :func:`extractor.gregory.gregory_fit` returns when given the control's
variability. The interval is Fieller's (Fieller 1954, J. R. Stat. Soc. B; from memory): the set of θ for
which erf + forcing_ratio·θ·feedback, zero at the true θ and normal with a variance known from that
covariance, is within ±z of zero. It is exact for normal coefficients, asymmetric like the ratio itself (a
long upper tail where the feedback is weak), and each tail misses with the stated probability.

Chosen by measured coverage (tests/benchmarks/coverage_extraction.py) over the delta method (a symmetric
interval: its upper tail misses more than its lower) and over the moving-block pair bootstrap over years
that earlier versions used (:func:`bootstrap_ecs`, kept for comparison), which resamples the abrupt run's
years only and so cannot see the drift line's error, and whose resamples of a trending, noisy ΔT shift
the interval upwards.

For ``ecs_late`` the coefficients and covariance given are those of the late fit corrected for the noise in ΔT
(:func:`extractor.regressor_noise.corrected_fit`): over years 21–150 that noise pulls the OLS slope by a third of
its standard error and this interval, exact only around unbiased coefficients, then missed above four times as
often as below.
"""
from __future__ import annotations

import math

import numpy as np
# the normal and Student-t quantiles from scipy.special, the functions scipy.stats' norm.ppf and t.ppf call: the
# same numbers without importing scipy.stats (0.4 s in every worker process that fits)
from scipy.special import ndtri, stdtrit

from sensemble.extractor.gregory import FitWindowError, GregoryFit, _pairs
from sensemble.extractor.settings import ExtractionSettings

_DEFAULTS = ExtractionSettings()

#: the method behind ``ecs_eff_q05``/``ecs_eff_q95`` and ``ecs_late_q05``/``ecs_late_q95``, as the table states it
ECS_INTERVAL_METHOD = ("Fieller interval of the ratio, from the Gregory fit's covariance under AR(1) internal "
                       "variability plus the control drift line's error; for ecs_late, of the fit corrected for the "
                       "noise in ΔT")


def gregory_ecs_interval(fit: GregoryFit, forcing_ratio: float = _DEFAULTS.forcing_ratio,
                         level: float = 0.90, dof: float = math.inf) -> tuple[float, float]:
    """The :func:`ecs_interval` of a Gregory fit, from its coefficients and their covariance.

    The table's intervals take normal quantiles (``dof`` = inf). Student-t quantiles with ``fit.ecs_dof``, for
    the estimation error of the control's σ and ρ, were measured and not adopted: they over-cover at lag-1 0.8
    (tests/benchmarks/coverage_extraction.py; README, "Uncertainty of the extracted numbers").
    """
    return ecs_interval(fit.erf, fit.feedback, fit.covariance, forcing_ratio, level, dof)


def ecs_interval(erf: float, feedback: float, covariance, forcing_ratio: float = _DEFAULTS.forcing_ratio,
                 level: float = 0.90, dof: float = math.inf) -> tuple[float, float]:
    """Equal-tailed ``level`` interval of ``-erf / (forcing_ratio * feedback)`` (Fieller).

    Parameters
    ----------
    erf, feedback : float
        Fitted intercept and slope.
    covariance : 2×2 array-like
        Their covariance (``GregoryFit.covariance``).
    forcing_ratio : float
    level : float
        Probability the interval holds the truth (0.90: the 5–95 % interval).
    dof : float
        Degrees of freedom of the covariance's estimate: the bound uses Student-t quantiles (normal ones at inf).

    Returns
    -------
    (low, high)
        ``high`` is +inf (``low`` −inf for a negative estimate) when the feedback is not distinguishable
        from zero at this level: the data then set no upper bound. NaN, NaN when they set no bound at all.

    Examples
    --------
    >>> low, high = ecs_interval(7.0, -1.0, [[0.04, -0.008], [-0.008, 0.0025]])
    >>> round(low, 3), round(high, 3)
    (3.327, 3.699)
    """
    if not 0 < level < 1:
        raise ValueError(f"interval level must be between 0 and 1; got {level}")
    z = float(ndtri(0.5 + level / 2) if math.isinf(dof) else stdtrit(dof, 0.5 + level / 2))
    (v_ff, v_fl), (_, v_ll) = np.asarray(covariance, dtype=np.float64)
    # (erf + u·feedback)² ≤ z² (v_ff + 2u v_fl + u² v_ll) with u = forcing_ratio·θ: a u² + 2b u + c ≤ 0
    a = feedback * feedback - z * z * v_ll
    b = erf * feedback - z * z * v_fl
    c = erf * erf - z * z * v_ff
    disc = b * b - a * c
    if not all(math.isfinite(v) for v in (a, b, c)) or disc < 0 or a == 0:
        return math.nan, math.nan  # no usable set: every θ, or a degenerate covariance
    root = math.sqrt(disc)
    u_low, u_high = sorted(((-b - root) / a, (-b + root) / a))
    if a > 0:
        return float(u_low / forcing_ratio), float(u_high / forcing_ratio)
    # a < 0: the feedback is not distinguishable from zero at this level and the set is everything outside
    # (u_low, u_high); the part holding the estimate runs to infinity on one side (through λ ≈ 0 it goes on
    # into sensitivities of the other sign, which this interval leaves out)
    estimate = -erf / feedback
    if estimate >= u_high:
        return float(u_high / forcing_ratio), math.inf
    if estimate <= u_low:
        return -math.inf, float(u_low / forcing_ratio)
    return math.nan, math.nan


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
    """5–95 % interval of ``ecs_eff`` from a moving-block bootstrap over years (the former method).

    Kept for comparison in the coverage benchmark: it under-covers (see the module's docstring).

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

