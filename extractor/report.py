"""The human-readable report of an extraction: what ran, what failed and why, flags."""
from __future__ import annotations

from pathlib import Path

from sensemble.contract.atomic import write_text
from sensemble.contract.table import ECS_INTERVAL_METHODS


def _fmt(value, digits=2) -> str:
    return "" if value is None else f"{value:.{digits}f}"


def _interval_method(settings) -> str:
    text = ECS_INTERVAL_METHODS[settings.ecs_interval]
    if settings.ecs_interval == "block_bootstrap":
        text += f"; {settings.bootstrap_samples} samples with blocks of {settings.bootstrap_block} years"
    return text


def report_text(result, settings, archive) -> str:
    lines = [
        "# sensemble extraction report",
        "",
        f"- archive: `{archive}`",
        f"- output: `{result.out_dir}`",
        f"- rows: {len(result.rows)} (computed {len(result.computed)}, reused from cache {len(result.cached)})",
        f"- failed: {len(result.failures)}",
        f"- files read: {result.files_read} ({result.bytes_read / 1e6:.1f} MB) in {result.seconds:.1f} s",
        f"- Gregory fit years {settings.fit_years[0]}–{settings.fit_years[1]}, early {settings.early_years}, "
        f"late {settings.late_years}, drift order {settings.drift_order}",
        f"- ECS intervals (5–95 %): {_interval_method(settings)}",
        "",
        "## Sensitivities",
        "",
        "| model | member | ERF 4x (W m-2) | feedback (W m-2 K-1) | ECS_eff (K) | 5–95 % | TCR (K) | flags |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for r in result.rows:
        interval = f"{_fmt(r.get('ecs_eff_q05'))}–{_fmt(r.get('ecs_eff_q95'))}" if r.get("ecs_eff_q05") is not None else ""
        lines.append(f"| {r['model']} | {r['member']} | {_fmt(r.get('erf_4x'))} | {_fmt(r.get('feedback'))} | "
                     f"{_fmt(r.get('ecs_eff'))} | {interval} | {_fmt(r.get('tcr'))} | {r.get('flags') or ''} |")
    lines += ["", "## Failures", ""]
    if not result.failures:
        lines.append("None.")
    for f in result.failures:
        lines.append(f"- **{f.model} {f.member} {f.what}**: {f.message}")
        for path in f.files[:6]:
            lines.append(f"  - `{path}`")
        if len(f.files) > 6:
            lines.append(f"  - … and {len(f.files) - 6} more files")
    lines += ["", "## Archive problems (files not used)", ""]
    lines += [f"- {p}" for p in result.problems] or ["None."]
    if getattr(result, "notes", None):
        lines += ["", "## Notes", ""] + [f"- {note}" for note in result.notes]
    lines.append("")
    return "\n".join(lines)


def write_report(result, settings, archive) -> Path:
    return write_text(Path(result.out_dir) / "report.md", report_text(result, settings, archive))
