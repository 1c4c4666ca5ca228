"""The bench's table: one row per channel × shots × method (``bench.csv``).

Columns (README, "How good is an estimator"):

* ``channel``, ``qubits``, ``shots``, ``method``, ``repeats`` (repetitions
  with an estimate), ``errors`` (fits that raised a numerical error, left
  out), ``not_converged`` (estimates kept although the estimator reported
  no convergence);
* ``hs_mse`` — mean of ‖Ĵ − J‖²_F over the repetitions, ``hs_mse_se`` its
  standard error (sample standard deviation / √repeats);
* ``hs_crb`` — the Cramér–Rao bound Tr F⁻¹ (`gatescope.bench.crb`), empty
  when the true Choi matrix is rank deficient; ``hs_mse_over_crb`` and
  ``hs_mse_over_crb_se``;
* ``hs_mse_slope`` — the least-squares slope of log hs_mse against log
  shots over the shots of this channel and method (empty with fewer than
  two); −1 for an estimator whose error falls as 1/N;
* ``infidelity_mean``, ``infidelity_median`` — 1 − F between the normalised
  Choi states of estimate and truth (`gatescope.bench.measures`);
* ``process_fidelity_true`` — F_pro of the true channel to the target;
  ``fidelity_bias`` — mean of F_pro(Ĵ) − F_pro(J), ``fidelity_bias_se``
  its standard error (empty without a target);
* ``trace_distance_mean`` — mean of ‖Ĵ − J‖₁/(2d);
* ``seconds_per_fit``, ``iterations_mean`` — the estimator's own wall time
  and iterations, averaged;
* with a bootstrap: ``bootstrap`` (B), ``interval``, ``ci_level``, and for
  every bootstrapped figure ``coverage_<figure>`` — the fraction of
  repetitions whose interval contains the true value — with
  ``coverage_<figure>_se`` = √(c(1 − c)/n). Figures fixed by the
  constraints (in every repetition a bootstrap spread and an error at
  rounding level, such as the trace of a trace-preserving estimate) are
  left out.

A state bench (README, "How good is an estimator") has the same columns
with the state's meaning — ρ̂ and ρ for Ĵ and J, ‖ρ̂ − ρ‖₁/2 for the trace
distance, the bias of the estimated ``state_fidelity`` to the target state —
and two columns named for it: ``state`` (the state SPEC) in place of
``channel`` and ``state_fidelity_true`` in place of ``process_fidelity_true``
(`STATE_COLUMN_NAMES`, `named_for`).
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from ..fileio import atomic_write_text
from ..intervals import interval as make_interval
from ..intervals import parameter_range

KEY_COLUMNS = ["channel", "qubits", "shots", "method"]
COLUMNS = KEY_COLUMNS + [
    "repeats", "errors", "not_converged", "hs_mse", "hs_mse_se", "hs_crb", "hs_mse_over_crb",
    "hs_mse_over_crb_se", "hs_mse_slope", "infidelity_mean", "infidelity_median",
    "process_fidelity_true", "fidelity_bias", "fidelity_bias_se", "trace_distance_mean",
    "seconds_per_fit", "iterations_mean"]
BOOTSTRAP_COLUMNS = ["bootstrap", "interval", "ci_level"]
#: Columns that are timings: they differ between runs that are otherwise identical.
TIMING_COLUMNS = ("seconds_per_fit",)
#: A figure whose bootstrap spread and error stay below this in every repetition is
#: fixed by the constraints (rounding of an exactly imposed value, such as the trace).
FIXED_FIGURE_TOL = 1e-9
#: Coverage columns shown on the terminal (bench.csv has every figure's).
SHOWN_COVERAGE = ("process_fidelity", "purity")
#: The same for a state bench.
SHOWN_STATE_COVERAGE = ("state_fidelity", "purity")
#: Columns named after the kind of case in a state bench.
STATE_COLUMN_NAMES = {"channel": "state", "process_fidelity_true": "state_fidelity_true"}


def column_name(name: str, kind: str = "process") -> str:
    """The name of column ``name`` (a name of `COLUMNS`) in a bench of this kind."""
    return STATE_COLUMN_NAMES.get(name, name) if kind == "state" else name


def case_column(kind: str = "process") -> str:
    """``channel``, or ``state`` for a state bench: the column naming the case."""
    return column_name("channel", kind)


def named_for(rows: list[dict], kind: str = "process") -> list[dict]:
    """The rows with their keys named as the columns of a bench of this kind."""
    return [{column_name(k, kind): v for k, v in r.items()} for r in rows]


def _mean_se(values: np.ndarray) -> tuple[float | None, float | None]:
    values = values[np.isfinite(values)]
    if values.size == 0:
        return None, None
    se = float(values.std(ddof=1) / math.sqrt(values.size)) if values.size > 1 else None
    return float(values.mean()), se


def coverage(records: list[dict], truth_figures: dict, *, interval: str, level: float,
             dim: int, kind: str = "process") -> dict:
    """name → (coverage, standard error, repetitions) for every bootstrapped figure.

    The interval of repetition r is `gatescope.intervals.interval` of its
    bootstrap values around its point figure, intersected with the figure's
    range (as `fit` reports it; ``kind`` and ``dim`` choose the range of a process or a
    state figure, `gatescope.intervals.parameter_range`); a figure whose bootstrap spread and whose
    error |point − truth| stay below `FIXED_FIGURE_TOL` in every repetition
    is fixed by the constraints and left out.
    """
    with_boot = [r for r in records if r.get("bootstrap_values") is not None]
    if not with_boot:
        return {}
    names = with_boot[0]["figure_names"]
    out = {}
    for k, name in enumerate(names):
        if name not in truth_figures:
            continue
        truth = truth_figures[name]
        hits, wobble = [], 0.0
        for r in with_boot:
            values = np.array([row[k] for row in r["bootstrap_values"]], dtype=float)
            finite = values[np.isfinite(values)]
            spread = float(np.std(finite, ddof=1)) if finite.size > 1 else 0.0
            wobble = max(wobble, spread, abs(r["point_figures"][k] - truth))
            lo, hi = make_interval(values, r["point_figures"][k], level, interval,
                                   parameter_range(name, dim, kind))
            hits.append(lo <= truth <= hi)
        if wobble <= FIXED_FIGURE_TOL:
            continue
        c = float(np.mean(hits))
        out[name] = (c, math.sqrt(c * (1.0 - c) / len(hits)), len(hits))
    return out


def summarise(records: list[dict], *, hs_crb: float | None, true_fidelity: float | None,
              truth_figures: dict, dim: int, interval: str, level: float,
              kind: str = "process") -> dict:
    """The table's numbers for the records of one channel × shots × method (keys named as
    for a process bench; ``true_fidelity`` is the state fidelity for a state bench)."""
    ok = [r for r in records if r.get("error") is None]
    row: dict = {"repeats": len(ok), "errors": len(records) - len(ok),
                 "not_converged": sum(1 for r in ok if not r["converged"])}

    def column(name):
        return np.array([r[name] for r in ok], dtype=float)

    hs = column("hs_error")
    row["hs_mse"], row["hs_mse_se"] = _mean_se(hs)
    row["hs_crb"] = hs_crb
    if hs_crb is not None and row["hs_mse"] is not None and np.isfinite(hs_crb):
        row["hs_mse_over_crb"] = row["hs_mse"] / hs_crb
        row["hs_mse_over_crb_se"] = None if row["hs_mse_se"] is None else row["hs_mse_se"] / hs_crb
    infid = column("infidelity")
    row["infidelity_mean"] = _mean_se(infid)[0]
    row["infidelity_median"] = float(np.median(infid)) if infid.size else None
    row["process_fidelity_true"] = true_fidelity
    if true_fidelity is not None:
        row["fidelity_bias"], row["fidelity_bias_se"] = _mean_se(column("fidelity_error"))
    row["trace_distance_mean"] = _mean_se(column("trace_distance"))[0]
    row["seconds_per_fit"] = _mean_se(column("seconds"))[0]
    row["iterations_mean"] = _mean_se(column("iterations"))[0]
    boots = {r.get("bootstrap", 0) for r in ok}
    if any(boots):
        row.update({"bootstrap": max(boots), "interval": interval, "ci_level": level})
        for name, (c, se, _) in coverage(ok, truth_figures, interval=interval, level=level,
                                          dim=dim, kind=kind).items():
            row[f"coverage_{name}"] = c
            row[f"coverage_{name}_se"] = se
    return row


def loglog_slope(shots, values) -> float | None:
    """Least-squares slope of log(values) against log(shots); None with fewer than two
    positive finite points."""
    x = np.log(np.asarray(shots, dtype=float))
    y = np.asarray([np.nan if v is None else v for v in values], dtype=float)
    keep = np.isfinite(y) & (y > 0)
    if np.count_nonzero(keep) < 2 or np.ptp(x[keep]) == 0:
        return None
    return float(np.polyfit(x[keep], np.log(y[keep]), 1)[0])


def add_slopes(rows: list[dict]) -> None:
    """Fill ``hs_mse_slope`` of every row from the rows of its channel and method."""
    groups: dict = {}
    for row in rows:
        groups.setdefault((row["channel"], row["qubits"], row["method"]), []).append(row)
    for group in groups.values():
        slope = loglog_slope([r["shots"] for r in group], [r["hs_mse"] for r in group])
        for r in group:
            r["hs_mse_slope"] = slope


def columns_of(rows: list[dict], kind: str = "process") -> list[str]:
    """`COLUMNS` (named for the kind, `column_name`), then the bootstrap columns and every
    coverage column present."""
    cols = [column_name(c, kind) for c in COLUMNS]
    if any("bootstrap" in r for r in rows):
        cols += BOOTSTRAP_COLUMNS
        extra = []
        for r in rows:
            for key in r:
                if key.startswith("coverage_") and key not in extra:
                    extra.append(key)
        cols += extra
    return cols


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    return str(value)


def csv_text(rows: list[dict], columns: list[str]) -> str:
    """The CSV text of the table (floats at full precision, empty for a missing value)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(columns)
    for row in rows:
        writer.writerow([_cell(row.get(c)) for c in columns])
    return buf.getvalue()


def write_csv(path, rows: list[dict], columns: list[str]) -> Path:
    path = Path(path)
    atomic_write_text(path, csv_text(rows, columns))
    return path


def _fmt(value, spec: str = ".3g") -> str:
    return "–" if value is None or (isinstance(value, float) and not math.isfinite(value)) \
        else format(value, spec)


def text_table(rows: list[dict], kind: str = "process") -> str:
    """The table for a terminal: the main columns, rounded."""
    word = case_column(kind)
    head = [word, "shots", "method", "reps", "hs_mse ± se", "hs_crb", "mse/crb",
            "slope", "infid. median", "F bias ± se", "s/fit"]
    shown = SHOWN_STATE_COVERAGE if kind == "state" else SHOWN_COVERAGE
    cov = [f"coverage_{n}" for n in shown if f"coverage_{n}" in columns_of(rows, kind)]
    head += [c.replace("_", " ") for c in cov]
    lines = [head]
    for r in rows:
        bias = "–" if r.get("fidelity_bias") is None else \
            f"{r['fidelity_bias']:+.2e} ± {_fmt(r.get('fidelity_bias_se'), '.1e')}"
        cells = [r[word], f"{r['shots']:g}", r["method"], str(r["repeats"]),
                 f"{_fmt(r['hs_mse'])} ± {_fmt(r['hs_mse_se'], '.2g')}", _fmt(r.get("hs_crb")),
                 _fmt(r.get("hs_mse_over_crb"), ".3f"), _fmt(r.get("hs_mse_slope"), ".2f"),
                 _fmt(r.get("infidelity_median")), bias, _fmt(r.get("seconds_per_fit"), ".2g")]
        cells += [_fmt(r.get(c), ".3f") for c in cov]
        lines.append(cells)
    widths = [max(len(line[k]) for line in lines) for k in range(len(head))]
    return "\n".join("  ".join(cell.ljust(w) for cell, w in zip(line, widths)).rstrip()
                     for line in lines)


__all__ = ["COLUMNS", "KEY_COLUMNS", "BOOTSTRAP_COLUMNS", "TIMING_COLUMNS", "STATE_COLUMN_NAMES",
           "summarise", "coverage", "loglog_slope", "add_slopes", "columns_of", "column_name",
           "case_column", "named_for", "csv_text", "write_csv", "text_table"]
