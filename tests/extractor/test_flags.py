"""Tests of extractor/flags.py: quality flags and their written form."""
import math

import pytest

from sensemble.extractor.flags import join_flags, quality_flags
from sensemble.extractor.gregory import GregoryFit
from sensemble.extractor.settings import ExtractionSettings

SETTINGS = ExtractionSettings()  # energy_leak 0.5 W m-2, poor_fit r² 0.5, ecs_max 20 K


def _fit(erf=7.0, feedback=-1.0, r2=0.9, forcing_ratio=2.0):
    return GregoryFit(erf=erf, erf_se=0.1, feedback=feedback, feedback_se=0.05,
                      ecs_eff=-erf / (forcing_ratio * feedback) if feedback else math.inf, r2=r2, n_years=150)


def test_a_sound_run_has_no_flags():
    assert quality_flags(_fit(), 0.1, SETTINGS) == []


@pytest.mark.parametrize("control_n, flagged", [(0.6, True), (-0.6, True), (0.5, False), (-0.49, False),
                                                (None, False), (math.nan, False)])
def test_energy_leak_beyond_threshold(control_n, flagged):
    # threshold comparison as configured (common practice, no source)
    assert ("energy_leak" in quality_flags(_fit(), control_n, SETTINGS)) is flagged


def test_energy_leak_threshold_comes_from_settings():
    assert quality_flags(_fit(), 0.3, ExtractionSettings(energy_leak_threshold=0.2)) == ["energy_leak"]


def test_poor_fit_below_r2_threshold():
    assert quality_flags(_fit(r2=0.49), 0.0, SETTINGS) == ["poor_fit"]
    assert quality_flags(_fit(r2=0.5), 0.0, SETTINGS) == []


@pytest.mark.parametrize(
    "erf, feedback",
    [(7.0, 0.0), (7.0, 0.3), (-1.0, -1.0), (7.0, -0.1)],  # no restoring feedback; negative ECS; ECS 35 K > 20 K
)
def test_nonphysical_fits(erf, feedback):
    assert "nonphysical" in quality_flags(_fit(erf=erf, feedback=feedback), 0.0, SETTINGS)


def test_without_a_fit_only_the_control_is_checked():
    assert quality_flags(None, 1.0, SETTINGS) == ["energy_leak"]
    assert quality_flags(None, 0.0, SETTINGS) == []


def test_join_flags_sorts_deduplicates_and_splits():
    assert join_flags(["poor_fit", "branch_assumed;control_short", "", "poor_fit", "cos_weights"]) == (
        "branch_assumed;control_short;cos_weights;poor_fit"
    )
    assert join_flags([]) == ""
