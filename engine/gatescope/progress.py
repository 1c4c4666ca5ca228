"""Progress of long steps on stderr: a bar on a terminal, plain lines elsewhere.

On a terminal a tqdm bar is drawn; when stderr is a file or a pipe (a job
scheduler's log, ``2> log``) one line is written every tenth of the work,
so a log shows that the job is alive without filling up with bar redraws.
"""

from __future__ import annotations

import sys
import time

from tqdm import tqdm


class _Bar(tqdm):
    """tqdm without its monitor thread, which would outlive the bar and make a
    later fork unsafe (`gatescope.parallel.fork_is_safe`)."""

    monitor_interval = 0


#: Lines written over a whole job when stderr is not a terminal.
LINES_PER_JOB = 10


class Progress:
    """Counts finished units of a job of ``total`` units and tells the user.

    Parameters
    ----------
    total : int
    label : str
        What is being done ("bootstrap", "batch").
    unit : str
        What one unit is ("fit", "experiment").
    enabled : bool
        False: say nothing.
    stream : file, optional
        Where to write (default: sys.stderr at the time of the call).
    """

    def __init__(self, total: int, label: str, unit: str = "it", *, enabled: bool = True,
                 stream=None):
        self.total = int(total)
        self.label = label
        self.unit = unit
        self.done = 0
        self.stream = sys.stderr if stream is None else stream
        self.enabled = bool(enabled) and self.total > 0
        self.terminal = self.enabled and hasattr(self.stream, "isatty") and self.stream.isatty()
        self._bar = None
        self._lines = 0
        self._start = time.monotonic()
        if self.terminal:
            self._bar = _Bar(total=self.total, desc=label, unit=unit, file=self.stream,
                             dynamic_ncols=True)

    def update(self, n: int = 1, postfix: str | None = None) -> None:
        """``n`` more units are done; ``postfix`` is shown beside the bar."""
        self.done += n
        if not self.enabled:
            return
        if self._bar is not None:
            if postfix is not None:
                self._bar.set_postfix_str(postfix, refresh=False)
            self._bar.update(n)
            return
        reached = min(self.done, self.total) * LINES_PER_JOB // self.total
        if reached > self._lines:               # one line per tenth (several at once: one)
            self._lines = reached
            elapsed = time.monotonic() - self._start
            extra = f", {postfix}" if postfix else ""
            self.stream.write(f"{self.label}: {self.done}/{self.total} {self.unit}s "
                              f"({100 * self.done // self.total}%, {elapsed:.0f} s{extra})\n")
            self.stream.flush()

    def close(self) -> None:
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False
