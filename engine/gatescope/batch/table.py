"""The morning's table: ``OUTDIR/summary.csv``, one row per experiment.

Columns, in this order:

* ``name``, ``path`` (the experiment file, absolute), ``status`` (``done``
  or ``failed``);
* every figure of merit present in any row, in the order of
  `gatescope.merit.FIGURE_NAMES`, each followed by ``<figure>_ci_low`` and
  ``<figure>_ci_high`` (empty without a bootstrap);
* ``chi2_p_value``, ``deviance_p_value`` (goodness of fit, `gatescope.diagnostics`);
* ``seconds`` (wall time of the fit with its bootstrap; of the attempt for a
  failure), ``error`` (why it failed; empty when done);
* one column per name of the experiments' ``[conditions]``, sorted by name;
  a condition whose name is already a column above is called
  ``conditions.<name>``.

Rows are sorted by name. Numbers are written as Python writes a float
(shortest text that reads back to the same number), so the table carries
the result files' numbers exactly; a missing number is an empty cell.
The file is rewritten atomically (`gatescope.fileio`).
"""

from __future__ import annotations

import csv
import io
import math
import numbers
from dataclasses import dataclass, field

from ..fileio import atomic_write_text
from ..merit import FIGURE_NAMES

SUMMARY_NAME = "summary.csv"
P_VALUES = ("chi2_p_value", "deviance_p_value")
STATUSES = ("done", "failed")


@dataclass
class Row:
    """One experiment's line of the table."""

    name: str
    path: str
    status: str
    figures: dict = field(default_factory=dict)     # name -> (value, ci_low, ci_high)
    p_values: dict = field(default_factory=dict)
    seconds: float | None = None
    error: str = ""
    conditions: dict = field(default_factory=dict)


def row_from_result(name: str, path, result) -> Row:
    """The row of an experiment whose result is ``result`` (a `gatescope.Result`)."""
    figures = {key: (fig.value, *(fig.ci if fig.ci is not None else (None, None)))
               for key, fig in result.figures.items()}
    dg = result.diagnostics
    p_values = {} if dg is None else {"chi2_p_value": dg.chi2_p_value,
                                      "deviance_p_value": dg.deviance_p_value}
    seconds = result.provenance.get("wall_seconds")
    return Row(name, str(path), "done", figures, p_values,
               None if seconds in (None, "") else float(seconds), "", dict(result.conditions))


def row_from_failure(name: str, path, error: str, seconds: float | None,
                     conditions: dict | None = None) -> Row:
    """The row of an experiment that failed with the message ``error``."""
    return Row(name, str(path), "failed", seconds=seconds, error=error,
               conditions=dict(conditions or {}))


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, numbers.Integral) and not isinstance(value, bool):
        return str(int(value))
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        value = float(value)
        return repr(value) if math.isfinite(value) else str(value)
    return str(value)


def columns(rows) -> tuple[list[str], dict]:
    """The header of ``rows``, and the column of every condition name."""
    present = {name for row in rows for name in row.figures}
    order = {name: k for k, name in enumerate(FIGURE_NAMES)}
    figures = sorted(present, key=lambda n: (order.get(n, len(order)), n))
    header = ["name", "path", "status"]
    for name in figures:
        header += [name, f"{name}_ci_low", f"{name}_ci_high"]
    header += [*P_VALUES, "seconds", "error"]
    taken = set(header)
    names = sorted({name for row in rows for name in row.conditions})
    condition_columns = {name: (f"conditions.{name}" if name in taken else name) for name in names}
    return header + list(condition_columns.values()), condition_columns


def summary_text(rows) -> str:
    """The CSV text of ``rows`` (any order; written sorted by name)."""
    rows = sorted(rows, key=lambda r: r.name)
    header, condition_columns = columns(rows)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        cells = {"name": row.name, "path": row.path, "status": row.status,
                 "seconds": row.seconds, "error": row.error, **row.p_values}
        for name, (value, low, high) in row.figures.items():
            cells.update({name: value, f"{name}_ci_low": low, f"{name}_ci_high": high})
        for name, value in row.conditions.items():
            cells[condition_columns[name]] = value
        writer.writerow([_cell(cells.get(column)) for column in header])
    return buf.getvalue()


def write_summary(path, rows) -> None:
    """Rewrite the table at ``path`` atomically."""
    atomic_write_text(path, summary_text(rows))


__all__ = ["SUMMARY_NAME", "P_VALUES", "STATUSES", "Row", "row_from_result", "row_from_failure",
           "columns", "summary_text", "write_summary"]
