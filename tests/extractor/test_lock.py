"""The output lock on a file system several hosts share: host, pid and start time decide, never the pid alone."""
import os
import socket
import subprocess
import sys
import time

import pytest

from sensemble.extractor import lock as lock_module
from sensemble.extractor.errors import OutputInUseError
from sensemble.extractor.lock import LOCK_NAME, Owner, acquire, output_lock, release, this_process


def write_lock(folder, owner: Owner):
    (folder / LOCK_NAME).write_text(owner.line() + "\n")


def dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_lock_names_host_pid_and_start(tmp_path):
    with output_lock(tmp_path) as path:
        owner = Owner.parse(path.read_text())
        assert owner.host == socket.gethostname() and owner.pid == os.getpid()
        assert owner.start is None or owner.start == this_process().start
    assert not path.exists()


def test_lock_of_another_host_is_never_taken_over(tmp_path):
    # a dead pid (here) on another host: the local process table says nothing about that host (common practice,
    # no source: the same rule as lock files of mail spools on shared file systems)
    write_lock(tmp_path, Owner(dead_pid(), host="login-node-elsewhere", start="boot:123"))
    with pytest.raises(OutputInUseError) as caught:
        acquire(tmp_path)
    message = str(caught.value)
    assert "\n" not in message and "on host login-node-elsewhere" in message
    assert f"delete {tmp_path / LOCK_NAME}" in message and "never taken over" in message
    assert (tmp_path / LOCK_NAME).exists()  # left as it was


def test_stale_lock_of_a_dead_process_on_this_host_is_taken_over(tmp_path):
    write_lock(tmp_path, Owner(dead_pid(), host=socket.gethostname(), start="boot:1"))
    notes = []
    path = acquire(tmp_path, notes)
    assert Owner.parse(path.read_text()) == this_process() and "took over the lock" in notes[0]
    release(path)


@pytest.mark.skipif(this_process().start is None, reason="process start times are read from /proc")
def test_reused_pid_counts_as_dead(tmp_path):
    # the pid runs (it is ours) but started at another time: the lock's owner is gone and the pid was reused
    write_lock(tmp_path, Owner(os.getpid(), host=socket.gethostname(), start="another-boot:42"))
    notes = []
    path = acquire(tmp_path, notes)
    assert f"left by process {os.getpid()}" in notes[0]
    release(path)


def test_running_owner_on_this_host_keeps_its_lock(tmp_path):
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        time.sleep(0.2)
        write_lock(tmp_path, Owner(sleeper.pid, host=socket.gethostname(),
                                   start=lock_module._start_time(sleeper.pid)))
        with pytest.raises(OutputInUseError, match=f"in use by process {sleeper.pid} — wait for it"):
            acquire(tmp_path)
    finally:
        sleeper.kill()
        sleeper.wait()
    path = acquire(tmp_path)  # now it is dead: taken over
    release(path)


def test_release_leaves_a_lock_that_is_not_ours(tmp_path):
    write_lock(tmp_path, Owner(os.getpid(), host="login-node-elsewhere", start=this_process().start))
    release(tmp_path / LOCK_NAME)
    assert (tmp_path / LOCK_NAME).exists()
