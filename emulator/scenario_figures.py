"""Figures of a several-scenario batch: pathways per scenario, crossing year against ECS, routes' scores."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .figures import _save, plt

__all__ = ["scenarios_figure", "crossing_ecs_figure", "routes_figure"]


def _x(frame: pd.DataFrame) -> np.ndarray:
    column = "calendar_year" if "calendar_year" in frame and frame["calendar_year"].notna().all() else "year"
    return frame[column].to_numpy()


def scenarios_figure(pathways: pd.DataFrame, path, thresholds=(1.5, 2.0)) -> Path:
    """Each scenario's first distribution case (else its first case): median and 5–95 % band."""
    fig, ax = plt.subplots(figsize=(7.5, 4.4))
    for k, (scenario, frame) in enumerate(pathways.groupby("scenario", sort=False)):
        cases = list(dict.fromkeys(frame["case"]))
        spread = [c for c in cases if "~" in c or c.startswith("samples:") or not c.startswith(("ecs_eff=",))]
        case = spread[0] if spread else cases[0]
        sel = frame[frame["case"] == case]
        color = f"C{k}"
        ax.fill_between(_x(sel), sel["q05"], sel["q95"], color=color, alpha=0.18, lw=0)
        ax.plot(_x(sel), sel["q50"], color=color, lw=1.8, label=f"{scenario} ({sel['route'].iloc[0]}): {case}")
    for t in thresholds:
        ax.axhline(t, color="0.3", lw=0.7, ls=":")
    ax.set_xlabel("year")
    ax.set_ylabel("warming (K)")
    ax.set_title("emulated warming per scenario: median and 5–95 %")
    ax.legend(fontsize=7, loc="upper left")
    return _save(fig, path)


def crossing_ecs_figure(table: pd.DataFrame, path) -> Path:
    """Crossing year (median, 5–95 % band) against ECS, one panel per threshold, one line per scenario."""
    thresholds = sorted(table["threshold"].unique())
    fig, axes = plt.subplots(1, len(thresholds), figsize=(5.2 * len(thresholds), 4.2), squeeze=False)
    column = "calendar_year" if "calendar_year_q50" in table else "year"
    for ax, threshold in zip(axes[0], thresholds):
        for k, (scenario, frame) in enumerate(table[table["threshold"] == threshold].groupby("scenario", sort=False)):
            frame = frame.sort_values("ecs_eff")
            color = f"C{k}"
            ax.fill_between(frame["ecs_eff"], frame[f"{column}_q05"], frame[f"{column}_q95"], color=color, alpha=0.15,
                            lw=0)
            ax.plot(frame["ecs_eff"], frame[f"{column}_q50"], color=color, marker="o", ms=3, label=scenario)
        ax.set_title(f"{threshold:g} K crossed (empty: not within the pathway)")
        ax.set_xlabel("ECS, ecs_eff (K)")
        ax.set_ylabel("crossing year (20-year mean)")
        ax.legend(fontsize=7)
    return _save(fig, path)


def routes_figure(validation: pd.DataFrame, path) -> Path:
    """Leave-one-model-out end-of-pathway RMSE and 90 % coverage per scenario and route."""
    total = validation[validation["model"] == "ALL"].copy()
    held = total["holdout"] if "holdout" in total else "model"
    total["route"] = np.where(held == "scenario", total["route"] + " (known forcing, no scenario run)", total["route"])
    scenarios = list(dict.fromkeys(total["scenario"]))
    routes = list(dict.fromkeys(total["route"]))
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.2))
    width = 0.8 / max(len(routes), 1)
    for j, route in enumerate(routes):
        sel = total[total["route"] == route].set_index("scenario").reindex(scenarios)
        x = np.arange(len(scenarios)) + j * width
        axes[0].bar(x, sel["end_rmse"], width, label=route, color=f"C{j}")
        axes[1].bar(x, sel["end_covered90"], width, label=route, color=f"C{j}")
    for ax, title in zip(axes, ("end-of-pathway RMSE (K)", "share inside the 90 % interval")):
        ax.set_xticks(np.arange(len(scenarios)) + width * (len(routes) - 1) / 2)
        ax.set_xticklabels(scenarios, fontsize=8)
        ax.set_title(title)
    axes[1].axhline(0.9, color="0.3", lw=0.8, ls=":")
    axes[0].legend(fontsize=8)
    fig.suptitle("leave-one-model-out validation by route")
    fig.tight_layout()
    return _save(fig, path)
