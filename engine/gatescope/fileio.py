"""Atomic file writing: a temporary file in the same folder, then a rename.

A reader never sees a half-written file, and a failure leaves no partial
output behind (the temporary file is removed).
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


_TEMPORARY_SUFFIX = ".tmp"


@contextlib.contextmanager
def atomic_path(path):
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=_TEMPORARY_SUFFIX, dir=path.parent)
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
