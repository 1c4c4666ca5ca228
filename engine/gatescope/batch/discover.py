"""Finding the experiments of a batch, naming them, and noticing when they change.

Names. Every experiment found under a PATH is named by its folder relative
to PATH, with ``/`` between folders (``night3/delay_120``); an experiment
file directly in PATH (or given as PATH) is named by its folder's own name,
or, for a file not called ``experiment.toml``, by the file's stem. The name
depends on nothing but PATH and the folders, so it is the same in every
run; its result file is ``OUTDIR/<name>.h5`` (subfolders of OUTDIR follow
the slashes, so distinct names never share a file). Two experiments that
would get the same name (from two PATHs) are an `InputError`.

Changes. `InputScanner` hashes every file an experiment reads
(`gatescope.reader.input_files`) with SHA-256, as the result file records
them, and remembers what it saw at the previous look, so that a watching
batch can tell an experiment that is still being written from one that has
settled.
"""

from __future__ import annotations

import hashlib
import os
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputError
from ..reader import input_files

#: The file a folder search looks for.
EXPERIMENT_FILE = "experiment.toml"


@dataclass(frozen=True)
class Found:
    """An experiment of the batch: its name and the absolute path of its experiment file."""

    name: str
    path: Path


def _absolute(path: Path) -> Path:
    """An absolute path without resolving symbolic links (the path the user sees)."""
    return Path(os.path.abspath(path))


def _name_of_file(path: Path) -> str:
    path = _absolute(path)
    return path.parent.name if path.name == EXPERIMENT_FILE else path.stem


def _search(root: Path):
    """(name, path) of every experiment file below the folder ``root``, hidden folders
    (a leading dot) left out, symbolic links to folders not followed."""
    for folder, subfolders, files in os.walk(root):
        subfolders[:] = sorted(d for d in subfolders if not d.startswith("."))
        if EXPERIMENT_FILE in files:
            rel = Path(folder).relative_to(root)
            name = rel.as_posix() if rel.parts else _absolute(root).name
            yield name, Path(folder) / EXPERIMENT_FILE


def find_experiments(paths) -> list[Found]:
    """Every experiment under ``paths`` (experiment files, or folders searched
    recursively for ``experiment.toml``), sorted by name.

    Raises
    ------
    InputError
        For a PATH that does not exist, or two experiments with the same name.
    """
    found: dict[str, Found] = {}
    for given in paths:
        root = Path(given)
        if root.is_file():
            items = [(_name_of_file(root), root)]
        elif root.is_dir():
            items = _search(root)
        else:
            raise InputError("no such file or folder", file=str(given))
        for name, path in items:
            path = _absolute(path)
            other = found.get(name)
            if other is not None and other.path != path:
                raise InputError(f"two experiments get the name {name!r}: {other.path} and "
                                 f"{path}; give their common folder as one PATH instead",
                                 file=str(given))
            found[name] = Found(name, path)
    return sorted(found.values(), key=lambda f: f.name)


def result_path(outdir, name: str) -> Path:
    """The result file of the experiment ``name`` in ``outdir``."""
    *folders, last = name.split("/")
    return Path(outdir, *folders, last + ".h5")


@dataclass(frozen=True)
class Inputs:
    """What an experiment reads, as seen at one look.

    ``sha256`` maps each role of `gatescope.reader.input_files` ("experiment",
    "counts", "target") to the SHA-256 of that file, None when it is missing
    or unreadable; ``newest`` is the latest modification time among the files
    (seconds since the epoch), ``stats`` what `os.stat` said of each.
    """

    sha256: dict
    newest: float | None
    stats: tuple

    @property
    def key(self) -> tuple:
        """Equal for two looks exactly when every input file has the same content."""
        return tuple(sorted(self.sha256.items()))

    @property
    def toml_sha256(self) -> str | None:
        return self.sha256.get("experiment")

    @property
    def csv_sha256(self) -> str | None:
        return self.sha256.get("counts")


def _stat_key(st: os.stat_result) -> tuple:
    return (st.st_ino, st.st_size, st.st_mtime_ns)


class InputScanner:
    """Hashes experiments' input files, rehashing a file only when its size,
    modification time or inode changed, and remembers each experiment's files
    at the previous look (`settled`)."""

    def __init__(self):
        self._hashes: dict[Path, tuple] = {}      # file -> (stat key, sha256)
        self._previous: dict[Path, tuple] = {}    # experiment file -> stats at the last look

    def _hash(self, file: Path):
        try:
            st = os.stat(file)
        except OSError:
            return None, None
        key = _stat_key(st)
        cached = self._hashes.get(file)
        if cached is not None and cached[0] == key:
            return cached[1], st
        digest = hashlib.sha256()
        try:
            with open(file, "rb") as fh:
                for block in iter(lambda: fh.read(1 << 20), b""):
                    digest.update(block)
        except OSError:
            return None, None
        sha = digest.hexdigest()
        self._hashes[file] = (key, sha)
        return sha, st

    def inspect(self, path: Path) -> Inputs:
        """The input files of the experiment file ``path`` as they are now."""
        sha256, stats, newest = {}, [], None
        for role, file in input_files(path).items():
            sha, st = self._hash(Path(file))
            sha256[role] = sha
            stats.append((role, None if st is None else _stat_key(st)))
            if st is not None:
                newest = st.st_mtime if newest is None else max(newest, st.st_mtime)
        return Inputs(sha256, newest, tuple(stats))

    def settled(self, path: Path, inputs: Inputs, now: float, seconds: float) -> bool:
        """True when no input file of ``path`` changed within the last ``seconds``: the
        newest is older than that, or the files are the same as at the previous look
        (which does not trust the clocks of a network file system). Records this look."""
        previous = self._previous.get(path)
        self._previous[path] = inputs.stats
        return (inputs.newest is not None and now - inputs.newest >= seconds) \
            or previous == inputs.stats


__all__ = ["EXPERIMENT_FILE", "Found", "Inputs", "InputScanner", "find_experiments",
           "result_path"]
