"""Coverage of the emulator's intervals on synthetic truth (not run by pytest): `run(quick) -> list[dict]`.

Two experiments, each row {what, nominal, measured, detail}:

1. Leave-one-model-out at 5, 8 and 12 models on random invented ensembles. Each model is our own two-layer
   model (emulator.ebm) with its own ECS (uniform 2–5 K), F2x (3.3–4.1 W m-2), heat capacities
   (C 6–10, C_d 60–150 W yr m-2 K-1), exchange γ (0.5–0.9 W m-2 K-1) and scenario forcing (the shared
   shape scaled by 0.85–1.15); one realisation each, with AR(1) internal variability (tas sd 0.1 K, lag-1
   0.5; N sd ~0.35 W m-2, anti-correlated with tas) on its 100-year scenario, 150-year abrupt and 200-year
   control runs. The ensemble's table holds the Gregory fit of each noisy abrupt run (as the extractor's).
   Scored as `emulator.validate` does: coverage of the 90 % interval of the last-decade mean, and the rms
   standardized error z. Goals (issue 10): coverage 0.87–0.93 and rms z 0.9–1.1 at each size.
   Each figure comes with its standard error over ensembles (held-out models of one ensemble share their
   training models, so they are not independent: the se is the sd of the per-ensemble figures over √ensembles;
   for rms z by the delta method, se(mean z²) / (2 rms z)). With 40 ensembles of 5 models the coverage's se is
   about 0.02, too coarse to tell 0.865 from 0.87; hence more ensembles where the models are fewer. At 5 models
   the predictive t has 3 dof, so z² has no finite variance in theory: its se is indicative only.
2. The distribution case `ecs_eff=3.0:2.5-4.0`: the quantiles 17/50/83 % the sampled inputs achieve, and
   P(x > 4.0) (nominal 0.17).

Run alone: python tests/benchmarks/coverage_emulator.py [--quick]  (quick: fewer ensembles; the figures
are then indicative only). Every row's detail names the number of ensembles and held-out models.
"""
from __future__ import annotations

import argparse
import os
import time

import numpy as np
import pandas as pd

from sensemble.emulator.ebm import TwoLayerParameters, integrate, toa_imbalance

SIZES = (5, 8, 12)
N_YEARS, ABRUPT_YEARS, CONTROL_YEARS = 100, 150, 200
ENSEMBLES = {True: {5: 6, 8: 6, 12: 6}, False: {5: 300, 8: 150, 12: 100}}  # random ensembles per size: quick, full
# Last full run (these seeds, in two processes; load 5–9 on 2 cores): coverage ± se / rms z ± se / RMSE
# 5 models 0.911 ± 0.006 / 0.91 ± 0.03 / 0.232 K; 8 models 0.892 ± 0.007 / 0.99 ± 0.01 / 0.217 K;
# 12 models 0.891 ± 0.007 / 1.03 ± 0.01 / 0.212 K. Before (Gaussian basis error, nugget prior centred on 0.1):
# 5 models, the same 300 ensembles, 0.873 ± 0.007 / 1.04 ± 0.04 / 0.244 K; 8 and 12 models from 40 ensembles
# 0.891 / 1.07 / 0.234 K and 0.894 / 1.06 / 0.212 K. Before this issue (40 ensembles) 0.840 / 1.50, 0.869 / 1.14,
# 0.892 / 1.05. Distribution 17/50/83 %: 2.499/2.999/3.998 (before 2.38/3.00/3.80).
SAMPLES = 400  # sampled pathways per held-out model for its end-of-pathway interval


def _ar1(rng, n, sd, phi):
    out = np.empty(n)
    x = rng.normal(0.0, sd)
    innovation = sd * np.sqrt(1.0 - phi * phi)
    for k in range(n):
        x = phi * x + rng.normal(0.0, innovation)
        out[k] = x
    return out


def _noisy(rng, forcing, params, sd=0.1, phi=0.5):
    t, d = integrate(forcing, params)
    n = toa_imbalance(forcing, t, d, params)
    t, n = np.ravel(t), np.ravel(n)
    dt = _ar1(rng, len(t), sd, phi)
    return t + dt, n + rng.normal(0.0, 0.3, len(t)) - 1.5 * dt


def random_training_set(n_models: int, seed: int):
    """An in-memory training set of `n_models` invented models (see the module docstring)."""
    from sensemble.emulator.training import TrainingSet

    rng = np.random.default_rng(seed)
    years = np.arange(1, N_YEARS + 1)
    shape = 6.0 * years / (years + 90.0)
    rows, Y, R, abrupt_t, abrupt_n, control = [], [], [], [], [], []
    for i in range(n_models):
        ecs, f2x = rng.uniform(2.0, 5.0), rng.uniform(3.3, 4.1)
        p = TwoLayerParameters(f2x / ecs, rng.uniform(6.0, 10.0), rng.uniform(60.0, 150.0), rng.uniform(0.5, 0.9))
        t4, n4 = _noisy(rng, np.full(ABRUPT_YEARS, 2.0 * f2x), p)
        ts, ns = _noisy(rng, shape * rng.uniform(0.85, 1.15) * f2x / 3.7, p)
        slope, intercept = np.polyfit(t4, n4, 1)
        rows.append(dict(model=f"SYN-{i:02d}", member="r1i1p1f1", erf_4x=intercept, feedback=slope,
                         ecs_eff=-intercept / (2.0 * slope), n_years=ABRUPT_YEARS, flags=""))
        Y.append(ts)
        R.append(ns)
        abrupt_t.append(t4)
        abrupt_n.append(n4)
        control.append(_ar1(rng, CONTROL_YEARS, 0.1, 0.5))
    table = pd.DataFrame(rows)
    return TrainingSet(inputs=("ecs_eff",), X=table[["ecs_eff"]].to_numpy(float), Y=np.array(Y), years=years,
                       calendar_years=None, models=table["model"].to_numpy(object),
                       members=table["member"].to_numpy(object), scenario="scen-bench", scenario_rtnt=np.array(R),
                       abrupt_tas=abrupt_t, abrupt_rtnt=abrupt_n, control_tas=control, table=table)


def _leave_one_out(ts, seed):
    """Per-run validation rows of `EnsembleEmulator` with the default settings."""
    from sensemble.emulator import validate
    from sensemble.emulator.ensemble import EnsembleEmulator
    from sensemble.emulator.settings import EmulatorSettings

    estimator = EnsembleEmulator.from_settings(EmulatorSettings())
    per_run, _ = validate.leave_one_model_out(ts, estimator, n_samples=SAMPLES, random_state=seed)
    return per_run


def _mean_and_se(runs, values) -> tuple[float, float]:
    """Mean of `values` over held-out models and its standard error over ensembles (the per-ensemble means'
    sd over √ensembles; every ensemble of a size holds the same number of models; common practice, no source)."""
    per_ensemble = pd.Series(np.asarray(values, float)).groupby(runs["ensemble"].to_numpy()).mean()
    se = float(per_ensemble.std(ddof=1) / np.sqrt(len(per_ensemble))) if len(per_ensemble) > 1 else np.nan
    return float(np.mean(values)), se


def emulator_rows(quick: bool, progress=print) -> list[dict]:
    rows = []
    for size in SIZES:
        started = time.perf_counter()
        n_ensembles = ENSEMBLES[quick][size]
        frames = []
        for e in range(n_ensembles):
            frames.append(_leave_one_out(random_training_set(size, 1000 * size + e), e).assign(ensemble=e))
            if progress and (e + 1) % 25 == 0:
                progress(f"{size} models: {e + 1}/{n_ensembles} ensembles")
        runs = pd.concat(frames, ignore_index=True)
        coverage, coverage_se = _mean_and_se(runs, runs["end_covered90"].astype(float))
        z = runs["end_z"].to_numpy(float)
        mean_z2, mean_z2_se = _mean_and_se(runs, runs["end_z"] ** 2)
        rms_z = float(np.sqrt(mean_z2))
        below = float(np.mean(runs["end_actual"] < runs["end_q05"]))
        above = float(np.mean(runs["end_actual"] > runs["end_q95"]))
        detail = (f"{n_ensembles} random ensembles, {len(runs)} held-out models; misses below/above "
                  f"{below:.3f}/{above:.3f}; mean z {np.mean(z):+.2f}; RMSE {np.sqrt(np.mean(runs['end_error'] ** 2)):.3f} K; "
                  f"{time.perf_counter() - started:.0f} s")
        rows.append(dict(what=f"emulator leave-one-model-out 90 % interval, last-decade warming, {size} models",
                         nominal=0.90, measured=coverage, se=coverage_se, detail=detail))
        rows.append(dict(what=f"emulator leave-one-model-out rms standardized error, {size} models",
                         nominal=1.0, measured=rms_z, se=mean_z2_se / (2.0 * rms_z), detail=detail))
        if progress:
            progress(f"{size} models: {coverage:.3f} ± {coverage_se:.3f} coverage, rms z {rms_z:.2f} ± "
                     f"{rows[-1]['se']:.2f} ({detail})")
    return rows


def distribution_rows(quick: bool) -> list[dict]:
    from sensemble.emulator import predict

    rng = np.random.default_rng(0)
    n = 20_000 if quick else 400_000
    x = predict.lognormal_samples(3.0, (2.5, 4.0), n, rng)
    q = np.quantile(x, [0.17, 0.5, 0.83])
    detail = f"{n} samples of ecs_eff=3.0:2.5-4.0; achieved 17/50/83 % = {q[0]:.3f}/{q[1]:.3f}/{q[2]:.3f}"
    return [dict(what="distribution ecs_eff=3.0:2.5-4.0, achieved 17 % quantile", nominal=2.5, measured=float(q[0]), detail=detail),
            dict(what="distribution ecs_eff=3.0:2.5-4.0, achieved 83 % quantile", nominal=4.0, measured=float(q[2]), detail=detail),
            dict(what="distribution ecs_eff=3.0:2.5-4.0, P(x > 4.0)", nominal=0.17, measured=float(np.mean(x > 4.0)), detail=detail)]


def run(quick: bool = False) -> list[dict]:
    """The emulator's coverage experiments; rows {what, nominal, measured, detail}."""
    return emulator_rows(quick, progress=None) + distribution_rows(quick)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer ensembles (indicative figures)")
    args = parser.parse_args(argv)
    one, five, _ = os.getloadavg()
    print(f"machine load before: {one:.1f}/{five:.1f}")
    rows = emulator_rows(args.quick) + distribution_rows(args.quick)
    width = max(len(r["what"]) for r in rows)
    for r in rows:
        se = f" ± {r['se']:.3f}" if "se" in r else ""
        print(f"{r['what']:<{width}}  nominal {r['nominal']:<5g} measured {r['measured']:.3f}{se}   {r['detail']}")
    one, five, _ = os.getloadavg()
    print(f"machine load after: {one:.1f}/{five:.1f}")


if __name__ == "__main__":
    main()
