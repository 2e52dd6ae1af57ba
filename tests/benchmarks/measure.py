"""Shared pieces of the extractor benchmarks (not run by pytest): archives, child processes, peak memory.

Every measurement runs in a fresh Python process so that its peak memory is its own: the parent polls
the resident set size (RSS) of the child and of all its descendants (dask worker processes included)
with psutil, and the child reports its own time and `ru_maxrss` as the last line of its output (JSON).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil

MiB = 2**20

#: run lengths (years) of the benchmark archive by default: 90 years of monthly fields per model
DEFAULT_YEARS = {"control": 40, "abrupt": 20, "onepct": 20, "historical": 5, "scenario": 5}

#: what the extractor reads (DESIGN.md); the floor reads the same files
VARIABLES = ("tas", "rsdt", "rsut", "rlut", "rsutcs", "rlutcs")


def parse_years(text: str) -> dict:
    years = dict(DEFAULT_YEARS)
    for item in filter(None, (p.strip() for p in text.split(","))):
        role, _, value = item.partition("=")
        years[role.strip()] = int(value)
    return years


def years_text(years: dict) -> str:
    return ",".join(f"{k}={years[k]}" for k in sorted(years))


def load() -> str:
    """Load average of the machine (other work on it slows every figure)."""
    one, five, _ = os.getloadavg()
    return f"load {one:.1f}/{five:.1f}"


def archive_for(folder: Path, grid: tuple[int, int], models: int, years: dict, seed: int = 0) -> Path:
    """A demo archive for these parameters under `folder`, generated once and reused afterwards."""
    from sensemble import demo as demo_ensemble

    name = f"demo_{grid[0]}x{grid[1]}_m{models}_" + "_".join(f"{k[:3]}{years[k]}" for k in sorted(years))
    root = Path(folder) / name
    done = root / ".bench_complete"
    if not done.exists():
        started = time.perf_counter()
        print(f"generating {root} ({models} model(s), grid {grid[0]}x{grid[1]}, years {years_text(years)}) ...",
              flush=True)
        demo_ensemble.generate(root, n_models=models, seed=seed, grid=grid, years=years)
        done.write_text(json.dumps({"grid": grid, "models": models, "years": years}))
        print(f"  generated in {time.perf_counter() - started:.0f} s ({load()})", flush=True)
    return root / "archive"


def needed_files(archive: Path) -> list[Path]:
    """Every file the extractor reads: the monthly fields of `VARIABLES` and the cell areas."""
    files = []
    for path in sorted(Path(archive).rglob("*.nc")):
        variable = path.name.split("_", 1)[0]
        if variable in VARIABLES or variable == "areacella":
            files.append(path)
    return files


def archive_bytes(archive: Path) -> int:
    return sum(p.stat().st_size for p in needed_files(archive))


def uncompressed_bytes(archive: Path) -> int:
    """Bytes of the monthly fields once decompressed (float32 values)."""
    import netCDF4

    total = 0
    for path in needed_files(archive):
        with netCDF4.Dataset(path) as nc:
            for name, var in nc.variables.items():
                if name in VARIABLES or name == "areacella":
                    total += var.size * var.dtype.itemsize
    return total


class _Poller(threading.Thread):
    """Peak RSS of a process tree: the sum over the tree, and the largest single process."""

    def __init__(self, pid: int, interval: float = 0.05):
        super().__init__(daemon=True)
        self.root = psutil.Process(pid)
        self.interval = interval
        self.peak_total = 0
        self.peak_single = 0
        self.peak_by_pid: dict[int, int] = {}
        self.cpu_by_pid: dict[int, float] = {}  # CPU seconds (user + sys) of each process when last seen
        self.stop = threading.Event()

    def run(self) -> None:
        while not self.stop.is_set():
            try:
                procs = [self.root] + self.root.children(recursive=True)
            except psutil.Error:
                break
            total = 0
            for proc in procs:
                try:
                    rss, times = proc.memory_info().rss, proc.cpu_times()
                except psutil.Error:
                    continue
                self.cpu_by_pid[proc.pid] = times.user + times.system
                total += rss
                self.peak_by_pid[proc.pid] = max(self.peak_by_pid.get(proc.pid, 0), rss)
                self.peak_single = max(self.peak_single, rss)
            self.peak_total = max(self.peak_total, total)
            self.stop.wait(self.interval)


def run_child(args: list[str], timeout: float = 3600) -> dict:
    """Run `python <args>` in a fresh process; return its JSON result plus the polled peak memory."""
    proc = subprocess.Popen([sys.executable, *args], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    poller = _Poller(proc.pid)
    poller.start()
    try:
        out, err = proc.communicate(timeout=timeout)
    finally:
        poller.stop.set()
        poller.join()
    if proc.returncode != 0:
        raise RuntimeError(f"child {' '.join(args)} failed ({proc.returncode}):\n{err[-4000:]}")
    result = json.loads(out.strip().splitlines()[-1])
    result["peak_tree_mib"] = poller.peak_total / MiB
    result["peak_single_mib"] = poller.peak_single / MiB
    result["peak_child_mib"] = poller.peak_by_pid.get(proc.pid, 0) / MiB
    # the child's descendants: dask worker (and nanny) processes when the child runs a process pool
    result["peak_descendants_mib"] = sorted((v / MiB for pid, v in poller.peak_by_pid.items() if pid != proc.pid),
                                            reverse=True)
    return result


def child_report(**values) -> None:
    """Last line of a child's output: its figures and its own peak RSS (ru_maxrss, KiB on Linux)."""
    import resource

    values["maxrss_mib"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps(values), flush=True)


def rss_now_mib() -> float:
    return psutil.Process().memory_info().rss / MiB
