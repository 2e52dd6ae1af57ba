"""One extraction per output folder, also on a file system that several machines share.

Two extractions writing the same folder would interleave series files and tables, so the second one refuses with a
one-line message. The lock is a file ``OUT/.sensemble.lock`` created with ``O_CREAT | O_EXCL`` (atomic on local and
NFSv3+ file systems). It holds one line naming its owner: host name, process id, and the process's start time
(with the machine's boot id), so that a process id the system has since given to another process is not taken for
the owner.

A lock is stale, and is taken over with a note, only when its owner ran on this host and is gone: no process with
that id, or one that started at another time (the id was reused). A lock written on another host is never taken
over, whatever the local process table says: the message names the host and says how to remove the lock once no
extraction runs there. Unfinished temporary files (``.*.part``) of a dead owner are removed.
"""
from __future__ import annotations

import contextlib
import json
import os
import socket
import time
from dataclasses import dataclass
from pathlib import Path

from sensemble.contract.atomic import PART_SUFFIX

from .errors import OutputInUseError

LOCK_NAME = ".sensemble.lock"
# a lock file still empty after this long was left by a process killed between creating and writing it
_EMPTY_LOCK_GRACE_S = 10.0


@dataclass(frozen=True)
class Owner:
    """Who holds a lock: host name, process id and the process's start (None where the system does not say).

    A lock written by an older version holds a process id only (``host`` None): it is judged on this host, as
    those versions did.
    """

    pid: int
    host: str | None = None
    start: str | None = None

    def line(self) -> str:
        return json.dumps({"host": self.host, "pid": self.pid, "start": self.start}, sort_keys=True)

    @classmethod
    def parse(cls, text: str) -> "Owner | None":
        text = text.strip()
        if not text:
            return None
        try:
            record = json.loads(text)
        except ValueError:
            record = None
        if isinstance(record, dict):
            try:
                return cls(int(record["pid"]), record.get("host"), record.get("start"))
            except (KeyError, TypeError, ValueError):
                return None
        try:
            return cls(int(text.split()[0]))  # the older format: the pid alone
        except ValueError:
            return None


def _host() -> str:
    return socket.gethostname()


def _start_time(pid: int) -> str | None:
    """When a process started: clock ticks since boot from /proc, with the boot id; None where unknown."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()
        boot = Path("/proc/sys/kernel/random/boot_id").read_text().strip()
        return f"{boot}:{fields[19]}"  # field 22 of proc(5), counted from the state (field 3)
    except (OSError, IndexError):
        return None


def this_process() -> Owner:
    """The owner record of the running process."""
    return Owner(os.getpid(), _host(), _start_time(os.getpid()))


def _running(owner: Owner) -> bool:
    """Whether the owner (a process of this host) still runs: same id, same start, not a zombie."""
    pid = owner.pid
    if pid == os.getpid():
        return owner.start is None or owner.start == _start_time(pid)
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass  # another user's process: it exists
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()[0]
    except (OSError, IndexError):
        return True  # no /proc: the process exists, its start cannot be compared
    if state == "Z":
        return False
    now = _start_time(pid)
    return owner.start is None or now is None or owner.start == now


def _read_owner(path: Path) -> Owner | None:
    """The owner written in a lock file; None when it is empty or unreadable (being written, or damaged)."""
    for _ in range(5):
        try:
            text = path.read_text(encoding="utf-8", errors="replace")
        except FileNotFoundError:
            raise
        except OSError:
            text = ""
        if text.strip():
            return Owner.parse(text)
        time.sleep(0.05)
    return None


def _in_use(out_dir: Path, owner: Owner | None) -> OutputInUseError:
    lock = out_dir / LOCK_NAME
    if owner is not None and owner.host is not None and owner.host != _host():
        return OutputInUseError(
            f"output folder {out_dir} is in use by process {owner.pid} on host {owner.host} (this is {_host()}); "
            "a lock from another host is never taken over",
            hint=f"wait for it, or if no extraction runs on {owner.host} any more delete {lock}; or choose another "
                 "--out")
    who = f"process {owner.pid}" if owner is not None else "another process"
    return OutputInUseError(f"output folder {out_dir} is in use by {who}", hint="wait for it or choose another --out")


def _stale(owner: Owner | None, age: float) -> bool:
    if owner is None:
        return age >= _EMPTY_LOCK_GRACE_S
    if owner.host is not None and owner.host != _host():
        return False
    return not _running(owner)


def acquire(out_dir: str | os.PathLike, notes: list[str] | None = None) -> Path:
    """Take the lock of ``out_dir`` for this process; returns the lock file's path.

    Raises
    ------
    OutputInUseError
        Another running process holds the lock, or a process on another host does (or did).
    """
    out_dir = Path(out_dir)
    path = out_dir / LOCK_NAME
    me = this_process()
    for _ in range(5):
        try:
            fd = os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            try:
                owner = _read_owner(path)
                age = time.time() - path.stat().st_mtime
            except FileNotFoundError:
                continue  # released meanwhile: try again
            if not _stale(owner, age):
                raise _in_use(out_dir, owner) from None
            # stale: move it aside under a name of our own (one rename wins), check it is the one we judged
            aside = path.with_name(f"{LOCK_NAME}.stale.{me.pid}")
            try:
                os.replace(path, aside)
            except FileNotFoundError:
                continue
            moved = _read_owner(aside)
            if moved != owner:  # a fresh lock taken meanwhile: give it back
                with contextlib.suppress(OSError):
                    os.link(aside, path)
                os.unlink(aside)
                raise _in_use(out_dir, moved) from None
            os.unlink(aside)
            if notes is not None:
                notes.append(f"output folder {out_dir}: took over the lock left by process "
                             f"{owner.pid if owner is not None else '(unknown)'}, which is no longer running")
            continue
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(me.line() + "\n")
        return path
    raise _in_use(out_dir, None)


def release(path: Path) -> None:
    """Remove the lock file if it is still ours."""
    with contextlib.suppress(FileNotFoundError, OSError):
        if _read_owner(path) == this_process():
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
        for path in sorted(folder.glob(f".*{PART_SUFFIX}")):
            with contextlib.suppress(FileNotFoundError):
                path.unlink()
                removed.append(path)
    return removed
