"""Forced part of single realisations: the smoothers of the training residuals."""
import numpy as np
import pytest

from sensemble.emulator.ebm import TwoLayerParameters, integrate
from sensemble.emulator.smoothing import forced_part, gaussian_smoother, response_smoother

from .synthetic import ar1, scenario_forcing


def test_gaussian_smoother_keeps_straight_lines():
    # Local-linear kernel regression reproduces a straight line exactly, ends included (Fan & Gijbels 1996,
    # from memory); rows are weights summing to 1.
    L = gaussian_smoother(60)
    line = 0.3 + 0.02 * np.arange(60)
    np.testing.assert_allclose(L @ line, line, atol=1e-12)
    np.testing.assert_allclose(L.sum(axis=1), 1.0, atol=1e-12)


@pytest.mark.parametrize("forcing", [np.full(150, 7.4), scenario_forcing(150)], ids=["step", "rise"])
def test_response_smoother_keeps_two_layer_responses_and_drops_noise(forcing):
    # The two-layer response to a forcing is the forcing convolved with two decaying exponentials (Geoffroy
    # et al. 2013a, from memory), so the projection on one-box responses keeps it — the step's fast transient
    # included — to 0.02 K; AR(1) noise (0.1 K, lag-1 0.5, as the synthetic ensembles) mostly goes: less than
    # a fifth of its variance stays (common practice, no source: our own target).
    P = response_smoother(forcing)
    for c, cd, gam in [(7.3, 106.0, 0.73), (9.0, 60.0, 0.9), (6.0, 140.0, 0.5)]:
        t, _ = integrate(forcing, TwoLayerParameters(1.1, c, cd, gam))
        assert np.max(np.abs(P @ t - t)) < 0.02
    noise = ar1(np.random.default_rng(0), 150, 0.1, 0.5, size=(200,))
    kept = forced_part(noise, "response", forcing)
    assert kept.var() < 0.2 * noise.var()


def test_forced_part_choices():
    rng = np.random.default_rng(1)
    y = rng.normal(size=(3, 40))
    np.testing.assert_array_equal(forced_part(y, "none"), y)
    np.testing.assert_allclose(forced_part(y, "auto"), forced_part(y, "gaussian"))
    np.testing.assert_allclose(forced_part(y, "auto", np.linspace(0, 4, 40)), forced_part(y, "response", np.linspace(0, 4, 40)))
    np.testing.assert_array_equal(forced_part(y[:, :1], "gaussian"), y[:, :1])  # one year: nothing to smooth
    with pytest.raises(ValueError, match="needs the forcing"):
        forced_part(y, "response")
