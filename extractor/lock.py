"""One extraction per output folder: an exclusive lock file holding the owner's process id.

Two extractions writing the same folder would interleave series files and tables, so the second one
refuses with a one-line message. The lock is a file ``OUT/.sensemble.lock`` created with
``O_CREAT | O_EXCL`` (atomic on local and NFSv3+ file systems) that holds the owner's pid. A lock whose
process no longer runs (a killed batch) is stale: it is taken over and the takeover is recorded, as are
the unfinished temporary files (``.*.part``) such a batch leaves, which are removed.
"""
from __future__ import annotations

import contextlib
import os
import time
from pathlib import Path

from .errors import OutputInUseError

LOCK_NAME = ".sensemble.lock"
# a lock file still empty after this long was left by a process killed between creating and writing it
_EMPTY_LOCK_GRACE_S = 10.0


def _holder(path: Path) -> int | None:
    """The pid written in a lock file; None when it is empty or unreadable (being written, or damaged)."""
    for _ in range(5):
        try:
            text = path.read_text(encoding="ascii", errors="replace").strip()
        except FileNotFoundError:
            raise
        except OSError:
            text = ""
        if text:
            try:
                return int(text.split()[0])
            except ValueError:
                return None
        time.sleep(0.05)
    return None


def _running(pid: int) -> bool:
    """Whether a process runs (a zombie, killed but not yet reaped, does not)."""
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # another user's process
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
        return stat.rpartition(")")[2].split()[0] != "Z"
    except (OSError, IndexError):
        return True


def _in_use(out_dir: Path, pid: int | None) -> OutputInUseError:
    who = f"process {pid}" if pid is not None else "another process"
    return OutputInUseError(f"output folder {out_dir} is in use by {who} — wait for it or choose another --out")


def acquire(out_dir: str | os.PathLike, notes: list[str] | None = None) -> Path:
    """Take the lock of ``out_dir`` for this process; returns the lock file's path.

    Raises
    ------
    OutputInUseError
        Another running process holds the lock.
    """
    out_dir = Path(out_dir)
    path = out_dir / LOCK_NAME
    for _ in range(5):
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            try:
                pid = _holder(path)
                age = time.time() - path.stat().st_mtime
            except FileNotFoundError:
                continue  # released meanwhile: try again
            if pid is not None and _running(pid):
                raise _in_use(out_dir, pid) from None
            if pid is None and age < _EMPTY_LOCK_GRACE_S:
                raise _in_use(out_dir, None) from None
            # stale: move it aside under a name of our own (one rename wins), check it is the one we judged
            aside = path.with_name(f"{LOCK_NAME}.stale.{os.getpid()}")
            try:
                os.replace(path, aside)
            except FileNotFoundError:
                continue
            moved = _holder(aside)
            if moved != pid:  # a fresh lock taken meanwhile: give it back
                with contextlib.suppress(OSError):
                    os.link(aside, path)
                os.unlink(aside)
                raise _in_use(out_dir, moved) from None
            os.unlink(aside)
            if notes is not None:
                notes.append(f"output folder {out_dir}: took over the lock left by process "
                             f"{pid if pid is not None else '(unknown)'}, which is no longer running")
            continue
        with os.fdopen(fd, "w", encoding="ascii") as fh:
            fh.write(f"{os.getpid()}\n")
        return path
    raise _in_use(out_dir, None)


def release(path: Path) -> None:
    """Remove the lock file if it is still ours."""
    with contextlib.suppress(FileNotFoundError, OSError):
        if _holder(path) == os.getpid():
            os.unlink(path)


@contextlib.contextmanager
def output_lock(out_dir: str | os.PathLike, notes: list[str] | None = None):
    """Hold the lock of ``out_dir`` for the block; unfinished temporary files of a dead owner are removed."""
    path = acquire(out_dir, notes)
    try:
        removed = remove_unfinished(out_dir)
        if removed and notes is not None:
            notes.append(f"output folder {out_dir}: removed {len(removed)} unfinished temporary file(s) of an "
                         "interrupted run")
        yield path
    finally:
        release(path)


def remove_unfinished(out_dir: str | os.PathLike) -> list[Path]:
    """Delete the temporary files (``.<name>.<random>.part``) an interrupted writer left; call with the lock held."""
    out_dir = Path(out_dir)
    removed = []
    for folder in (out_dir, out_dir / "series", out_dir / "figures"):
        for path in sorted(folder.glob(".*.part")):
            with contextlib.suppress(FileNotFoundError):
                path.unlink()
                removed.append(path)
    return removed
