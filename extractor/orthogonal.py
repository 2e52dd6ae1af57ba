"""Errors-in-variables Gregory fit by orthogonal distance regression (scipy.odr).

OLS puts all noise in ΔN; internal variability also moves ΔT. This fit weighs the distance in each variable by
the inverse variance of its errors (the table's ``*_odr`` columns).
"""
from __future__ import annotations

import threading
import warnings
from dataclasses import dataclass

import numpy as np

from sensemble.extractor.gregory import FitWindowError, _ecs, _ols, _pairs
from sensemble.extractor.settings import ExtractionSettings

_DEFAULTS = ExtractionSettings()
_IMPORT_LOCK = threading.Lock()
_odr_module = None


def _odr():
    """scipy.odr, imported once per process under a lock: `warnings.catch_warnings` changes the process's warning
    filters, so fits running in several threads must not enter it at the same time."""
    global _odr_module
    with _IMPORT_LOCK:
        if _odr_module is None:
            with warnings.catch_warnings():
                # scipy >= 1.17 announces the module's move to a separate package; it still works here
                warnings.simplefilter("ignore", DeprecationWarning)
                from scipy import odr

            _odr_module = odr
    return _odr_module


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
    odr = _odr()
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
