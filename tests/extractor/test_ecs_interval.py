"""Tests of extractor/ecs_interval.py: the Fieller interval of the effective climate sensitivity."""
import math

import numpy as np
import pytest
from scipy.stats import norm, t as student_t

from sensemble.extractor.ecs_interval import ecs_interval, gregory_ecs_interval
from sensemble.extractor.gregory import gregory_fit

Z90 = norm.ppf(0.95)  # scipy.stats.norm: the 95 % quantile of the standard normal


def test_known_feedback_gives_the_intercept_interval_scaled():
    # With the slope known exactly (zero variance) the ratio's interval is the intercept's normal interval
    # divided by −forcing_ratio·λ (Fieller 1954, from memory: the pivot is then the intercept's z-score).
    low, high = ecs_interval(7.0, -1.0, [[0.09, 0.0], [0.0, 0.0]], forcing_ratio=2.0)
    assert low == pytest.approx((7.0 - Z90 * 0.3) / 2.0, rel=1e-12)
    assert high == pytest.approx((7.0 + Z90 * 0.3) / 2.0, rel=1e-12)


def test_degrees_of_freedom_give_student_t_bounds():
    # With the slope known exactly and the covariance estimated with ν degrees of freedom, the interval is the
    # intercept's Student-t interval divided by −forcing_ratio·λ (quantile from scipy.stats.t)
    low, high = ecs_interval(7.0, -1.0, [[0.09, 0.0], [0.0, 0.0]], forcing_ratio=2.0, dof=12.0)
    q = student_t.ppf(0.95, 12.0)
    assert low == pytest.approx((7.0 - q * 0.3) / 2.0, rel=1e-12)
    assert high == pytest.approx((7.0 + q * 0.3) / 2.0, rel=1e-12)


def test_uncertain_feedback_gives_a_long_upper_tail():
    # ECS ∝ 1/|λ|: a weaker feedback raises it more than a stronger one lowers it, so the interval reaches
    # further above the estimate than below it (property of a ratio; Fieller 1954, from memory)
    low, high = ecs_interval(7.0, -1.0, [[0.04, 0.0], [0.0, 0.02]])
    assert low < 3.5 < high
    assert high - 3.5 > 1.2 * (3.5 - low)


def test_each_tail_misses_five_percent_for_normal_coefficients():
    # Fieller's interval is exact for normal estimates with known covariance (Fieller 1954, from memory):
    # 4000 draws → binomial sd of a 5 % tail ≈ 0.35 %; the delta method's tails miss 0.9 % / 7.5 % here.
    rng = np.random.default_rng(0)
    truth = np.array([6.5, -0.8])
    cov = np.array([[0.16, -0.03], [-0.03, 0.012]])
    draws = rng.multivariate_normal(truth, cov, size=4000)
    true_ecs = -truth[0] / (2 * truth[1])
    intervals = np.array([ecs_interval(f, lam, cov) for f, lam in draws])
    assert np.all(np.isfinite(intervals))
    below = np.mean(true_ecs < intervals[:, 0])
    above = np.mean(true_ecs > intervals[:, 1])
    assert below == pytest.approx(0.05, abs=0.012)
    assert above == pytest.approx(0.05, abs=0.012)


def test_feedback_indistinguishable_from_zero_has_no_upper_end():
    # |λ| < z·se(λ): the confidence set of the ratio is unbounded (Fieller 1954, from memory)
    low, high = ecs_interval(7.0, -0.2, [[0.04, 0.0], [0.0, 0.04]])
    assert math.isfinite(low) and low < 17.5 and high == math.inf


def test_interval_holds_the_estimate_and_narrows_with_less_noise():
    # common practice, no source: a consistent interval contains its estimate and shrinks with the noise
    t = np.arange(1, 151)
    dT = 5.0 - 2.5 * np.exp(-t / 4.0) - 2.0 * np.exp(-t / 150.0)
    rng = np.random.default_rng(1)
    shocks = rng.normal(0.0, 1.0, t.size)
    widths = []
    for scale in (0.4, 0.1):
        fit = gregory_fit(dT, 7.0 - 1.2 * dT + scale * shocks)
        low, high = gregory_ecs_interval(fit)
        assert low < fit.ecs_eff < high
        widths.append(high - low)
    assert widths[1] < 0.5 * widths[0]


def test_level_outside_zero_to_one_is_an_error():
    with pytest.raises(ValueError, match="level"):
        ecs_interval(7.0, -1.0, np.eye(2) * 0.01, level=90)
