"""The ``report`` command and its Python API: what to write, checked before any work.

`make_report(path, ...)` decides by the path: a result file (``.h5``) gets
its report page (`gatescope.report.page`), by default ``<stem>.html``
beside it; a batch output folder (with ``summary.csv``) gets its overview
(`gatescope.report.overview`), by default ``OUTDIR/overview.html``. Every
output is checked first (`gatescope.fileio.check_output`: an existing file
is replaced only with ``force``, an input never) and written atomically.
Without matplotlib (the ``plot`` extra) it raises an `InputError` at once,
which the command line prints, exiting with status 2.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..fileio import atomic_write_text, check_output
from . import plots
from .overview import (SUMMARY_NAME, condition_column, load_batch, overview_html, read_summary,
                       report_names)
from .page import report_html
from .paper import check_figures, write_figures

#: The overview's file in a batch folder.
OVERVIEW_NAME = "overview.html"


@dataclass
class ReportOutcome:
    """What `make_report` wrote: the page, the figure files, the per-experiment reports."""

    page: Path
    figures: list = field(default_factory=list)
    reports: list = field(default_factory=list)
    kept: list = field(default_factory=list)


def check_available(option: str | None = None) -> None:
    """Raise InputError when matplotlib (the ``plot`` extra) is missing."""
    if not plots.available():
        raise InputError("reports need matplotlib, the plot extra: pip install "
                         "'gatescope[plot]'", key=option)


def default_report_path(result_path) -> Path:
    """``RESULT.h5`` → ``RESULT.html`` beside it (also what ``fit --report`` writes)."""
    path = Path(result_path)
    return path.with_name(path.stem + ".html") if path.suffix else path.with_name(
        path.name + ".html")


def result_report(result, out, *, source: str = "", force: bool = False,
                  inputs=(), option: str = "-o") -> Path:
    """Write the report of an in-memory result (``fit --report``, ``demo``); checks ``out``
    first."""
    check_available(option)
    check_output(out, force=force, inputs=inputs, option=option, what="report")
    atomic_write_text(out, report_html(result, source=source))
    return Path(out)


def make_report(path, output=None, *, figures=None, against: str | None = None,
                each: bool = False, force: bool = False) -> ReportOutcome:
    """Write the report of a result file, or the overview of a batch folder.

    Parameters
    ----------
    path : a result file, or the output folder of ``gatescope batch``
    output : the page (default: ``<stem>.html`` beside a result,
        ``OUTDIR/overview.html`` for a batch)
    figures : a folder for the figures as SVG, PDF and PNG, one column wide
    against : a batch's condition to plot the figures against (default the
        experiment's name); only for a batch
    each : a batch: also write the report of every done experiment that has
        none (``OUTDIR/<name>.html``; with ``force`` replace them all)
    force : replace existing files
    """
    path = Path(path)
    check_available()
    if not path.exists():
        raise InputError("no such file or folder", file=str(path))
    if path.is_dir():
        return _batch(path, output, figures=figures, against=against, each=each, force=force)
    if against is not None:
        raise InputError("plots a batch's figures against a condition: give a batch output "
                         "folder, not a result file", key="--against")
    if each:
        raise InputError("writes the reports of a batch's experiments: give a batch output "
                         "folder", key="--each")
    return _single(path, output, figures=figures, force=force)


def _single(path: Path, output, *, figures, force: bool) -> ReportOutcome:
    from ..result import load_result
    from .views import result_plots

    out = Path(output) if output is not None else default_report_path(path)
    check_output(out, force=force, inputs=(path,), option="-o", what="report")
    result = load_result(path)
    shown = result_plots(result)
    if figures is not None:
        check_figures(shown, figures, force=force)
    atomic_write_text(out, report_html(result, source=str(path)))
    written = write_figures(shown, figures, force=force) if figures is not None else []
    return ReportOutcome(out, written)


def _batch(folder: Path, output, *, figures, against, each: bool, force: bool) -> ReportOutcome:
    if not (folder / SUMMARY_NAME).is_file():
        raise InputError("is a folder without summary.csv: give a result file (.h5) or the "
                         "output folder of gatescope batch", file=str(folder))
    _, _, conditions = read_summary(folder)
    condition_column(against, conditions)                  # a wrong --against: before any work
    out = Path(output) if output is not None else folder / OVERVIEW_NAME
    check_output(out, force=force, inputs=(folder / SUMMARY_NAME,), option="-o",
                 what="overview")
    reports, kept = [], []
    if each:
        from ..result import load_result

        for name in report_names(folder):
            page = folder / f"{name}.html"
            if page.exists() and not force:
                kept.append(page)
                continue
            result = load_result(folder / f"{name}.h5")
            atomic_write_text(page, report_html(result, source=f"{name}.h5"))
            reports.append(page)
    batch = load_batch(folder, against)
    shown = [batch.plot] if batch.plot is not None else []
    if figures is not None:
        check_figures(shown, figures, force=force)
    text = overview_html(batch)
    written = write_figures(shown, figures, force=force) if figures is not None else []
    atomic_write_text(out, text)
    return ReportOutcome(out, written, reports, kept)


__all__ = ["make_report", "result_report", "check_available", "default_report_path",
           "ReportOutcome", "OVERVIEW_NAME"]
