"""batch.log (gatescope.batch.log): one line per event, appended and readable while the
batch runs."""

from __future__ import annotations

import io
import re

import pytest
from gatescope.batch.log import BatchLog, one_line

LINE = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ (\S+) +(.*)$")


def test_each_event_is_one_line_readable_at_once(tmp_path):
    path = tmp_path / "batch.log"
    echo = io.StringIO()
    with BatchLog(path, echo=echo) as log:
        log.event("started", "2 experiment(s)")
        # readable by another reader before the log is closed
        assert path.read_text().count("\n") == 1
        log.event("failed", "bad: counts.csv, line 3: not a number\nsecond line")
    lines = path.read_text().splitlines()
    assert [LINE.match(ln).group(1) for ln in lines] == ["started", "failed"]
    assert LINE.match(lines[1]).group(2) == "bad: counts.csv, line 3: not a number | second line"
    assert echo.getvalue() == path.read_text()


def test_a_later_batch_appends(tmp_path):
    path = tmp_path / "batch.log"
    for text in ("first", "second"):
        with BatchLog(path) as log:
            log.event("note", text)
    assert [ln.split()[-1] for ln in path.read_text().splitlines()] == ["first", "second"]


def test_unknown_events_are_a_bug(tmp_path):
    with BatchLog(tmp_path / "batch.log") as log, pytest.raises(ValueError):
        log.event("exploded", "x")


def test_one_line_drops_blank_lines():
    assert one_line("a\n\n  b  \n") == "a | b"
