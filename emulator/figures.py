"""Figures of the emulator: a pathway fan per case, and the validation scatter (matplotlib, Agg backend)."""
from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from sensemble.contract.atomic import atomic_path  # noqa: E402

__all__ = ["fan_figure", "validation_figure"]


def _save(fig, path) -> Path:
    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=110)
    plt.close(fig)
    return path


def fan_figure(dataset, case: str, path, training_Y=None, thresholds=(1.5, 2.0), scenario: str = "") -> Path:
    """Median, 17–83 % and 5–95 % bands of one case; training pathways faint behind; threshold lines."""
    sel = dataset.sel(case=case)
    x = dataset["calendar_year"].values if "calendar_year" in dataset.coords else dataset["year"].values
    q = {float(v): sel["warming_quantile"].sel(quantile=v).values for v in dataset["quantile"].values}
    fig, ax = plt.subplots(figsize=(7, 4.2))
    if training_Y is not None:
        for y in np.asarray(training_Y):
            ax.plot(x, y, color="0.6", lw=0.6, alpha=0.35, zorder=1)
        ax.plot([], [], color="0.6", lw=0.6, alpha=0.6, label="training runs")

    def band(lo, hi, alpha, label):
        if lo in q and hi in q:
            ax.fill_between(x, q[lo], q[hi], color="tab:red", alpha=alpha, lw=0, label=label, zorder=2)

    band(0.05, 0.95, 0.18, "5–95 %")
    band(0.17, 0.83, 0.35, "17–83 %")
    median = q.get(0.5, sel["mean"].values)
    ax.plot(x, median, color="tab:red", lw=1.8, label="median", zorder=3)
    for t in thresholds:
        ax.axhline(t, color="k", ls="--", lw=0.8, zorder=0)
        ax.text(x[0], t, f" {t:g} K", va="bottom", fontsize=8)
    flags = str(sel["flags"].values)
    ax.set_title(f"{scenario} — {case}" + (f"  [{flags}]" if flags else ""), fontsize=10)
    ax.set_xlabel("calendar year" if "calendar_year" in dataset.coords else "year after branch")
    ax.set_ylabel("warming (K)")
    ax.legend(loc="upper left", fontsize=8, frameon=False)
    fig.tight_layout()
    return _save(fig, path)


def validation_figure(per_run, path, end_years: int = 10) -> Path:
    """Leave-one-model-out: predicted vs actual end-of-pathway warming with 90 % bars."""
    fig, ax = plt.subplots(figsize=(5, 5))
    actual = per_run["end_actual"].to_numpy()
    pred = per_run["end_predicted"].to_numpy()
    err = np.vstack([pred - per_run["end_q05"].to_numpy(), per_run["end_q95"].to_numpy() - pred])
    colors = np.where(per_run["end_covered90"].astype(bool), "tab:blue", "tab:orange")
    for a, p, e0, e1, c in zip(actual, pred, err[0], err[1], colors):
        ax.errorbar(a, p, yerr=[[max(e0, 0)], [max(e1, 0)]], fmt="o", color=c, ms=4, capsize=2)
    lims = [min(actual.min(), (pred - err[0]).min()), max(actual.max(), (pred + err[1]).max())]
    pad = 0.05 * (lims[1] - lims[0] or 1.0)
    lims = [lims[0] - pad, lims[1] + pad]
    ax.plot(lims, lims, color="k", lw=0.8)
    ax.set_xlim(lims)
    ax.set_ylim(lims)
    ax.set_xlabel(f"actual warming, mean of last {end_years} years (K)")
    ax.set_ylabel("emulated, held-out model (K)")
    ax.set_title("leave-one-model-out, 90 % intervals\n(orange: outside its interval)", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)
