"""The time and memory a job will need, and the memory this machine has.

A fit at 5 or more qubits (`GUARD_FROM_QUBITS`) first states what it
expects to need and is refused when that cannot fit in the memory
available; a counts file whose reading alone would not fit is refused
before it is read. The estimates extrapolate per-unit costs measured on
1 to 4 qubits with ``benchmarks/scaling.py`` (results in
``benchmarks/results/scaling.json``; benchmarks/README.md, "Scaling"),
single-threaded, on a 2-core AMD EPYC shared with other work, 2026-12-02:

* reading: 364 bytes of memory per row (28 per byte of CSV) and 16 µs
  per row, at 3 and 4 qubits alike;
* fitting: 125 bytes per row over the data as read (207 MB for the
  1,679,616 rows of a full four-qubit set), plus the d² × d² matrices of
  the fit (`FIT_MATRICES` of them, 16 bytes per element);
* one iteration of the maximum-likelihood fit: one likelihood evaluation
  with its gradient, 0.15 µs per row (0.25 s at four qubits), and one
  projection onto the physical set, 1.0 s at four qubits (d = 16), whose
  eigendecompositions grow as d⁶ (64 times per added qubit; 42 times was
  measured from three to four qubits);
* `ITERATIONS` iterations (353 for a full four-qubit set in the speed
  benchmark, 26 to 83 at one to three qubits).

They are orders of magnitude, stated as such ("about").
"""

from __future__ import annotations

import os
from dataclasses import dataclass

from .errors import InputError

#: From this many qubits a fit states its expected time and memory before it starts.
GUARD_FROM_QUBITS = 5
#: The interpreter, the libraries and the compiled kernels.
BASELINE_BYTES = 200e6
READ_BYTES_PER_ROW = 364.0
READ_BYTES_PER_CSV_BYTE = 28.0
READ_SECONDS_PER_ROW = 16e-6
FIT_BYTES_PER_ROW = 125.0
#: d² × d² complex matrices alive at once in a fit (iterates, gradient, projection work).
FIT_MATRICES = 32
EVALUATION_SECONDS_PER_ROW = 0.15e-6
#: One projection at d = 16 (four qubits); it grows as d⁶.
PROJECTION_SECONDS_D16 = 1.0
ITERATIONS = 400
#: Use at most this fraction of the available memory.
MEMORY_FRACTION = 0.9


def available_memory() -> float | None:
    """Bytes of memory available to a new job (Linux: MemAvailable), or None if unknown."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return float(line.split()[1]) * 1024
    except OSError:
        pass
    try:
        return float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def human_bytes(n: float) -> str:
    for unit, size in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6)):
        if n >= size:
            return f"{n / size:.1f} {unit}"
    return f"{n / 1e3:.0f} kB"


def human_seconds(s: float) -> str:
    if s < 120:
        return f"{s:.0f} s"
    if s < 7200:
        return f"{s / 60:.0f} minutes"
    if s < 2 * 86400:
        return f"{s / 3600:.1f} hours"
    return f"{s / 86400:.0f} days"


def check_reading(csv_bytes: int, file: str) -> None:
    """Refuse a counts file whose reading alone would not fit in the memory available."""
    need = BASELINE_BYTES + READ_BYTES_PER_CSV_BYTE * csv_bytes
    have = available_memory()
    if have is not None and need > MEMORY_FRACTION * have:
        raise InputError(f"reading this {human_bytes(csv_bytes)} counts file needs about "
                         f"{human_bytes(need)} of memory and this machine has "
                         f"{human_bytes(have)} available: split the experiment, or use a "
                         "machine with more memory", file=file)


@dataclass(frozen=True)
class Estimate:
    """Expected wall time and peak memory of a fit (`fit_estimate`)."""

    seconds: float
    bytes: float
    n_qubits: int
    rows: int

    def text(self) -> str:
        return (f"a {self.n_qubits}-qubit fit of {self.rows:,} rows: expect about "
                f"{human_seconds(self.seconds)} and {human_bytes(self.bytes)} of memory "
                "(extrapolated from 1 to 4 qubits; orders of magnitude)")


def fit_estimate(n_qubits: int, rows: int, *, bootstrap: int = 0, workers: int = 1) -> Estimate:
    """Time and memory of a maximum-likelihood fit of experiment data already read (and
    of ``bootstrap`` refits on ``workers`` processes), from the measured costs of the
    module docstring. The data as read are counted at what reading them took (an upper
    bound of what stays)."""
    d = 2 ** n_qubits
    matrix_bytes = FIT_MATRICES * 16.0 * d ** 4
    fit_bytes = FIT_BYTES_PER_ROW * rows + matrix_bytes
    per_iteration = (EVALUATION_SECONDS_PER_ROW * rows
                     + PROJECTION_SECONDS_D16 * (d / 16.0) ** 6)
    fit_seconds = ITERATIONS * per_iteration
    seconds = fit_seconds
    memory = BASELINE_BYTES + READ_BYTES_PER_ROW * rows + fit_bytes
    if bootstrap:
        workers = max(1, min(workers, bootstrap))
        seconds += fit_seconds * bootstrap / workers
        memory += workers * (BASELINE_BYTES + fit_bytes)
    return Estimate(seconds, memory, n_qubits, rows)


def check_fit(estimate: Estimate, file: str | None = None) -> None:
    """Refuse a fit that cannot fit in the memory available (InputError naming ``file``)."""
    have = available_memory()
    if have is not None and estimate.bytes > MEMORY_FRACTION * have:
        raise InputError(f"{estimate.text()}, but this machine has {human_bytes(have)} of memory "
                         "available: it cannot run here. Fewer preparations or analysers per "
                         "qubit, or a machine with more memory, would do", file=file)


__all__ = ["GUARD_FROM_QUBITS", "Estimate", "available_memory", "check_reading", "fit_estimate",
           "check_fit", "human_bytes", "human_seconds"]
