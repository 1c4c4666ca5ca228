"""Progress of long steps (gatescope.progress): a bar on a terminal, a line per tenth
of the work elsewhere, nothing when disabled."""

from __future__ import annotations

import io

from gatescope import bootstrap as bs
from gatescope.estimators import estimate
from gatescope.model import MeasurementModel
from gatescope.progress import LINES_PER_JOB, Progress


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_lines_every_tenth_when_not_on_a_terminal():
    out = io.StringIO()
    with Progress(200, "bootstrap", "fit", stream=out) as bar:
        for _ in range(200):
            bar.update(1)
    lines = out.getvalue().splitlines()
    assert len(lines) == LINES_PER_JOB
    assert lines[0].startswith("bootstrap: 20/200 fits (10%")
    assert lines[-1].startswith("bootstrap: 200/200 fits (100%")


def test_a_jump_over_several_tenths_gives_one_line():
    out = io.StringIO()
    with Progress(10, "batch", "experiment", stream=out) as bar:
        bar.update(7)
        bar.update(3)
    assert [ln.split(" (")[0] for ln in out.getvalue().splitlines()] == [
        "batch: 7/10 experiments", "batch: 10/10 experiments"]


def test_a_bar_on_a_terminal_and_nothing_when_disabled():
    term = _Terminal()
    with Progress(5, "bootstrap", "fit", stream=term) as bar:
        for _ in range(5):
            bar.update(1)
    assert "bootstrap" in term.getvalue() and "5/5" in term.getvalue()
    quiet = io.StringIO()
    with Progress(5, "bootstrap", "fit", enabled=False, stream=quiet) as bar:
        bar.update(5)
    assert quiet.getvalue() == ""


def test_the_bootstrap_reports_progress_to_stderr(make_experiment, monkeypatch):
    exp, _ = make_experiment("CZ+depolarizing:0.2", shots=300, seed=3)
    model = MeasurementModel(exp)
    point = estimate(model, "pls")
    err = io.StringIO()
    monkeypatch.setattr("sys.stderr", err)
    bs.run_bootstrap(model, point, exp.target, samples=10, seed=1, workers=1, progress=True)
    assert err.getvalue().count("bootstrap: ") == LINES_PER_JOB
    err.truncate(0)
    bs.run_bootstrap(model, point, exp.target, samples=10, seed=1, workers=1, progress=False)
    assert err.getvalue() == ""
