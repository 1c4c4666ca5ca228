"""Atomic file writing: a temporary file in the same folder, then a rename.

A reader never sees a half-written file, and a failure leaves no partial
output behind (the temporary file is removed). A process killed while it
writes (SIGKILL, a power cut) cannot remove its temporary file; its name
records the host and the process, ``.NAME.HOST.PID.XXXXXXXX.tmp``, and the
next write to the same path removes those of processes of this host that
are no longer running.

`check_output` checks an output path before any computation: a result that
would replace an existing file (unless asked to), overwrite an input, or
land where no file can be written is refused at once, not after the work.
"""

from __future__ import annotations

import contextlib
import os
import re
import socket
import stat
import tempfile
from pathlib import Path

from .errors import InputError

_TEMPORARY_SUFFIX = ".tmp"


def _host() -> str:
    return re.sub(r"[^A-Za-z0-9-]", "-", socket.gethostname()) or "host"


def _temporary_pattern(path: Path) -> re.Pattern:
    return re.compile(re.escape(f".{path.name}.") + r"(?P<host>[A-Za-z0-9-]+)\.(?P<pid>\d+)\.[^.]+"
                      + re.escape(_TEMPORARY_SUFFIX) + "$")


def _running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:              # someone else's process: alive
        return True
    return True


def remove_stale_temporaries(path) -> list[Path]:
    """Remove the temporary files that killed writes to ``path`` left behind; returns them.

    Only files of this host whose writing process is no longer running are
    removed (a write in progress elsewhere keeps its file).
    """
    path = Path(path)
    pattern = _temporary_pattern(path)
    removed = []
    try:
        entries = list(os.scandir(path.parent))
    except OSError:
        return removed
    host = _host()
    for entry in entries:
        m = pattern.match(entry.name)
        if m and m.group("host") == host and int(m.group("pid")) != os.getpid() \
                and not _running(int(m.group("pid"))):
            with contextlib.suppress(FileNotFoundError):
                os.unlink(entry.path)
                removed.append(Path(entry.path))
    return removed


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.{_host()}.{os.getpid()}.",
                               suffix=_TEMPORARY_SUFFIX, dir=path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)          # mkstemp makes 0600; results are ordinary files
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def atomic_write_text(path, text: str) -> None:
    """Write UTF-8 text to ``path`` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def leftover_temporaries(folder, names) -> list[Path]:
    """Temporary files that `atomic_path` left below ``folder`` (in any subfolder) when
    its process was killed before it could remove them, for targets whose names
    match one of the glob patterns ``names`` (``["*.h5", "summary.csv"]``)."""
    found = []
    for pattern in names:
        found += Path(folder).rglob(f".{pattern}.*{_TEMPORARY_SUFFIX}")
    return sorted(set(found))


def _same_file(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return a.resolve() == b.resolve()


def check_output(path, *, force: bool = False, inputs=(), option: str = "-o",
                 what: str = "result") -> Path:
    """Check, before any computation, that ``path`` can receive a new file.

    Refused (InputError naming the file, and ``option``): an existing file
    unless ``force``; any of ``inputs`` (the data the output is made from),
    even with ``force``; a folder; a path under something that is not a
    folder; a folder this process cannot write in.
    """
    path = Path(path)
    shown = str(path)
    if "\x00" in shown:
        raise InputError("the file name contains a NUL byte", key=option)
    for source in inputs:
        if source is not None and Path(source).exists() and path.exists() \
                and _same_file(path, Path(source)):
            raise InputError(f"is an input of this {what} ({Path(source).name}): writing there "
                             "would destroy it; choose another file name", file=shown, key=option)
    try:
        info = os.stat(path)
    except (FileNotFoundError, NotADirectoryError):   # the second: a file on the way
        info = None
    except OSError as exc:
        raise InputError(f"cannot be written: {exc.strerror}", file=shown, key=option) from None
    if info is not None:
        if stat.S_ISDIR(info.st_mode):
            raise InputError(f"is a folder; give the {what} file's name (for example "
                             f"{path / 'result.h5'})", file=shown, key=option)
        if not force:
            raise InputError(f"exists; gatescope does not replace a {what} file unless asked: add "
                             "--force to replace it, or write elsewhere with -o", file=shown)
        if not stat.S_ISREG(info.st_mode):
            raise InputError("is not a regular file", file=shown, key=option)
    folder = path.parent
    while not folder.exists():                 # the folders that will be created
        folder = folder.parent
    if not folder.is_dir():
        raise InputError(f"cannot be created: {folder} is a file, not a folder", file=shown,
                         key=option)
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"cannot be written: no permission to write in {folder}", file=shown,
                         key=option)
    return path


__all__ = ["atomic_path", "atomic_write_text", "leftover_temporaries", "remove_stale_temporaries",
           "check_output"]
