"""Atomic output: write to a temporary name in the target's folder, then `os.replace` over the target."""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


@contextlib.contextmanager
def atomic_path(target):
    """Yield a temporary path beside `target`; on success it replaces `target` in one rename."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def write_csv(frame, target) -> Path:
    with atomic_path(target) as tmp:
        frame.to_csv(tmp, index=False, float_format="%.6g")
    return Path(target)
