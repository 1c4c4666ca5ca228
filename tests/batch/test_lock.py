"""The lock of an output folder (gatescope.batch.lock): a second batch is refused while
the first runs, a lock left by a dead process is taken over and named."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys

import gatescope as gs
import pytest
from gatescope.batch.lock import LOCK_NAME, OutdirLock

HOLD = ("import sys, time\n"
        "from gatescope.batch.lock import OutdirLock\n"
        "with OutdirLock(sys.argv[1], 'gatescope batch night3 -o out'):\n"
        "    print('locked', flush=True)\n"
        "    time.sleep(120)\n")


def _holder(outdir):
    proc = subprocess.Popen([sys.executable, "-c", HOLD, str(outdir)], stdout=subprocess.PIPE,
                            text=True)
    assert proc.stdout.readline().strip() == "locked"
    return proc


def test_the_lock_file_names_its_holder_and_goes_away(tmp_path):
    with OutdirLock(tmp_path / "out", "gatescope batch a -o out") as lock:
        text = (tmp_path / "out" / LOCK_NAME).read_text()
        assert f"pid = {os.getpid()}" in text and f"host = {socket.gethostname()}" in text
        assert "command = gatescope batch a -o out" in text
        assert lock.taken_over is None
    assert not (tmp_path / "out" / LOCK_NAME).exists()


def test_a_second_batch_is_refused_while_the_first_runs(tmp_path):
    holder = _holder(tmp_path)
    try:
        with pytest.raises(gs.InputError, match="another batch is writing here") as err:
            OutdirLock(tmp_path).acquire()
        assert f"pid {holder.pid} on host {socket.gethostname()}" in str(err.value)
        assert "gatescope batch night3 -o out" in str(err.value)
        assert err.value.file == str(tmp_path)
    finally:
        holder.kill()
        holder.wait()
    # killed with SIGKILL, it could not clean up: its lock is stale and is taken over
    assert (tmp_path / LOCK_NAME).exists()
    with OutdirLock(tmp_path) as lock:
        assert lock.taken_over is not None and f"pid {holder.pid}" in lock.taken_over
        assert f"pid = {os.getpid()}" in (tmp_path / LOCK_NAME).read_text()


def test_a_lock_file_of_a_dead_process_is_taken_over(tmp_path):
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True).stdout.strip()
    (tmp_path / LOCK_NAME).write_text(f"pid = {dead}\nhost = {socket.gethostname()}\n"
                                      "started_utc = 2026-01-01T03:00:00+00:00\n")
    with OutdirLock(tmp_path) as lock:
        assert lock.taken_over.startswith(f"pid {dead} on host {socket.gethostname()}")
        assert "2026-01-01T03:00:00" in lock.taken_over


FORK_AND_HOLD = ("import os, sys, time\n"
                 "from gatescope.batch.lock import OutdirLock\n"
                 "OutdirLock(sys.argv[1]).acquire()\n"
                 "child = os.fork()\n"
                 "if child == 0:\n"
                 "    time.sleep(60)\n"
                 "    os._exit(0)\n"
                 "print(child, flush=True)\n"
                 "time.sleep(120)\n")


def test_workers_forked_by_a_dead_batch_do_not_keep_its_lock(tmp_path):
    # a record lock belongs to the process that took it, not to the processes it forks
    holder = subprocess.Popen([sys.executable, "-c", FORK_AND_HOLD, str(tmp_path)],
                              stdout=subprocess.PIPE, text=True)
    child = int(holder.stdout.readline())
    try:
        holder.kill()
        holder.wait()
        os.kill(child, 0)                    # the forked "worker" is still alive
        with OutdirLock(tmp_path) as lock:
            assert f"pid {holder.pid}" in lock.taken_over
    finally:
        os.kill(child, signal.SIGKILL)
