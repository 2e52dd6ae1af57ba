"""Benchmark of the pathway emulator's sampling (not run by pytest): prints timings.

Target (issue 4): 10⁵ sampled pathways of 250 years in under 2 s on 2 cores.
Measures, on an emulator fitted to 12 invented runs of 250 years (two-layer model + AR(1) noise):
  - 10⁵ pathways at one input point;
  - 10⁵ pathways for a lognormal ECS distribution (10⁵ distinct inputs: GP and physics mean at each);
  - the quantiles and crossing years of those 10⁵ pathways (what `predict_cases` adds on top).
Run: python tests/benchmarks/bench_predict.py [--repeat N]
"""
from __future__ import annotations

import argparse
import os
import time

import numpy as np

from sensemble.emulator.ebm import TwoLayerParameters, integrate
from sensemble.emulator.gp import PathwayEmulator
from sensemble.emulator.variability import ar1_noise
from sensemble.emulator.predict import crossing_years, lognormal_samples

N_YEARS = 250
N_PATHS = 100_000


def fitted_emulator(seed: int = 0) -> PathwayEmulator:
    rng = np.random.default_rng(seed)
    ecs = np.linspace(2.0, 5.0, 12)
    forcing = 6.0 * np.arange(1, N_YEARS + 1) / (np.arange(1, N_YEARS + 1) + 90.0)
    t, _ = integrate(forcing, TwoLayerParameters(3.7 / ecs, rng.uniform(6.5, 9, 12), rng.uniform(70, 130, 12), 0.7))
    Y = t + ar1_noise(rng, t.shape, 0.08, 0.5)
    mean = dict(f2x=3.7, heat_capacity=7.5, deep_heat_capacity=100.0, exchange=0.7, efficacy=1.0)
    return PathwayEmulator(internal_variability=(0.08, 0.5)).fit(ecs[:, None], Y, forcing=forcing, mean_params=mean)


def best_of(fn, repeat):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    start = time.perf_counter()
    em = fitted_emulator()
    print(f"fit: {time.perf_counter() - start:.2f} s ({em.n_components_} components), cpus={os.cpu_count()}, "
          f"load average {os.getloadavg()[0]:.1f} (other work on the machine slows every figure below)")
    point, paths = best_of(lambda: em.sample_paths([[3.2]], N_PATHS, random_state=1), args.repeat)
    print(f"{N_PATHS} pathways x {N_YEARS} years at one input:           {point:.2f} s  shape {paths.shape}")
    del paths
    xs = lognormal_samples(3.0, (2.5, 4.0), N_PATHS, np.random.default_rng(2))[:, None]
    dist, paths = best_of(lambda: em.sample_paths(xs, 1, random_state=1)[:, 0, :], args.repeat)
    print(f"{N_PATHS} pathways x {N_YEARS} years, lognormal ECS inputs:  {dist:.2f} s")
    years = np.arange(1, N_YEARS + 1)
    summary, _ = best_of(lambda: (np.quantile(paths, [0.05, 0.17, 0.5, 0.83, 0.95], axis=0),
                                  crossing_years(paths, years, 1.5), crossing_years(paths, years, 2.0)), 1)
    print(f"quantiles + two thresholds' crossing years of them:    {summary:.2f} s")
    verdict = "meets" if max(point, dist) < 2.0 else "MISSES"
    print(f"target 10^5 pathways of 250 years < 2 s: {verdict} (worst {max(point, dist):.2f} s)")


if __name__ == "__main__":
    main()
