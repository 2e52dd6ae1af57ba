"""Two-layer energy-balance model with deep-ocean heat-uptake efficacy.

    C   dT/dt   = F − λ T − ε γ (T − T_d)
    C_d dT_d/dt = γ (T − T_d)

Held et al. (2010, J. Climate); Geoffroy et al. (2013a, J. Climate) for ε = 1 and
Geoffroy et al. (2013b, J. Climate) for the efficacy form. Here λ > 0 (those papers'
convention; the Gregory table's `feedback` is −λ). Time in years, heat capacities in
W yr m-2 K-1, so fluxes in W m-2 and temperatures in K.

Every function broadcasts over parameter arrays, so many parameter sets run at once.
The top-of-atmosphere imbalance is N = F − λT − (ε − 1) γ (T − T_d) (Geoffroy 2013b).
"""
from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

__all__ = ["TwoLayerParameters", "modes", "step_response", "step_response_annual", "integrate", "toa_imbalance"]


@dataclass(frozen=True)
class TwoLayerParameters:
    """Parameters of the two-layer model; each may be a scalar or an array (broadcast together).

    Attributes
    ----------
    lambda_ : climate feedback parameter λ > 0, W m-2 K-1
    heat_capacity : upper-layer heat capacity C, W yr m-2 K-1
    deep_heat_capacity : deep-layer heat capacity C_d, W yr m-2 K-1
    exchange : heat-exchange coefficient γ, W m-2 K-1
    efficacy : deep-ocean heat-uptake efficacy ε (1 = none)
    """

    lambda_: np.ndarray | float
    heat_capacity: np.ndarray | float
    deep_heat_capacity: np.ndarray | float
    exchange: np.ndarray | float
    efficacy: np.ndarray | float = 1.0

    def arrays(self) -> tuple[np.ndarray, ...]:
        values = [np.asarray(getattr(self, f.name), dtype=float) for f in fields(self)]
        return tuple(np.broadcast_arrays(*values))

    def equilibrium_warming(self, forcing):
        """Equilibrium warming F/λ (both layers reach it; efficacy does not change it)."""
        return np.asarray(forcing, dtype=float) / np.asarray(self.lambda_, dtype=float)


@dataclass(frozen=True)
class Modes:
    """Fast and slow modes of the linear system, shapes broadcast from the parameters.

    tau_fast, tau_slow : e-folding times (years)
    amp_fast, amp_slow : fractions of the equilibrium warming in each mode (sum to 1), so a
        step forcing F gives T(t) = F/λ (1 − a_f e^(−t/τ_f) − a_s e^(−t/τ_s))
    ratio_fast, ratio_slow : T_d / T in each mode's eigenvector
    """

    tau_fast: np.ndarray
    tau_slow: np.ndarray
    amp_fast: np.ndarray
    amp_slow: np.ndarray
    ratio_fast: np.ndarray
    ratio_slow: np.ndarray


def modes(params: TwoLayerParameters) -> Modes:
    """Eigen-decomposition of the two-layer system in closed form.

    With b = (λ + εγ)/C + γ/C_d and δ = b² − 4λγ/(C C_d):
    τ_f = C C_d (b − √δ) / (2λγ), τ_s = C C_d (b + √δ) / (2λγ) (Geoffroy et al. 2013a eq. for ε = 1,
    with γ → εγ in the upper layer for the efficacy form of 2013b).
    """
    lam, c, cd, gam, eff = params.arrays()
    b = (lam + eff * gam) / c + gam / cd
    delta = b * b - 4.0 * lam * gam / (c * cd)
    root = np.sqrt(delta)
    tau_f = c * cd * (b - root) / (2.0 * lam * gam)
    tau_s = c * cd * (b + root) / (2.0 * lam * gam)
    # eigenvector T_d/T from the deep-layer equation: γ/C_d (T − T_d) = μ T_d, μ = −1/τ
    phi_f = 1.0 / (1.0 - cd / (gam * tau_f))
    phi_s = 1.0 / (1.0 - cd / (gam * tau_s))
    amp_f = (phi_s - 1.0) / (phi_s - phi_f)
    amp_s = (1.0 - phi_f) / (phi_s - phi_f)
    return Modes(tau_f, tau_s, amp_f, amp_s, phi_f, phi_s)


def step_response(t, forcing, params: TwoLayerParameters):
    """Closed-form response (T, T_d) at times t (years) to a forcing step of size `forcing` at t = 0.

    `t` broadcasts against the parameters on a trailing axis: parameters of shape P give output (*P, len(t)).
    """
    m = modes(params)
    t = np.asarray(t, dtype=float)
    eq = np.asarray(forcing, dtype=float) / np.asarray(params.arrays()[0])
    ex = lambda a: np.asarray(a)[..., None]  # noqa: E731 — parameter axis before time
    ef = np.exp(-t / ex(m.tau_fast))
    es = np.exp(-t / ex(m.tau_slow))
    temp = ex(eq) * (1.0 - ex(m.amp_fast) * ef - ex(m.amp_slow) * es)
    deep = ex(eq) * (1.0 - ex(m.amp_fast * m.ratio_fast) * ef - ex(m.amp_slow * m.ratio_slow) * es)
    return temp, deep


def step_response_annual(n_years: int, forcing, params: TwoLayerParameters):
    """Closed-form annual means (T, T_d) over years 1..n_years of the response to a step at t = 0."""
    m = modes(params)
    k = np.arange(1, n_years + 1, dtype=float)
    eq = np.asarray(forcing, dtype=float) / np.asarray(params.arrays()[0])
    ex = lambda a: np.asarray(a)[..., None]  # noqa: E731

    def mean_exp(tau):
        # mean of e^(−t/τ) over [k−1, k]
        tau = ex(tau)
        return tau * (np.exp(-(k - 1.0) / tau) - np.exp(-k / tau))

    mf, ms = mean_exp(m.tau_fast), mean_exp(m.tau_slow)
    temp = ex(eq) * (1.0 - ex(m.amp_fast) * mf - ex(m.amp_slow) * ms)
    deep = ex(eq) * (1.0 - ex(m.amp_fast * m.ratio_fast) * mf - ex(m.amp_slow * m.ratio_slow) * ms)
    return temp, deep


def integrate(forcing, params: TwoLayerParameters, *, annual_mean: bool = True, dt: float = 1.0,
              deep: bool = True):
    """Exact integration for a forcing held constant over each step (no time-stepping error).

    Parameters
    ----------
    forcing : array (..., n_steps), W m-2; leading axes broadcast against the parameters
    params : TwoLayerParameters (scalars or arrays)
    annual_mean : if True return the mean of each step (what annual-mean model output is);
        if False the state at the end of each step
    dt : step length in years (1/12 for monthly forcing)
    deep : also return the deep-layer temperature (False saves its memory and time: (T, None))

    Returns
    -------
    (T, T_d) arrays of shape broadcast(params, forcing[..., 0]) + (n_steps,)
    """
    m = modes(params)
    lam, c, _, _, _ = params.arrays()
    forcing = np.asarray(forcing, dtype=float)
    shape = np.broadcast_shapes(np.shape(lam), forcing.shape[:-1])
    n = forcing.shape[-1]
    # In modal coordinates x = Σ z_i v_i with v_i = (1, φ_i); the forcing enters the upper layer only,
    # so z_i is driven by g_i F with g = V⁻¹ (1/C, 0). Each step: z_eq = g τ F (−g F / μ with μ = −1/τ),
    # z_end = z_eq + (z − z_eq) e^(−dt/τ), step mean z_eq + (z − z_eq) τ (1 − e^(−dt/τ)) / dt.
    det = m.ratio_slow - m.ratio_fast
    gains = [m.ratio_slow / (c * det) * m.tau_fast, -m.ratio_fast / (c * det) * m.tau_slow]
    decay = [np.exp(-dt / m.tau_fast), np.exp(-dt / m.tau_slow)]
    mean_factor = [tau * (1.0 - d) / dt for tau, d in zip((m.tau_fast, m.tau_slow), decay)]
    ratios = [m.ratio_fast, m.ratio_slow]
    # step-major buffers: each step writes one contiguous block
    outs_t = np.empty((n,) + shape)
    outs_d = np.empty((n,) + shape) if deep else None
    z = [np.zeros(shape), np.zeros(shape)]
    z_eq, gap, z_out, scratch = np.empty(shape), np.empty(shape), np.empty(shape), np.empty(shape)
    for k in range(n):
        f_k = forcing[..., k]
        temp = outs_t[k, ...]  # a view also for scalar parameters
        temp[...] = 0.0
        if deep:
            outs_d[k, ...] = 0.0
        for i in range(2):
            np.multiply(gains[i], f_k, out=z_eq)
            np.subtract(z[i], z_eq, out=gap)
            if annual_mean:
                np.multiply(gap, mean_factor[i], out=z_out)
                z_out += z_eq
            np.multiply(gap, decay[i], out=z[i])
            z[i] += z_eq
            out_i = z_out if annual_mean else z[i]
            temp += out_i
            if deep:
                np.multiply(out_i, ratios[i], out=scratch)
                outs_d[k, ...] += scratch
    return _steps_last(outs_t), (_steps_last(outs_d) if deep else None)


def _steps_last(step_major: np.ndarray) -> np.ndarray:
    """(n, *shape) → contiguous (*shape, n), copied in blocks of the leading axis (a one-shot transposed copy of
    10⁵ × 250 values is several times slower: it walks memory with a large stride)."""
    n = step_major.shape[0]
    flat = step_major.reshape(n, -1)
    out = np.empty((flat.shape[1], n))
    block = 4096
    for i in range(0, flat.shape[1], block):
        out[i:i + block] = flat[:, i:i + block].T
    return out.reshape(step_major.shape[1:] + (n,))


def toa_imbalance(forcing, temperature, deep_temperature, params: TwoLayerParameters):
    """N = F − λT − (ε − 1) γ (T − T_d): the energy taken up by both layers (Geoffroy et al. 2013b)."""
    lam, _, _, gam, eff = (np.asarray(a)[..., None] for a in params.arrays())
    return np.asarray(forcing) - lam * temperature - (eff - 1.0) * gam * (temperature - deep_temperature)
