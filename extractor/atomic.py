"""Atomic output: write to a temporary name in the target's folder, then rename over the target.

A reader (or a killed batch) sees either the old file or the new one, never a half-written one.
"""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike):
    """Yield a temporary path beside `target`; on success it replaces `target` in one rename."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
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
    with atomic_path(target) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
    return Path(target)
