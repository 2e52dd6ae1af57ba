"""Benchmark of the extractor's throughput and scaling over workers (not run by pytest): prints figures.

On a demo archive on a 1° grid (generated once under --dir and reused; the same archives as
bench_extract.py), each in a fresh process, in MB of input files per second:
  - the floor: read and decompress every needed variable with netCDF4, one thread (bench_extract's (a));
  - the extractor on dask's threaded scheduler with 1 worker thread;
  - the extractor on a local process pool (`sensemble.compute`, kind "processes") with 1 and 2 workers;
the scaling ratio (time with 1 process / time with 2), and the peak memory of each worker process.
With --memory-test, the 2-process run is repeated on archives with 2× the years and 2× the models: the
per-worker peak should move < 10 % (issue 5).

Run: python tests/benchmarks/bench_scale.py [--grid 180x360] [--models 1] [--years ...] [--dir FOLDER]
         [--memory-test]
The machine's 2 cores are shared with other work: the load average is printed beside each figure, and a
scaling ratio above 1 needs two idle cores.

Measured 2026-12-02 (load average 1.2–2.4, 918 MB on disk): floor 84 MB/s; threads 1 worker 65 MB/s;
processes 1 worker 35 MB/s, 2 workers 50 MB/s (×1.44), ~300 MiB per worker, +4 % with 2× years,
+7 % with 2× models. Worker processes decompress slower than a plain process (see --worker-mmap-threshold):
with 128 MiB there, 1 worker 40 MB/s, 2 workers 55 MB/s, ~390–450 MiB per worker.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

if __package__ in (None, ""):  # run as a script: make `tests` importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tests.benchmarks.measure import (archive_bytes, archive_for, load, needed_files, parse_years,  # noqa: E402
                                      run_child, years_text)

EXTRACT_SCRIPT = Path(__file__).resolve().with_name("bench_extract.py")


def measure(kind: str, archive: Path, out: Path, years: dict, compute: str | None = None) -> dict:
    args = [str(EXTRACT_SCRIPT), "--child", kind, "--archive", str(archive), "--out", str(out),
            "--years", years_text(years)]
    if compute:
        args += ["--compute", compute]
    before = load()
    result = run_child(args)
    result["load"] = f"{before} → {load()}"
    return result


def workers_peak(result: dict, workers: int) -> list[float]:
    """Peak RSS of the worker processes: the largest descendants of the child (nannies are smaller)."""
    return result["peak_descendants_mib"][:workers]


def report(label: str, r: dict, mb: float, workers: int = 0) -> None:
    text = f"{label:<36} {r['seconds']:7.1f} s  {mb / r['seconds']:7.1f} MB/s   "
    if workers:
        peaks = ", ".join(f"{p:.0f}" for p in workers_peak(r, workers))
        text += f"peak RSS per worker {peaks} MiB, client {r['peak_child_mib']:.0f} MiB"
        text += f" (cluster start {r['setup_seconds']:.1f} s, not counted)"
    else:
        text += f"peak RSS {r['peak_tree_mib']:.0f} MiB"
    print(f"{text}   [{r['load']}]", flush=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--grid", default="180x360")
    parser.add_argument("--models", type=int, default=1)
    parser.add_argument("--years", default=years_text(parse_years("")))
    parser.add_argument("--dir", default="/tmp/sensemble-bench")
    parser.add_argument("--memory-test", action="store_true", help="also 2 processes on 2× years and 2× models")
    parser.add_argument("--worker-mmap-threshold", type=int, default=0, metavar="BYTES",
                        help="also run the process pools with MALLOC_MMAP_THRESHOLD_=BYTES in the workers")
    args = parser.parse_args()
    years = parse_years(args.years)
    grid = tuple(int(g) for g in args.grid.lower().split("x"))
    folder = Path(args.dir)
    archive = archive_for(folder, grid, args.models, years)
    mb = archive_bytes(archive) / 1e6
    out = folder / "out-scale"
    print(f"archive: {archive} — {len(needed_files(archive))} files, {mb:.0f} MB on disk")

    floor = measure("read", archive, out, years)
    report("floor: netCDF4 read + decompress", floor, mb)
    threads = measure("extract", archive, out, years, "threads:1")
    report("extractor, threads, 1 worker", threads, mb)
    one = measure("extract", archive, out, years, "processes:1")
    report("extractor, processes, 1 worker", one, mb, 1)
    two = measure("extract", archive, out, years, "processes:2")
    report("extractor, processes, 2 workers", two, mb, 2)
    print(f"scaling 1 → 2 processes: ×{one['seconds'] / two['seconds']:.2f} (ideal ×2 on two idle cores); "
          f"2 processes / floor: {two['seconds'] / floor['seconds']:.2f}; "
          f"1 thread / floor: {threads['seconds'] / floor['seconds']:.2f}")

    if args.worker_mmap_threshold:
        # distributed's nanny starts workers with MALLOC_TRIM_THRESHOLD_=65536, which freezes glibc's mmap
        # threshold at 128 kB: every HDF5 decompression buffer and chunk is then a fresh mmap, zero-filled
        # page by page (reading one 1° file took 0.8 s in a worker against 0.5 s in a plain process).
        for workers in (1, 2):
            r = measure("extract", archive, out, years, f"processes:{workers}:{args.worker_mmap_threshold}")
            report(f"  same, MALLOC_MMAP_THRESHOLD_={args.worker_mmap_threshold}, {workers} worker(s)", r, mb,
                   workers)
    if not args.memory_test:
        return
    base = max(workers_peak(two, 2))
    for label, other_years, models in (("2× years", {k: 2 * v for k, v in years.items()}, args.models),
                                       ("2× models", years, 2 * args.models)):
        other = archive_for(folder, grid, models, other_years)
        r = measure("extract", other, out, other_years, "processes:2")
        report(f"extractor, processes, 2 workers, {label}", r, archive_bytes(other) / 1e6, 2)
        print(f"    largest worker peak {100 * (max(workers_peak(r, 2)) / base - 1):+.1f} % against the base archive")


if __name__ == "__main__":
    main()
