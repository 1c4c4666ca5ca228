"""The lock of an output folder: one batch writes there at a time.

``OUTDIR/batch.lock`` holds the pid, host, start time and command of the
batch that writes to OUTDIR, and that batch holds a POSIX record lock on
it (``fcntl.lockf``). The kernel (or the file server, through its lock
manager) drops the record lock when the process ends in any way, ``kill -9``
included, so the lock of a batch that died is stale by construction: the
next batch takes it over and says whose it was. A record lock belongs to
the process that took it, not to the worker processes it forks.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import fcntl
import os
import socket
from pathlib import Path

from ..errors import InputError

LOCK_NAME = "batch.lock"


def _describe(fields: dict) -> str:
    text = f"pid {fields.get('pid', '?')} on host {fields.get('host', '?')}"
    if fields.get("started_utc"):
        text += f", started {fields['started_utc']}"
    if fields.get("command"):
        text += f": {fields['command']}"
    return text


def _parse(text: str) -> dict:
    fields = {}
    for line in text.splitlines():
        key, sep, value = line.partition(" = ")
        if sep:
            fields[key.strip()] = value.strip()
    return fields


class OutdirLock:
    """Hold the lock of ``outdir`` (use as a context manager).

    ``taken_over`` is the description of the stale lock that was taken over
    (None when there was none).

    Raises
    ------
    InputError
        When another running batch holds the lock (the message names it).
    """

    def __init__(self, outdir, command: str | None = None):
        self.outdir = Path(outdir)
        self.path = self.outdir / LOCK_NAME
        self.command = command
        self.taken_over: str | None = None
        self._fd: int | None = None

    def acquire(self) -> None:
        self.outdir.mkdir(parents=True, exist_ok=True)
        while True:
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            try:
                fcntl.lockf(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                holder = _parse(os.pread(fd, 65536, 0).decode("utf-8", "replace"))
                os.close(fd)
                raise InputError(f"another batch is writing here ({_describe(holder)}); wait "
                                 "for it to end or stop it, then run this batch again",
                                 file=str(self.outdir)) from None
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:          # its holder removed it while we waited
                same = False
            if same:
                break
            os.close(fd)                       # locked a file that is gone: try the new one
        old = os.pread(fd, 65536, 0).decode("utf-8", "replace")
        if old.strip():
            self.taken_over = _describe(_parse(old))
        started = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        text = (f"pid = {os.getpid()}\nhost = {socket.gethostname()}\nstarted_utc = {started}\n"
                + (f"command = {' '.join(self.command.split())}\n" if self.command else ""))
        os.ftruncate(fd, 0)
        os.pwrite(fd, text.encode("utf-8"), 0)
        os.fsync(fd)
        self._fd = fd

    def release(self) -> None:
        fd, self._fd = self._fd, None
        if fd is None:
            return
        with contextlib.suppress(FileNotFoundError):
            os.unlink(self.path)
        os.close(fd)                           # closing drops the record lock

    def __enter__(self):
        self.acquire()
        return self

    def __exit__(self, *exc):
        self.release()
        return False


__all__ = ["LOCK_NAME", "OutdirLock"]
