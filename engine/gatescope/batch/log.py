"""``OUTDIR/batch.log``: one line per event, appended and flushed as it happens,
so that ``tail -f`` shows a running batch and a batch killed at any moment
leaves every line it wrote.

A line is ``<UTC time> <event> <text>``, the event one of

* ``started`` / ``finished`` / ``stopped`` — the batch (its settings, what it
  found; how it ended and how to resume);
* ``done`` — an experiment fitted: its main figure (process fidelity, or
  purity without a target) with its interval, and the seconds it took;
* ``failed`` — an experiment that could not be fitted, with the message;
* ``skipped`` — a result that matches the input and settings already exists;
* ``redo`` — a result exists but its input or settings changed;
* ``waiting`` — an experiment still being written (``--watch``);
* ``warning`` — a warning of a fit (a poor fit, an undetermined part);
* ``note`` — anything else worth knowing (a stale lock taken over, temporary
  files of an interrupted batch removed, a runner that failed).

Messages are kept on one line (line breaks become " | ").
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

LOG_NAME = "batch.log"
EVENTS = ("started", "finished", "stopped", "done", "failed", "skipped", "redo", "waiting",
          "warning", "note")


def one_line(text: str) -> str:
    """``text`` with its line breaks turned into " | "."""
    return " | ".join(part.strip() for part in str(text).splitlines() if part.strip())


class BatchLog:
    """Appends event lines to ``path``; ``echo`` (a stream) gets a copy of each."""

    def __init__(self, path, echo=None):
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._fh = open(self.path, "a", encoding="utf-8")
        self.echo = echo

    def event(self, event: str, text: str) -> str:
        """Write one line; returns it."""
        if event not in EVENTS:
            raise ValueError(f"unknown log event {event!r}")
        stamp = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        line = f"{stamp.replace('+00:00', 'Z')} {event:<8} {one_line(text)}\n"
        self._fh.write(line)
        self._fh.flush()
        if self.echo is not None:
            self.echo.write(line)
            self.echo.flush()
        return line

    def close(self) -> None:
        self._fh.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


__all__ = ["LOG_NAME", "EVENTS", "BatchLog", "one_line"]
