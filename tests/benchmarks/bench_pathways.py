"""Benchmark of the parameter route (not run by pytest): speed, and coverage of held-out parameters.

Speed target (issue 13): 10⁵ sampled parameter vectors × 250 years × 3 scenarios in under 5 s on 2 cores —
sampling the vectors, the forcing scales, the exact two-layer integration and the AR(1) internal variability.
Coverage: ensembles of invented two-layer models (F2x, C, C_d, γ drawn independently and uniformly as in the
demo generator, so the emulator's ln-Gaussian assumption is only approximate; half the models with an
efficacy ε ≠ 1), each calibrated from its abrupt run *with* AR(1) internal variability (sd 0.1 K, lag-1 0.6,
N noise 0.3 W m-2); each model held out in turn; share of 90 % intervals of λ, C, C_d, γ that hold its true
(calibrated noise-free) value.
Run: python tests/benchmarks/bench_pathways.py [--repeat N] [--ensembles N]

Last measured (2 cores shared, load average 13.6 from other work): 10⁵ × 250 × 3 in 5.81 s wall, 1.92 s CPU
(single-threaded NumPy: on an idle machine the wall time is the CPU time, under the 5 s target); coverage of
held-out λ, C, C_d, γ by the 90 % intervals 0.897 (6 models), 0.919 (10), 0.931 (15), 40 ensembles each.
"""
from __future__ import annotations

import argparse
import os
import time

import numpy as np

from sensemble.emulator.calibrate import calibrate_two_layer
from sensemble.emulator.ebm import TwoLayerParameters, integrate
from sensemble.emulator.parameter_pathways import sample_pathways
from sensemble.emulator.parameters import PARAMETER_NAMES, ParameterEmulator
from sensemble.emulator.predict import lognormal_samples
from sensemble.emulator.scenarios import ScenarioForcing

N_VECTORS = 100_000
N_YEARS = 250


def invented_ensemble(rng, n_models):
    ecs = rng.uniform(2.0, 5.0, n_models)
    f2x = rng.uniform(3.2, 4.1, n_models)
    eff = np.where(np.arange(n_models) % 2 == 0, 1.0, rng.uniform(1.2, 1.6, n_models))
    return ecs, TwoLayerParameters(f2x / ecs, rng.uniform(6.5, 9.0, n_models), rng.uniform(60, 150, n_models),
                                   rng.uniform(0.5, 0.9, n_models), eff), f2x


def calibrated(params, f2x, rng, noise: bool):
    t, d = integrate(np.full(150, 2.0)[None, :] * f2x[:, None], params)
    lam, _, _, gam, eff = (np.asarray(a)[:, None] for a in params.arrays())
    n = 2.0 * f2x[:, None] - lam * t - (eff - 1.0) * gam * (t - d)
    if noise:
        e = np.zeros_like(t)
        for k in range(1, t.shape[1]):
            e[:, k] = 0.6 * e[:, k - 1] + rng.normal(0, 0.1 * np.sqrt(1 - 0.36), len(t))
        t = t + e
        n = n - lam * e + rng.normal(0, 0.3, n.shape)
    rows, ecs_eff = [], []
    for i in range(len(t)):
        p, f4x = calibrate_two_layer(t[i], n[i])
        rows.append([f4x / 2, p.lambda_, p.heat_capacity, p.deep_heat_capacity, p.exchange, p.efficacy])
        ecs_eff.append(f4x / 2 / p.lambda_)
    return np.array(rows), np.array(ecs_eff)


def coverage(n_models: int, n_ensembles: int, seed: int = 0) -> float:
    rng = np.random.default_rng(seed)
    hits = checks = 0
    wanted = [PARAMETER_NAMES.index(k) for k in ("lambda_", "heat_capacity", "deep_heat_capacity", "exchange")]
    for _ in range(n_ensembles):
        _, params, f2x = invented_ensemble(rng, n_models)
        truth, _ = calibrated(params, f2x, rng, noise=False)
        noisy, ecs_eff = calibrated(params, f2x, rng, noise=True)
        for held in range(n_models):
            keep = np.arange(n_models) != held
            em = ParameterEmulator().fit(ecs_eff[keep, None], noisy[keep])
            interval = em.interval(ecs_eff[[held], None], 0.9)
            for j in wanted:
                lo, hi = interval[PARAMETER_NAMES[j]][0]
                hits += int(lo <= truth[held, j] <= hi)
                checks += 1
    return hits / checks


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--ensembles", type=int, default=40)
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    ecs, params, f2x = invented_ensemble(rng, 12)
    vectors, ecs_eff = calibrated(params, f2x, rng, noise=True)
    em = ParameterEmulator().fit(ecs_eff[:, None], vectors)
    years = np.arange(1, N_YEARS + 1)
    scenarios = [ScenarioForcing("rise", "file", years, 0.035 * years, 3.7),
                 ScenarioForcing("stabilise", "file", years, 4.0 * years / (years + 60.0), 3.7, 0.05),
                 ScenarioForcing("overshoot", "co2", years, 5.35 * np.log(1 + 1.5 * np.sin(np.pi * years / 300)),
                                 5.35 * np.log(2.0))]
    xs = lognormal_samples(3.0, (2.5, 4.0), N_VECTORS, np.random.default_rng(1))[:, None]
    print(f"cpus={os.cpu_count()}, load average {os.getloadavg()[0]:.1f} before timing "
          "(other work on the machine slows every figure below)")
    best = best_cpu = np.inf
    for _ in range(args.repeat):
        start, cpu = time.perf_counter(), time.process_time()
        for s in scenarios:
            paths = sample_pathways(em, s, xs, None, random_state=2, internal_variability=(0.1, 0.6))
            del paths
        best = min(best, time.perf_counter() - start)
        best_cpu = min(best_cpu, time.process_time() - cpu)
    print(f"{N_VECTORS} vectors x {N_YEARS} years x {len(scenarios)} scenarios (lognormal ECS inputs, AR(1) "
          f"noise): {best:.2f} s wall, {best_cpu:.2f} s CPU — target < 5 s: {'meets' if best < 5 else 'MISSES'}; "
          f"load average {os.getloadavg()[0]:.1f} after")
    for n_models in (6, 10, 15):
        start = time.perf_counter()
        rate = coverage(n_models, args.ensembles, seed=n_models)
        print(f"coverage of held-out λ, C, C_d, γ by 90 % intervals, {n_models} models x {args.ensembles} ensembles "
              f"(noisy calibration): {rate:.3f} ({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
