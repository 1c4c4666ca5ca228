"""Where a result came from: versions, command line, seed, times, host.

The attributes of ``/provenance`` in the result file (docs/file-formats.md):
plain strings and numbers only, so any HDF5 tool can read them.
"""

from __future__ import annotations

import datetime as _dt
import platform
import socket
import sys
from functools import lru_cache
from importlib import metadata

#: The core dependencies whose versions every result records.
DEPENDENCIES = ("numpy", "scipy", "numba", "h5py", "tqdm")


@lru_cache(maxsize=None)
def version(dist: str) -> str:
    """Installed version of a distribution, or "not installed".

    Cached: reading a distribution's metadata takes milliseconds (a file is
    parsed each time), and a batch or a bench records it for every result.
    """
    try:
        return metadata.version(dist)
    except metadata.PackageNotFoundError:
        return "not installed"


@lru_cache(maxsize=1)
def _platform() -> str:
    return platform.platform()


def provenance(*, seed=None, command_line=None, started: float, wall: float) -> dict:
    """The provenance attributes of a result.

    Parameters
    ----------
    seed : int, optional
        The seed the result's random numbers came from (bootstrap, simulation);
        absent from the attributes when there is none.
    command_line : str, optional
        The command that made the result (default: this process's argv).
    started : float
        Start time, seconds since the epoch.
    wall : float
        Wall-clock seconds the job took.
    """
    utc = _dt.timezone.utc
    prov = {
        "gatescope_version": version("gatescope"),
        "command_line": " ".join(sys.argv) if command_line is None else command_line,
        "start_utc": _dt.datetime.fromtimestamp(started, utc).isoformat(),
        "end_utc": _dt.datetime.fromtimestamp(started + wall, utc).isoformat(),
        "wall_seconds": float(wall),
        "host": socket.gethostname(),
        "platform": _platform(),
        "python": sys.version.split()[0],
    }
    if seed is not None:                 # no seed (no random numbers): no entry
        prov["seed"] = int(seed)
    for dep in DEPENDENCIES:
        prov[f"version_{dep}"] = version(dep)
    return prov
