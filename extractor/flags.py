"""Quality flags of a run's fits (the flags themselves, their meanings and how they are joined: the contract)."""
from __future__ import annotations

import math

from sensemble.contract.flags import (ECS_UNBOUNDED, ENERGY_LEAK, NONPHYSICAL, POOR_FIT,  # noqa: F401 — re-exported
                                      join_flags)
from sensemble.extractor.settings import ExtractionSettings


def _finite(value) -> bool:
    return value is not None and math.isfinite(float(value))


def quality_flags(fit, control_rtnt_mean: float | None, settings: ExtractionSettings = ExtractionSettings()) -> list[str]:
    """Flags for a Gregory fit and the control it was measured against.

    - ``energy_leak``: \\|mean control N\\| > ``settings.energy_leak_threshold`` (W m-2): an unforced
      model in balance should have N ≈ 0, so a large mean means energy is not conserved
      (common practice, no source). Skipped when the mean is unknown (None or NaN).
    - ``poor_fit``: r² < ``settings.poor_fit_r2``.
    - ``nonphysical``: feedback ≥ 0 (no stable equilibrium), or ``ecs_eff`` ≤ 0, above
      ``settings.ecs_max`` or undefined.

    Parameters
    ----------
    fit : GregoryFit or None
        None when there was no abrupt run: only the control check applies.
    """
    flags = []
    if _finite(control_rtnt_mean) and abs(float(control_rtnt_mean)) > settings.energy_leak_threshold:
        flags.append(ENERGY_LEAK)
    if fit is None:
        return flags
    if not _finite(fit.r2) or fit.r2 < settings.poor_fit_r2:
        flags.append(POOR_FIT)
    feedback_unstable = not _finite(fit.feedback) or fit.feedback >= 0
    ecs_out_of_range = not _finite(fit.ecs_eff) or not 0 < fit.ecs_eff <= settings.ecs_max
    if feedback_unstable or ecs_out_of_range:
        flags.append(NONPHYSICAL)
    return flags
