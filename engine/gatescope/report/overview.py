"""The morning overview of a batch output folder (`gatescope batch -o OUTDIR`).

One self-contained HTML page (`gatescope.report.html`) from
``OUTDIR/summary.csv`` (docs/file-formats.md, "Batch output folder") and the
result files beside it: the main figures plotted against a chosen condition
(or, by default, the experiment's name) with their intervals, and the table
of every experiment — its status, the condition, the main figures with
their intervals, the goodness of fit, the warnings its result file keeps,
its error when it failed — each name linked to the experiment's own report
(``OUTDIR/<name>.html``) when that exists.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import quote

from ..errors import InputError
from ..summary import MAIN_FIGURES, STATE_MAIN_FIGURES, figure_label, number_text
from . import html
from .html import esc
from .plots import Plot, figure_size, render

SUMMARY_NAME = "summary.csv"
#: The default of ``against``: the experiment's name, one category per experiment.
BY_NAME = "name"
#: Characters of a failure's message in the table (the list above it has it whole).
ERROR_SHOWN = 90
_FIXED = ("name", "path", "status", "chi2_p_value", "deviance_p_value", "seconds", "error")


@dataclass
class Entry:
    """One experiment of the batch: its row of summary.csv, and what its result says."""

    name: str
    status: str
    figures: dict                      # name -> (value, low, high), None where empty
    p_value: float
    seconds: float | None
    error: str
    conditions: dict                   # column -> value (number or text)
    warnings: list = field(default_factory=list)
    result_error: str = ""
    report: str | None = None          # relative link to its own report, when it exists


def _number(text: str):
    if text == "":
        return None
    try:
        return float(text)
    except ValueError:
        return None


def _condition(text: str):
    if text == "":
        return None
    try:
        return int(text)
    except ValueError:
        pass
    try:
        value = float(text)
    except ValueError:
        return text
    return value


def read_summary(folder) -> tuple[list[Entry], list[str], list[str]]:
    """(entries, figure names, condition columns) of ``folder/summary.csv``.

    Raises InputError when the file is missing or is not a batch table."""
    path = Path(folder) / SUMMARY_NAME
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("no summary.csv here: give a result file (.h5) or the output folder "
                         "of gatescope batch", file=str(folder)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot be read: {exc}", file=str(path)) from None
    rows = list(csv.reader(text.splitlines()))
    if not rows or rows[0][:3] != ["name", "path", "status"]:
        raise InputError("is not the table of gatescope batch (its first columns must be "
                         "name, path, status)", file=str(path), line=1)
    header = rows[0]
    figures = [c for c in header if f"{c}_ci_low" in header and c not in _FIXED]
    taken = set(_FIXED) | set(figures) | {f"{c}_ci_{s}" for c in figures for s in ("low", "high")}
    conditions = [c for c in header[header.index("error") + 1:]] if "error" in header else [
        c for c in header if c not in taken]
    entries = []
    for line, cells in enumerate(rows[1:], start=2):
        if not cells:
            continue
        if len(cells) != len(header):
            raise InputError(f"has {len(cells)} cells where the header has {len(header)}",
                             file=str(path), line=line)
        row = dict(zip(header, cells))
        figs = {f: (_number(row[f]), _number(row[f"{f}_ci_low"]), _number(row[f"{f}_ci_high"]))
                for f in figures}
        ps = [p for p in (_number(row.get("chi2_p_value", "")),
                          _number(row.get("deviance_p_value", ""))) if p is not None
              and not math.isnan(p)]
        entries.append(Entry(row["name"], row["status"], figs, max(ps) if ps else math.nan,
                             _number(row.get("seconds", "")), row.get("error", ""),
                             {c: _condition(row[c]) for c in conditions}))
    return entries, figures, conditions


def condition_column(against: str | None, conditions: list[str]) -> str:
    """The column of summary.csv that ``against`` names (a condition's name, or its column
    ``conditions.<name>``); `BY_NAME` for None or ``name``."""
    if against in (None, BY_NAME):
        return BY_NAME
    for column in (against, f"conditions.{against}"):
        if column in conditions:
            return column
    known = ", ".join(c.removeprefix("conditions.") for c in conditions) or "none"
    raise InputError(f"no condition {against!r} in this batch (conditions: {known}; or "
                     f"'{BY_NAME}')", key="--against")


def _attach_results(folder: Path, entries: list[Entry]) -> None:
    """Each done experiment's warnings (from its result file) and its report's link."""
    from ..result import load_result

    for e in entries:
        h5 = folder / f"{e.name}.h5"
        page = folder / f"{e.name}.html"
        if page.is_file():
            e.report = quote(f"{e.name}.html")
        if e.status != "done":
            continue
        try:
            e.warnings = list(load_result(h5).warnings)
        except InputError as exc:
            e.result_error = str(exc)


def main_figures(figures: list[str]) -> list[str]:
    """The figures the overview plots and tabulates, in the order of `gatescope show`."""
    order = list(dict.fromkeys(MAIN_FIGURES + STATE_MAIN_FIGURES))
    chosen = [f for f in order if f in figures]
    return chosen or figures[:4]


def _sort_key(value):
    if value is None:
        return (2, 0.0, "")
    if isinstance(value, (int, float)):
        return (0, float(value), "")
    return (1, 0.0, str(value))


def against_plot(entries: list[Entry], figures: list[str], column: str) -> Plot | None:
    """The main figures of the done experiments against ``column`` (None when no
    experiment is done)."""
    done = [e for e in entries if e.status == "done"]
    if column != BY_NAME:
        done = [e for e in done if e.conditions.get(column) is not None]
    if not done:
        return None
    values = [e.name if column == BY_NAME else e.conditions[column] for e in done]
    numeric = column != BY_NAME and all(isinstance(v, (int, float)) and
                                        not isinstance(v, bool) for v in values)
    order = sorted(range(len(done)), key=lambda i: _sort_key(values[i]))
    done = [done[i] for i in order]
    values = [values[i] for i in order]
    panels = []
    for f in figures:
        cells = [e.figures.get(f, (None, None, None)) for e in done]
        ys = [math.nan if c[0] is None else c[0] for c in cells]
        if all(math.isnan(y) for y in ys):
            continue
        panels.append({"title": figure_label(f), "values": ys,
                       "low": [math.nan if c[1] is None else c[1] for c in cells],
                       "high": [math.nan if c[2] is None else c[2] for c in cells]})
    if not panels:
        return None
    label = "experiment" if column == BY_NAME else column.removeprefix("conditions.")
    data = {"xlabel": label, "panels": panels,
            "x": [float(v) for v in values] if numeric else None,
            "categories": None if numeric else [str(v) for v in values]}
    return Plot("against", "against", data, title=f"Main figures against {label}",
                caption=("Each point one experiment, its bar the interval of its bootstrap "
                         "(none without one); failed experiments are not drawn."),
                alt=f"the main figures of every experiment against {label}")


def _figure_cell(cell) -> str:
    value, low, high = cell
    if value is None:
        return ""
    text = esc(number_text(value))
    if low is not None and high is not None:
        text += (f'<br><span class="small nowrap">[{esc(number_text(low))}, '
                 f'{esc(number_text(high))}]</span>')
    return text


def table_html(entries: list[Entry], figures: list[str], column: str) -> str:
    """Every experiment: name (linked to its report), status, condition, main figures with
    intervals, p-value, warnings, seconds, error; failures highlighted."""
    header = ["experiment", "status"] + ([] if column == BY_NAME else
                                         [esc(column.removeprefix("conditions."))])
    header += [esc(figure_label(f)) for f in figures] + ["p-value", "warnings", "seconds", "error"]
    rows, flags = [], []
    key = (lambda e: _sort_key(e.name)) if column == BY_NAME else (
        lambda e: (_sort_key(e.conditions.get(column)), e.name))
    for e in sorted(entries, key=key):
        name = (f'<a href="{esc(e.report)}">{esc(e.name)}</a>' if e.report else esc(e.name))
        cells = [name, esc(e.status)]
        if column != BY_NAME:
            value = e.conditions.get(column)
            cells.append("" if value is None else esc(value))
        cells += [_figure_cell(e.figures.get(f, (None, None, None))) for f in figures]
        cells.append("" if math.isnan(e.p_value) else esc(f"{e.p_value:.3g}"))
        codes = [w[1:w.index("]")] for w in e.warnings if w.startswith("[") and "]" in w]
        warn = " ".join(f'<span class="code">[{esc(c)}]</span>' for c in dict.fromkeys(codes))
        if e.result_error:
            warn += f'<span class="bad">result file: {esc(e.result_error)}</span>'
        error = e.error if len(e.error) <= ERROR_SHOWN else e.error[:ERROR_SHOWN - 1] + "…"
        cells += [warn, "" if e.seconds is None else f"{e.seconds:.1f}", esc(error)]
        rows.append(cells)
        flags.append(e.status != "done" or bool(e.result_error))
    first = 2 + (column != BY_NAME)
    table = html.table(header, rows, numeric=list(range(first, first + len(figures) + 1)) +
                       [first + len(figures) + 2], flags=flags, cls="dense")
    return f'<div class="scroll">{table}</div>'



@dataclass
class Batch:
    """A batch folder as the overview shows it."""

    folder: Path
    entries: list
    figures: list                      # the main figures, tabulated and plotted
    column: str                        # the column plotted against (`BY_NAME` or a condition)
    plot: Plot | None


def load_batch(folder, against: str | None = None) -> Batch:
    """Read ``folder``'s table and the warnings of its result files; the plot against
    ``against`` (a condition's name; None: the experiment's name)."""
    folder = Path(folder)
    entries, figures, conditions = read_summary(folder)
    column = condition_column(against, conditions)
    _attach_results(folder, entries)
    main = main_figures(figures)
    return Batch(folder, entries, main, column, against_plot(entries, main, column))


def overview_html(batch: Batch) -> str:
    """The overview page of a batch folder (`load_batch`)."""
    folder, entries, main, column, plot = (batch.folder, batch.entries, batch.figures,
                                           batch.column, batch.plot)
    done = sum(e.status == "done" for e in entries)
    failed = [e for e in entries if e.status != "done"]
    warned = [e for e in entries if e.warnings]
    label = "experiment name" if column == BY_NAME else column.removeprefix("conditions.")
    head = (f"<h1>Batch overview: {esc(folder.resolve().name)}</h1>"
            f"<p class=\"meta\">{len(entries)} experiments · {done} done · {len(failed)} failed "
            f"· figures against {esc(label)}</p>"
            f"<p class=\"meta\">{esc(str(folder))}</p>")
    body = ""
    if failed:
        items = "".join(f"<li><strong>{esc(e.name)}</strong>: {esc(e.error)}</li>" for e in failed)
        body += html.box("warn", f"<strong>{len(failed)} experiment"
                                 f"{'s' if len(failed) != 1 else ''} failed</strong> "
                                 f"(batch.log has the details):<ul>{items}</ul>")
    if warned:
        items = "".join(f"<li><strong>{esc(e.name)}</strong>: {len(e.warnings)} warning"
                        f"{'s' if len(e.warnings) != 1 else ''}: "
                        + "; ".join(esc(w) for w in e.warnings) + "</li>" for e in warned)
        body += html.box("note", f"<strong>{len(warned)} result"
                                 f"{'s' if len(warned) != 1 else ''} with warnings</strong>:"
                                 f"<ul>{items}</ul>")
    if not failed and not warned and entries:
        body += html.box("ok", "Every experiment was fitted, and no fit raised a warning.")
    if plot is not None:
        png = render(plot, ("png",), "page")["png"]
        body += html.section("figures", "Figures", html.figure(png, figure_size(plot),
                                                               alt=plot.alt,
                                                               caption=esc(plot.caption),
                                                               title=plot.title))
    linked = sum(e.report is not None for e in entries)
    note = (f"<p class=small>{linked} of {len(entries)} experiments link to their own report "
            "(gatescope report OUTDIR --each writes the missing ones).</p>")
    body += html.section("table", "Experiments", note + table_html(entries, main, column))
    footer = (f"Overview of {esc(str(folder / SUMMARY_NAME))} written by gatescope. One "
              "self-contained file: nothing in it loads from elsewhere.")
    nav = ([("figures", "Figures")] if plot is not None else []) + [("table", "Experiments")]
    return html.page(f"gatescope batch overview: {folder.resolve().name}", head, nav, body,
                     footer)


def report_names(folder) -> list[str]:
    """Names of the done experiments of the batch in ``folder`` (for `--each`)."""
    entries, _, _ = read_summary(folder)
    return [e.name for e in entries if e.status == "done"]


__all__ = ["Entry", "Batch", "read_summary", "condition_column", "main_figures", "against_plot",
           "load_batch", "table_html", "overview_html", "report_names", "SUMMARY_NAME", "BY_NAME"]
