"""`python -m sensemble.demo DIR [--models N] [--seed S] [--grid NLATxNLON]`: write the demo archive."""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from .generate import DEFAULT_GRID, _parse_grid, _parse_years, generate
from .models import DEFAULT_YEARS


def _size_mb(folder: Path) -> float:
    return sum(p.stat().st_size for p in folder.rglob("*") if p.is_file()) / 1e6


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m sensemble.demo",
                                     description="Write a synthetic CMIP-style archive of invented models "
                                                 "(+ truth.csv) into DIR.")
    parser.add_argument("dir", type=Path, help="output folder (gets archive/, truth.csv, scenario_forcing.csv)")
    parser.add_argument("--models", type=int, default=8, help="number of invented models (default 8)")
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument("--grid", default="x".join(map(str, DEFAULT_GRID)),
                        help="NLATxNLON of the regular grid (default %(default)s; 180x360 for a 1-degree grid)")
    parser.add_argument("--years", default="",
                        help="shorter or longer runs, ROLE=N[,ROLE=N...] with roles " + ", ".join(
                            f"{k} (default {v})" for k, v in DEFAULT_YEARS.items()))
    parser.add_argument("--mixed", action="store_true",
                        help="write every second model the CMIP5 way (directories, names, ids, attributes)")
    parser.add_argument("--quiet", action="store_true", help="no progress lines")
    args = parser.parse_args(argv)
    try:
        grid = _parse_grid(args.grid)
        start = time.perf_counter()
        root = generate(args.dir, n_models=args.models, seed=args.seed, grid=grid,
                        years=_parse_years(args.years) or None, progress=not args.quiet, mixed=args.mixed)
    except (ValueError, FileExistsError) as err:
        print(f"demo_ensemble: {err}", file=sys.stderr)
        return 2
    archive = root / "archive"
    print(f"{archive}: {args.models} invented models, {_size_mb(archive):.1f} MB, "
          f"{time.perf_counter() - start:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
