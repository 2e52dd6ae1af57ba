"""Figures of the extraction: a Gregory plot per run and an ensemble summary."""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from sensemble.contract.atomic import atomic_path


_plt = None


def _pyplot():
    """matplotlib's pyplot on the file-only back-end, imported (and the back-end chosen) at the first figure: 0.7 s
    of start-up that a batch with figures off, and a worker that only reads, never pays."""
    global _plt
    if _plt is None:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        _plt = plt
    return _plt


def _save(fig, path: Path) -> Path:
    return write_png(_png(fig), path)


def _png(fig) -> bytes:
    stream = io.BytesIO()
    fig.savefig(stream, format="png", dpi=110)
    _pyplot().close(fig)
    return stream.getvalue()


def write_png(png: bytes, path: str | Path) -> Path:
    """A figure drawn elsewhere (`gregory_png`, on a worker) written to `path` atomically."""
    path = Path(path)
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(png)
    return path


def gregory_png(delta_t, delta_n, row: dict, settings) -> bytes:
    """Annual (ΔT, ΔN) points coloured by year, the fit over the fit window, early/late segments, ECS marked: the
    PNG's bytes (drawn where the model is fitted, written by the caller)."""
    delta_t = np.asarray(delta_t, dtype=float)
    delta_n = np.asarray(delta_n, dtype=float)
    years = np.arange(1, delta_t.size + 1)
    fig, ax = _pyplot().subplots(figsize=(6.4, 4.6))
    sc = ax.scatter(delta_t, delta_n, c=years, s=12, cmap="viridis", label="annual means")
    fig.colorbar(sc, ax=ax, label="year after the branch")
    erf, feedback = row.get("erf_4x"), row.get("feedback")
    ratio = settings.forcing_ratio
    if erf is not None and feedback is not None and feedback < 0:
        t_eq = -erf / feedback
        x = np.linspace(0, t_eq, 50)
        ax.plot(x, erf + feedback * x, "k-", lw=1.5,
                label=f"years {settings.fit_years[0]}–{settings.fit_years[1]}: λ = {feedback:.2f}")
        ax.plot([t_eq], [0], "ko", ms=7, mfc="white")
        ax.annotate(f"2×ECS_eff = {t_eq:.2f} K\n(ECS_eff = {t_eq / ratio:.2f} K)", (t_eq, 0),
                    textcoords="offset points", xytext=(-90, 18), fontsize=8)
    for key, (lo, hi), style in (("feedback_early", settings.early_years, "C1--"),
                                 ("feedback_late", settings.late_years, "C3--")):
        slope = row.get(key)
        if slope is None:
            continue
        sel = (years >= lo) & (years <= hi)
        if sel.sum() < 2:
            continue
        intercept = np.mean(delta_n[sel]) - slope * np.mean(delta_t[sel])
        x = np.linspace(0, max(delta_t[sel].max(), -intercept / slope if slope < 0 else delta_t[sel].max()), 30)
        ax.plot(x, intercept + slope * x, style, lw=1.2, label=f"years {lo}–{hi}: λ = {slope:.2f}")
    ax.axhline(0, color="0.6", lw=0.8)
    ax.set_xlim(left=0)
    ax.set_xlabel("ΔT (K)")
    ax.set_ylabel("ΔN (W m⁻²)")
    ax.set_title(f"Gregory plot: {row['model']} {row['member']}")
    ax.legend(fontsize=8, loc="upper right")
    fig.tight_layout()
    return _png(fig)


def ensemble_summary(rows: list[dict], path: str | Path) -> Path:
    """ECS_eff with its 5–95 % interval per model and member, sorted; TCR beside it.

    An interval without an upper end (inf) is drawn to the right edge of the axes.
    """
    good = [r for r in rows if r.get("ecs_eff") is not None]
    good.sort(key=lambda r: r["ecs_eff"])
    fig, ax = _pyplot().subplots(figsize=(7, 0.35 * max(len(good), 4) + 1.2))
    y = np.arange(len(good))
    ecs = np.array([r["ecs_eff"] for r in good])
    lo = np.array([r.get("ecs_eff_q05") if r.get("ecs_eff_q05") is not None else np.nan for r in good])
    hi = np.array([r.get("ecs_eff_q95") if r.get("ecs_eff_q95") is not None else np.nan for r in good])
    open_ended = np.isinf(hi)
    finite = np.concatenate([ecs, hi[np.isfinite(hi)]])
    right = 1.3 * float(np.max(finite, initial=1.0))
    hi = np.where(open_ended, right, hi)
    ax.errorbar(ecs, y, xerr=[ecs - lo, hi - ecs], fmt="o", color="C0", capsize=3, label="ECS_eff (5–95 %)")
    tcr = np.array([r.get("tcr") if r.get("tcr") is not None else np.nan for r in good])
    ax.plot(tcr, y, "s", color="C1", label="TCR")
    ax.set_yticks(y, [f"{r['model']} {r['member']}" for r in good], fontsize=8)
    ax.set_xlabel("K")
    ax.set_title("Ensemble sensitivities")
    ax.grid(axis="x", color="0.9")
    ax.legend(fontsize=8, loc="lower right")
    fig.tight_layout()
    return _save(fig, Path(path))
