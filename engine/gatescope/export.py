"""A result for scripts and spreadsheets: `fit --json`, `show --json` and `show --csv`.

`as_json` gives the figures, the fit's status, the goodness of fit and the
warnings as plain JSON types (the shape is in docs/file-formats.md, "JSON
summary"); a number that is not finite (the log-likelihood of an
unphysical estimate, a p-value without degrees of freedom) is ``null``,
never ``NaN``. `figures_csv` is the figures table, one row per figure.
"""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np

from .channels import dim_of_choi
from .conventions import n_qubits_of
from .intervals import parameter_range
from .result import Result
from .summary import row_numbers, status_of, title_of

#: Version of the JSON summary's shape (docs/file-formats.md, "JSON summary").
JSON_VERSION = 1
CSV_COLUMNS = ("figure", "value", "ci_low", "ci_high", "ci_level", "determined", "in_range",
               "interval_method", "lower_bound", "lower_bound_method", "touches_boundary")


def _number(x):
    """A finite float, or None."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def _in_range(name: str, value: float, dim: int) -> bool | None:
    bounds = parameter_range(name, dim)
    if bounds is None or not math.isfinite(value):
        return None
    return bool(bounds[0] - 1e-9 <= value <= bounds[1] + 1e-9)


def _rows(r: Result, rows, *, residual: bool) -> list[dict]:
    dg = r.diagnostics
    cols = r.counts_columns
    name, numbers = row_numbers(r, rows)
    out = []
    for k, number in zip(np.asarray(rows, dtype=int), numbers):
        item = {name: int(number), "prep": str(cols["prep"][k]), "meas": str(cols["meas"][k]),
                "counts": int(cols["counts"][k]), "expected": _number(dg.expected_counts[k])}
        if residual:
            item["residual"] = _number(dg.pearson_residuals[k])
        out.append(item)
    return out


def as_json(result: Result, path=None) -> dict:
    """The figures, status, goodness of fit and warnings of a result as JSON types."""
    r = result
    dim = dim_of_choi(np.asarray(r.choi))
    figures = {}
    for name, fig in r.figures.items():
        figures[name] = {
            "value": _number(fig.value),
            "ci": None if fig.ci is None else [_number(fig.ci[0]), _number(fig.ci[1])],
            "level": _number(fig.level),
            "determined": bool(fig.determined),
            "in_range": _in_range(name, fig.value, dim),
            "interval_method": fig.interval_method,
            "lower_bound": _number(fig.lower_bound),
            "lower_bound_method": fig.lower_bound_method,
            "touches_boundary": fig.touches_boundary,
        }
    gof = None
    dg = r.diagnostics
    if dg is not None:
        expected = np.asarray(dg.expected_counts, dtype=float)
        outliers = np.asarray(dg.outlier_rows, dtype=int)
        outliers = outliers[expected[outliers] > 0]
        gof = {"chi2": _number(dg.chi2), "deviance": _number(dg.deviance), "dof": int(dg.dof),
               "chi2_p_value": _number(dg.chi2_p_value),
               "deviance_p_value": _number(dg.deviance_p_value),
               "bootstrap_p_value": _number(dg.bootstrap_p_value),
               "bootstrap_resamples": int(dg.bootstrap_resamples),
               "outliers": _rows(r, outliers, residual=True),
               "nonpositive_expected": _rows(r, np.flatnonzero(expected <= 0), residual=False)}
    boot = None
    if r.bootstrap is not None:
        b = r.bootstrap
        boot = {"samples": int(b.samples), "kind": b.kind, "interval": b.interval,
                "seed": int(b.seed), "failures": int(b.failures), "errors": int(b.errors)}
    seed = r.provenance.get("seed")
    return {
        "json_version": JSON_VERSION,
        "file": None if path is None else str(path),
        "title": title_of(r),
        "qubits": n_qubits_of(dim),
        "target": r.target_name,
        "rows": int(len(r.counts_columns["counts"])),
        "counts": int(np.sum(r.counts_columns["counts"])),
        "origin": r.origin,
        "method": r.method,
        "status": status_of(r),
        "converged": bool(r.converged),
        "iterations": int(r.iterations),
        "seconds": _number(r.seconds),
        "stop_reason": r.stop_reason,
        "log_likelihood": _number(r.log_likelihood),
        "figures": figures,
        "goodness_of_fit": gof,
        "bootstrap": boot,
        "warnings": list(r.warnings),
        "seed": seed if isinstance(seed, int) else None,
        "created_utc": r.created_utc,
    }


def json_text(result: Result, path=None) -> str:
    """`as_json` as indented JSON text (strict: no NaN or Infinity)."""
    return json.dumps(as_json(result, path), indent=2, ensure_ascii=False, allow_nan=False)


def figures_csv(result: Result) -> str:
    """The figures table as CSV text: `CSV_COLUMNS`, one row per figure, empty cells for
    what a figure does not have (an interval, a range)."""
    data = as_json(result)["figures"]
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for name, fig in data.items():
        ci = fig["ci"] or [None, None]
        writer.writerow([name] + ["" if v is None else repr(v) if isinstance(v, float) else
                                  str(v).lower() if isinstance(v, bool) else v
                                  for v in (fig["value"], ci[0], ci[1], fig["level"],
                                            fig["determined"], fig["in_range"],
                                            fig["interval_method"], fig["lower_bound"],
                                            fig["lower_bound_method"],
                                            fig["touches_boundary"])])
    return buf.getvalue()


__all__ = ["JSON_VERSION", "CSV_COLUMNS", "as_json", "json_text", "figures_csv"]
