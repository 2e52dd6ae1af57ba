"""Benchmark of the extractor's speed and memory against two baselines (not run by pytest): prints figures.

On a demo archive on a 1° grid (generated once under --dir and reused), each in a fresh process:
  (a) floor:     read and decompress every needed variable with netCDF4 (plain loops, whole files in slabs
                 of the storage chunks, no masking: the least any tool must do);
  (b) extractor: `extractor.pipeline.extract` (figures off, fit windows shortened to the short runs);
  (c) xarray:    a plain script — open_mfdataset per run and variable → weighted(areacella).mean over
                 lat/lon → annual resample — doing the same reductions.
Targets (issue 3): (b)/(a) ≤ 1.2, (c)/(b) ≥ 2, and the extractor's peak memory independent of the archive
size: doubling the years, or the models, moves it < 10 %.

Run: python tests/benchmarks/bench_extract.py [--grid 180x360] [--models 1]
         [--years control=40,abrupt=20,onepct=20,historical=5,scenario=5] [--dir FOLDER] [--no-memory-test]
A 1° archive of one model and 90 years of runs is ~0.8 GB and takes about a minute to generate.

Measured 2026-12-02 (2 shared cores, load average ~1.0–1.4; 918 MB on disk, 2.4 GB decompressed):
(a) 11.5 s, 244 MiB · (b) 13.0 s, 466 MiB · (c) 20.0 s, 565 MiB → (b)/(a) 1.14, (c)/(b) 1.54 (below the
target 2: the plain script pays the same read floor, so (c)/(b) ≤ (c)/(a) ≈ 1.7 here). Peak memory of (b):
2× years −6 %, 2× models +7 %.
"""
from __future__ import annotations

import argparse
import sys
import time
from collections import defaultdict
from pathlib import Path

if __package__ in (None, ""):  # run as a script: make `tests` importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tests.benchmarks.measure import (MiB, archive_bytes, archive_for, child_report, load, needed_files,  # noqa: E402
                                      parse_years, rss_now_mib, run_child, uncompressed_bytes, years_text)

HERE = Path(__file__).resolve()


def settings_for(years: dict):
    """Extraction settings whose fit windows fit the shortened runs of the benchmark archive."""
    from sensemble.extractor.settings import ExtractionSettings

    a, o = years["abrupt"], years["onepct"]
    half = max(3, a // 2)
    shortest = min(years["historical"] + years["scenario"], a, o, years["control"])
    return ExtractionSettings(fit_years=(1, a), early_years=(1, half), late_years=(half + 1, a),
                              tcr_years=(max(1, o - 19), o), min_control_years=min(30, shortest))


# ---------------------------------------------------------------------------- children


def child_read(archive: Path) -> None:
    """(a) Read and decompress every needed variable, whole files, in slabs of whole storage chunks."""
    import netCDF4
    import numpy as np

    base = rss_now_mib()
    start = time.perf_counter()
    checksum, nbytes = 0.0, 0
    for path in needed_files(archive):
        with netCDF4.Dataset(path) as nc:
            variable = path.name.split("_", 1)[0]
            var = nc.variables[variable]
            var.set_auto_maskandscale(False)
            if var.ndim < 3:
                data = var[...]
                checksum += float(data.ravel()[0])
                nbytes += data.nbytes
                continue
            chunking = var.chunking()
            per_chunk = chunking[0] if isinstance(chunking, list) else 12
            # ~64 MB per read, a whole number of storage chunks: each chunk decompressed once
            step = max(per_chunk, (64 * MiB // (var[0].nbytes * per_chunk)) * per_chunk)
            for lo in range(0, var.shape[0], step):
                data = var[lo:lo + step]
                checksum += float(data[0, 0, 0])
                nbytes += data.nbytes
    seconds = time.perf_counter() - start
    child_report(seconds=seconds, bytes_decompressed=nbytes, checksum=checksum, base_mib=base)


def child_extract(archive: Path, out: Path, years: dict, compute: dict | None = None) -> None:
    """(b) The extractor, cache off (force), figures off, on the scheduler `compute` asks for."""
    import shutil

    from sensemble.extractor.pipeline import extract

    base = rss_now_mib()
    shutil.rmtree(out, ignore_errors=True)
    settings = settings_for(years)
    start = time.perf_counter()
    if compute:
        from sensemble.compute import ComputeSettings, open_compute

        mmap_threshold = compute.pop("mmap_threshold", None)
        if mmap_threshold:
            import dask

            # glibc: allocations above this size come from the heap, not a fresh mmap (see bench_scale.py)
            dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_MMAP_THRESHOLD_": int(mmap_threshold)})

        with open_compute(ComputeSettings(**compute)):
            started = time.perf_counter()  # the cluster's start-up is not the extractor's time
            result = extract(archive, out, settings, force=True, progress=False, figures=False)
        seconds = time.perf_counter() - started
        setup = started - start
    else:
        result = extract(archive, out, settings, force=True, progress=False, figures=False)
        seconds, setup = time.perf_counter() - start, 0.0
    if result.failures:
        raise SystemExit("extraction failed: " + "; ".join(f.message for f in result.failures))
    child_report(seconds=seconds, setup_seconds=setup, rows=len(result.rows), base_mib=base,
                 ecs=[r["ecs_eff"] for r in result.rows], files=result.files_read, bytes_read=result.bytes_read)


def _plain_runs(archive: Path) -> tuple[dict, dict]:
    """Files by run and variable, and the cell-area file of each model, from the DRS folders."""
    runs: dict = defaultdict(lambda: defaultdict(list))
    areas = {}
    for path in needed_files(archive):
        model, experiment, member, table, variable = path.relative_to(archive).parts[:5]
        if variable == "areacella":
            areas.setdefault(model, path)
        else:
            runs[(model, experiment, member)][variable].append(path)
    return runs, areas


def child_xarray(archive: Path) -> None:
    """(c) What a plain xarray script would do for the same annual global means."""
    import xarray as xr

    base = rss_now_mib()
    start = time.perf_counter()
    runs, areas = _plain_runs(archive)
    checksum = 0.0
    for (model, experiment, member), by_variable in sorted(runs.items()):
        area = xr.open_dataset(areas[model])["areacella"].load()
        annual = {}
        for variable, paths in sorted(by_variable.items()):
            ds = xr.open_mfdataset(sorted(paths), decode_times=xr.coders.CFDatetimeCoder(use_cftime=True))
            global_mean = ds[variable].weighted(area.fillna(0.0)).mean(("lat", "lon"))
            annual[variable] = global_mean.resample(time="YS").mean()
        result = xr.Dataset(annual).compute()
        checksum += float(result["tas"].mean())
    child_report(seconds=time.perf_counter() - start, checksum=checksum, base_mib=base)


# ---------------------------------------------------------------------------- parent


def measure(kind: str, archive: Path, out: Path, years: dict) -> dict:
    args = [str(HERE), "--child", kind, "--archive", str(archive), "--out", str(out), "--years", years_text(years)]
    before = load()
    result = run_child(args)
    result["load"] = f"{before} → {load()}"
    return result


def line(label: str, r: dict, mb: float) -> str:
    return (f"{label:<34} {r['seconds']:7.1f} s  {mb / r['seconds']:7.1f} MB/s   peak RSS {r['peak_tree_mib']:6.0f} MiB "
            f"(after imports {r['base_mib']:4.0f} MiB)   [{r['load']}]")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--grid", default="180x360", help="NLATxNLON of the archive (default 1°: 180x360)")
    parser.add_argument("--models", type=int, default=1)
    parser.add_argument("--years", default=years_text(parse_years("")), help="run lengths, ROLE=N,...")
    parser.add_argument("--dir", default="/tmp/sensemble-bench", help="where archives are generated and reused")
    parser.add_argument("--no-memory-test", action="store_true", help="skip the runs with 2× years and 2× models")
    parser.add_argument("--child", choices=("read", "extract", "xarray"), help=argparse.SUPPRESS)
    parser.add_argument("--archive", help=argparse.SUPPRESS)
    parser.add_argument("--out", help=argparse.SUPPRESS)
    parser.add_argument("--compute", help=argparse.SUPPRESS)  # KIND:WORKERS for the extractor child
    args = parser.parse_args()
    years = parse_years(args.years)

    if args.child:
        archive = Path(args.archive)
        if args.child == "read":
            child_read(archive)
        elif args.child == "extract":
            compute = None
            if args.compute:
                kind, workers, mmap_threshold = (args.compute.split(":") + ["1", ""])[:3]
                compute = {"kind": kind, "workers": int(workers or 1), "mmap_threshold": mmap_threshold}
            child_extract(archive, Path(args.out), years, compute)
        else:
            child_xarray(archive)
        return

    grid = tuple(int(g) for g in args.grid.lower().split("x"))
    folder = Path(args.dir)
    archive = archive_for(folder, grid, args.models, years)
    on_disk = archive_bytes(archive) / 1e6
    raw = uncompressed_bytes(archive) / 1e6
    print(f"archive: {archive} — {args.models} model(s), grid {args.grid}, years {years_text(years)}: "
          f"{len(needed_files(archive))} files, {on_disk:.0f} MB on disk, {raw:.0f} MB decompressed")
    print("MB/s below are MB on disk per second. Load average before → after each run: other engineers share "
          "the 2 cores, which slows every figure.")
    out = folder / "out"
    floor = measure("read", archive, out, years)
    print(line("(a) netCDF4 read + decompress", floor, on_disk), flush=True)
    ours = measure("extract", archive, out, years)
    print(line("(b) extractor", ours, on_disk), flush=True)
    plain = measure("xarray", archive, out, years)
    print(line("(c) plain xarray script", plain, on_disk), flush=True)
    print(f"(b)/(a) = {ours['seconds'] / floor['seconds']:.2f}   (target ≤ 1.2)")
    print(f"(c)/(b) = {plain['seconds'] / ours['seconds']:.2f}   (target ≥ 2)")
    print(f"extracted ecs_eff: {', '.join(f'{e:.2f}' for e in ours['ecs'])} K")

    if args.no_memory_test:
        return
    print("\nmemory of the extractor against the archive's size (target: < 10 % change for 2× the data)")
    doubled_years = {k: 2 * v for k, v in years.items()}
    variants = [("2× years", archive_for(folder, grid, args.models, doubled_years), doubled_years),
                ("2× models", archive_for(folder, grid, 2 * args.models, years), years)]
    print(line(f"(b) {args.models} model(s), {years_text(years)}", ours, on_disk))
    for label, other, other_years in variants:
        r = measure("extract", other, out, other_years)
        mb = archive_bytes(other) / 1e6
        print(line(f"(b) {label}", r, mb))
        change = r["peak_tree_mib"] / ours["peak_tree_mib"] - 1
        above = (r["peak_tree_mib"] - r["base_mib"]) / (ours["peak_tree_mib"] - ours["base_mib"]) - 1
        print(f"    peak RSS change {100 * change:+.1f} % (above the after-imports baseline: {100 * above:+.1f} %); "
              f"time ×{r['seconds'] / ours['seconds']:.2f} for ×{mb / on_disk:.2f} the data")


if __name__ == "__main__":
    main()
