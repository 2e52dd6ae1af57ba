"""Inflate implementations on the storage chunks of NetCDF-4 files (not run by pytest): prints CPU seconds and MB/s.

The compressed chunks of each file are read once (extractor/rawchunks.py's index, ``os.pread``), then inflated by
each implementation in turn in this one process, one thread, several rounds; the figure is the median round's
CPU seconds. zlib is Python's own (the same library HDF5's deflate filter calls); ``isal`` (ISA-L) and
``deflate`` (libdeflate) are optional here (``pip install isal deflate``; one missing is reported and skipped).
Every implementation's bytes are checked against zlib's.

Run: python tests/benchmarks/bench_inflate.py FOLDER_OR_FILE... [--rounds 5]
"""
from __future__ import annotations

import argparse
import os
import sys
import time
import zlib
from pathlib import Path

import numpy as np

if __package__ in (None, ""):  # run as a script: make `tests` importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from sensemble.extractor.rawchunks import open_raw  # noqa: E402


def inflaters() -> dict:
    found = {"zlib": lambda data, size: zlib.decompress(data)}
    try:
        from isal import isal_zlib

        found["isal (ISA-L)"] = lambda data, size: isal_zlib.decompress(data)
    except ImportError:
        print("isal not installed: skipped")
    try:
        import deflate

        found["deflate (libdeflate)"] = lambda data, size: deflate.zlib_decompress(data, size)
    except ImportError:
        print("deflate not installed: skipped")
    return found


def compressed_chunks(paths: list[Path]) -> list[tuple[bytes, int]]:
    chunks = []
    for path in paths:
        index = open_raw(path, path.name.split("_", 1)[0])
        if index is None:
            continue
        with open(path, "rb") as stream:
            for address, size in zip(index.addresses, index.sizes):
                chunks.append((os.pread(stream.fileno(), int(size), int(address)), index.chunk_bytes))
    return chunks


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("paths", nargs="+")
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    paths = [p for arg in args.paths for p in ([Path(arg)] if Path(arg).is_file() else sorted(Path(arg).rglob("*.nc")))]
    chunks = compressed_chunks([p for p in paths if "areacella" not in p.name])
    compressed = sum(len(c) for c, _ in chunks) / 1e6
    inflated = sum(n for _, n in chunks) / 1e6
    print(f"{len(chunks)} chunks, {compressed:.0f} MB compressed, {inflated:.0f} MB inflated; "
          f"load {os.getloadavg()[0]:.1f}")
    reference = None
    base = None
    for name, inflate in inflaters().items():
        rounds = []
        for _ in range(args.rounds):
            start = time.process_time()
            out = [inflate(c, n) for c, n in chunks]
            rounds.append(time.process_time() - start)
        if reference is None:
            reference = out
        assert all(bytes(a) == bytes(b) for a, b in zip(out, reference)), f"{name} differs from zlib"
        cpu = float(np.median(rounds))
        base = base or cpu
        print(f"  {name:<22}{cpu:7.2f} CPU s  {compressed / cpu:6.0f} MB/s compressed  {base / cpu:5.2f}× zlib  "
              f"(rounds {min(rounds):.2f}–{max(rounds):.2f}; load {os.getloadavg()[0]:.1f})", flush=True)


if __name__ == "__main__":
    main()
