"""Coverage of every interval the tool reports, as one table (not run by pytest).

Runs tests/benchmarks/coverage_extraction.py, coverage_segments.py and, where it exists, tests/benchmarks/coverage_emulator.py; each
exposes ``run(quick: bool) -> list[dict]`` with rows ``what, nominal, measured, detail``. Prints the machine's
load beside the figures (other work on the machine slows them, it does not change them).

Run: python tests/benchmarks/bench_coverage.py [--quick] [--only extraction|segments|emulator]
"""
from __future__ import annotations

import argparse
import importlib
import os
import sys
import time
from pathlib import Path

MODULES = {"extraction": "tests.benchmarks.coverage_extraction", "segments": "tests.benchmarks.coverage_segments",
           "emulator": "tests.benchmarks.coverage_emulator"}


def _load() -> str:
    one, five, _ = os.getloadavg()
    return f"load {one:.1f}/{five:.1f}"


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer trials: figures indicative only")
    parser.add_argument("--only", choices=sorted(MODULES), help="run one experiment module")
    args = parser.parse_args(argv)
    rows = []
    for name, module_name in MODULES.items():
        if args.only and name != args.only:
            continue
        try:
            module = importlib.import_module(module_name)
        except ModuleNotFoundError as err:
            if err.name != module_name:
                raise
            print(f"{name}: {module_name} not present, skipped")
            continue
        started = time.perf_counter()
        print(f"{name}: running ({_load()}) ...", flush=True)
        found = module.run(quick=args.quick)
        print(f"{name}: {len(found)} rows in {time.perf_counter() - started:.0f} s ({_load()})", flush=True)
        rows += [dict(row, stage=name) for row in found]
    width = max((len(row["what"]) for row in rows), default=20)
    print(f"\n{'what':<{width}}  nominal  measured     se  detail")
    for row in rows:
        se = f"{row['se']:>6.3f}" if row.get("se") is not None else f"{'':>6}"
        print(f"{row['what']:<{width}}  {row['nominal']:>7.2f}  {row['measured']:>8.3f} {se}  {row['detail']}")


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the repository root: the `tests` package
    main()
