"""Resident memory of this process, for the benchmarks (Linux /proc; elsewhere None).

``peak_mb`` is the high-water mark VmHWM, which belongs to the process image
(it starts afresh at exec; the getrusage maximum would still hold a forking
parent's peak). ``reset_peak`` sets it back to the current resident size, so
that a later ``peak_mb`` is the peak of what ran in between.
"""

from __future__ import annotations


def _status(key: str) -> float | None:
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return None


def peak_mb() -> float | None:
    """Peak resident memory (VmHWM) in MB, or None where /proc is missing."""
    return _status("VmHWM")


def rss_mb() -> float | None:
    """Current resident memory (VmRSS) in MB, or None."""
    return _status("VmRSS")


def reset_peak() -> bool:
    """Reset VmHWM to the current resident size (Linux ≥ 4.0); False where not possible."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False
