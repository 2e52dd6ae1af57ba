"""Atomic output: write to a temporary name in the target's folder, then rename it over the target.

A reader (or a killed batch) sees either the old file or the new one, never a half-written one. The temporary
name is ``.<target name>.<random>.part``, so a later run holding the output lock can find and remove what an
interrupted writer left.
"""
from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

#: suffix of the temporary files; ``.*`` + this is what an interrupted writer leaves behind
PART_SUFFIX = ".part"


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``target``; when the block ends without error it replaces ``target``.

    The file is flushed to disk (``fsync``) before the rename; on error the temporary file is removed and
    ``target`` is left as it was.

    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "table.csv"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("a,b\\n")
    >>> target.read_text(), sorted(p.name for p in target.parent.iterdir())
    ('a,b\\n', ['table.csv'])
    """
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=PART_SUFFIX, dir=target.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def write_text(target: str | os.PathLike, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``target`` atomically."""
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(target)


def write_csv(frame, target: str | os.PathLike, float_format: str = "%.6g") -> Path:
    """Write a pandas DataFrame to ``target`` as CSV (no index) atomically."""
    with atomic_path(target) as tmp:
        frame.to_csv(tmp, index=False, float_format=float_format)
    return Path(target)


@contextlib.contextmanager
def local_writes() -> Iterator[None]:
    """xarray writes in-memory data inside the block with a lock of this process only.

    Under a distributed client xarray guards every NetCDF write with a `distributed.Lock`, a round trip to the
    scheduler each time: writing a batch's three series files took 0.92 s under a local cluster against 0.21 s
    without one (measured on the scaling benchmark's classic archive). Outputs are in memory when written, so no
    scheduler is needed; dask's synchronous scheduler makes xarray take its threaded lock.
    """
    import dask

    with dask.config.set(scheduler="synchronous"):
        yield
