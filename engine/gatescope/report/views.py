"""What the figures of a report show, as plain data (`gatescope.report.plots.Plot`).

Built from a `gatescope.Result` with NumPy alone; `gatescope.report.plots`
draws them. Conventions (README, "Conventions"):

* chi and the Pauli transfer matrix are indexed by the Pauli strings in
  lexicographic order I < X < Y < Z, qubit 1 the leftmost letter and most
  significant; the maps put row 0 at the top;
* the density matrix is written in the computational basis with H = |0>
  and V = |1>, qubit 1 the leftmost letter (``HV`` = |0>⊗|1>);
* in a magnitude–phase map a whole cell is the map's *scale*: for the
  estimate and the target one scale, the larger of their largest |entry|,
  so that they compare; the difference (estimate − target) has its own,
  its largest |entry|. Every panel says its scale.

The data view pools the rows of one (preparation, analyser) setting: its
Pearson residual is (Σn − Σν)/√Σν over the setting's rows (the residual of
the setting's total counts; for one row per setting, the row's own).
"""

from __future__ import annotations

import math
import re

import numpy as np

from ..channels import choi_from_unitary, choi_to_chi, choi_to_ptm
from ..conventions import n_qubits_of, pauli_labels
from ..diagnostics import OUTLIER_RESIDUAL
from ..summary import MAIN_FIGURES, METHOD_WORDS, STATE_MAIN_FIGURES, figure_label
from .plots import Plot

#: Single-qubit labels in the order the data view lists them; others follow in the order
#: of their first appearance in the counts file.
PART_ORDER = ("H", "V", "D", "A", "R", "L")
_SEPARATORS = re.compile(r"[\s,]+")


def basis_labels(n_qubits: int) -> list[str]:
    """Computational-basis labels with H = |0>, V = |1>, qubit 1 first: HH, HV, VH, VV."""
    return ["".join("HV"[int(b)] for b in format(k, f"0{n_qubits}b"))
            for k in range(2 ** n_qubits)]


def target_matrices(r) -> dict | None:
    """The target's matrices in the estimate's terms: ``chi`` and ``ptm`` of the target
    unitary (a process), or ``rho`` of the target state; None without a target."""
    if r.target is None:
        return None
    target = np.asarray(r.target, dtype=complex)
    if r.kind == "state":
        rho = np.outer(target, target.conj()) if target.ndim == 1 else target
        return {"rho": rho}
    choi = choi_from_unitary(target)
    return {"chi": choi_to_chi(choi), "ptm": choi_to_ptm(choi)}


def _scale(*matrices) -> float:
    top = max(float(np.max(np.abs(m))) for m in matrices)
    return top if top > 0 and np.isfinite(top) else 1.0


def _num(x: float) -> str:
    return f"{x:.3g}"


#: Maps with more rows than this (three qubits and more) are drawn larger: the estimate
#: beside the target in one figure, their difference in a second one (``<name>_difference``).
LARGE_MAP = 16


def map_plots(name: str, symbol: str, estimate, target, target_name: str, labels,
              axis: str, block: int | None) -> list[Plot]:
    """Magnitude–phase maps of ``estimate`` beside ``target`` and their difference (or the
    estimate alone without a target): one figure, or two for a large map."""
    estimate = np.asarray(estimate, dtype=complex)
    data = {"labels": list(labels), "axis": axis, "block": block}
    if target is None:
        scale = _scale(estimate)
        panels = [{"title": f"{symbol}, estimate\nfull cell: |entry| = {_num(scale)}",
                   "matrix": estimate, "scale": scale}]
        return [Plot(name, "magnitude_phase", {"panels": panels, **data})]
    target = np.asarray(target, dtype=complex)
    scale = _scale(estimate, target)
    diff = estimate - target
    dscale = _scale(diff)
    panels = [
        {"title": f"{symbol}, estimate\nfull cell: |entry| = {_num(scale)}",
         "matrix": estimate, "scale": scale},
        {"title": f"{symbol}, target {target_name}\nfull cell: |entry| = {_num(scale)}",
         "matrix": target, "scale": scale},
        {"title": f"{symbol}, estimate − target\nfull cell: |entry| = {_num(dscale)}",
         "matrix": diff, "scale": dscale},
    ]
    if len(labels) <= LARGE_MAP:
        return [Plot(name, "magnitude_phase", {"panels": panels, **data})]
    return [Plot(name, "magnitude_phase", {"panels": panels[:2], **data}),
            Plot(f"{name}_difference", "magnitude_phase", {"panels": panels[2:], **data})]


def _alt(what: str, targets) -> str:
    if targets is None:
        return f"magnitude–phase map of {what}"
    return f"magnitude–phase maps of {what} beside the target, and of their difference"


def matrix_plots(r) -> list[Plot]:
    """The magnitude–phase maps of a result: chi and the Pauli transfer matrix of a process,
    the density matrix of a state, each beside its target's and with the difference."""
    targets = target_matrices(r)
    name = r.target_name or "target"
    if r.kind == "state":
        n = n_qubits_of(np.asarray(r.rho).shape[0])
        shown = map_plots("rho", "ρ", r.rho, None if targets is None else targets["rho"], name,
                          basis_labels(n), "basis states (H = |0>, V = |1>, qubit 1 first)",
                          2 ** (n - 1) if n > 1 else None)
        return _described(shown, "", "The density matrix ρ in the computational basis, "
                          "H = |0>, V = |1>, qubit 1 the first letter (HV = |0>⊗|1>); rows top to "
                          "bottom, columns left to right.", "the estimated density matrix",
                          targets)
    n = n_qubits_of(r.dim)
    labels = pauli_labels(n)
    block = 4 ** (n - 1) if n > 1 else None
    axis = "Pauli strings (I < X < Y < Z, qubit 1 first)"
    chi = map_plots("chi", "χ", r.chi, None if targets is None else targets["chi"], name,
                    labels, axis, block)
    ptm = map_plots("ptm", "R", r.ptm, None if targets is None else targets["ptm"], name,
                    labels, axis, block)
    return (_described(chi, "Chi matrix", "χ of Φ(ρ) = Σ χ_mn P_m ρ P_n over the Pauli strings "
                       "P in lexicographic order I < X < Y < Z, qubit 1 the first letter; row m, "
                       "column n.", "the estimated chi matrix", targets)
            + _described(ptm, "Pauli transfer matrix", "R_ij = Tr(P_i Φ(P_j))/d, real for every "
                         "physical process: blue is positive, red-brown negative. Row i (output "
                         "Pauli string), column j (input).",
                         "the estimated Pauli transfer matrix", targets))


def _described(shown: list[Plot], title: str, caption: str, what: str, targets) -> list[Plot]:
    """Title, caption and description of a map (and of its separate difference)."""
    shown[0].title, shown[0].caption, shown[0].alt = title, caption, _alt(what, targets)
    if len(shown) > 1:
        shown[0].alt = f"magnitude–phase maps of {what} beside the target"
        diff = shown[1]
        diff.title = f"{title or 'Density matrix'}: estimate − target"
        diff.caption = "The difference of the maps above, on its own scale."
        diff.alt = f"magnitude–phase map of {what} minus the target"
    return shown


# --------------------------------------------------------------------------
# Data view
# --------------------------------------------------------------------------

def label_parts(label: str, n_qubits: int) -> list[str]:
    """The per-qubit parts of a multi-qubit label, by the spelling rule of the README
    ("Conventions"): separated by spaces or commas, or one character each; a label that
    fits neither stays whole."""
    text = str(label).strip()
    if _SEPARATORS.search(text):
        return [p for p in _SEPARATORS.split(text) if p]
    if n_qubits > 1 and len(text) == n_qubits:
        return list(text)
    return [text]


def _join(parts) -> str:
    parts = list(parts)
    return "".join(parts) if all(len(p) == 1 for p in parts) else " ".join(parts)


def _part_rank(labels_parts) -> dict:
    rank = {p: k for k, p in enumerate(PART_ORDER)}
    for parts in labels_parts:
        for p in parts:
            rank.setdefault(p, len(rank))
    return rank


def _ordered_keys(parts_of: dict) -> list:
    """Keys (tuples of parts) sorted qubit 1 first, each part in `PART_ORDER`."""
    rank = _part_rank(parts_of.values())
    return sorted(parts_of, key=lambda key: tuple(rank[p] for p in parts_of[key]))


def _blocks(keys, parts_of) -> list[int]:
    """Indices where the first qubit's part changes (a faint line there)."""
    firsts = [parts_of[k][0] if parts_of[k] else "" for k in keys]
    return [i for i in range(1, len(firsts)) if firsts[i] != firsts[i - 1]]


def residual_grid(r) -> dict:
    """The pooled Pearson residual of every (row setting, column setting) cell.

    A process: rows are the preparations, columns the analyser projectors.
    A state: the analyser label split between qubits 1…⌈n/2⌉ (rows) and the
    others (columns). Returns the `plots` data of a ``residual_map`` plus
    ``cells`` (the row indices of the data in every cell)."""
    cols = r.counts_columns
    n = n_qubits_of(r.dim)
    counts = np.asarray(cols["counts"], dtype=float)
    expected = np.asarray(r.diagnostics.expected_counts, dtype=float)
    pearson = np.asarray(r.diagnostics.pearson_residuals, dtype=float)
    meas = [str(x) for x in cols["meas"]]
    if r.kind == "state":
        split = max(1, math.ceil(n / 2)) if n > 1 else 0
        parts = [label_parts(m, n) for m in meas]
        if any(len(p) != n for p in parts):           # an unsplittable label: one row per label
            split, parts = 0, [[m] for m in meas]
        row_parts = [tuple(p[:split]) for p in parts]
        col_parts = [tuple(p[split:]) for p in parts]
        row_title = (f"analyser of qubit{'s' if split > 1 else ''} 1" +
                     (f"–{split}" if split > 1 else "")) if split else ""
        col_title = (f"analyser of qubit{'s' if n - split > 1 else ''} {split + 1}" +
                     (f"–{n}" if n - split > 1 else "")) if split else "analyser"
    else:
        prep = [str(x) for x in cols["prep"]]
        pidx = np.asarray(cols["prep_index"])
        midx = np.asarray(cols["meas_index"])
        first_prep = {int(i): label for i, label in zip(pidx, prep)}
        first_meas = {int(i): label for i, label in zip(midx, meas)}
        row_parts = [tuple(label_parts(first_prep[int(i)], n)) for i in pidx]
        col_parts = [tuple(label_parts(first_meas[int(i)], n)) for i in midx]
        row_title, col_title = "preparation", "analyser projector"
    row_of = {k: k for k in row_parts}
    col_of = {k: k for k in col_parts}
    row_keys = _ordered_keys({k: list(k) for k in row_of})
    col_keys = _ordered_keys({k: list(k) for k in col_of})
    ri = {k: i for i, k in enumerate(row_keys)}
    ci = {k: i for i, k in enumerate(col_keys)}
    shape = (len(row_keys), len(col_keys))
    a = np.array([ri[k] for k in row_parts], dtype=np.int64)
    b = np.array([ci[k] for k in col_parts], dtype=np.int64)
    flat = a * shape[1] + b
    size = shape[0] * shape[1]
    n_sum = np.bincount(flat, weights=counts, minlength=size)
    nu_sum = np.bincount(flat, weights=expected, minlength=size)
    seen = np.bincount(flat, minlength=size) > 0
    values = np.full(size, np.nan)
    positive = seen & (nu_sum > 0)
    values[positive] = (n_sum[positive] - nu_sum[positive]) / np.sqrt(nu_sum[positive])
    flagged = (np.abs(np.nan_to_num(pearson, nan=0.0)) > OUTLIER_RESIDUAL) | (expected <= 0)
    outliers = np.bincount(flat, weights=flagged.astype(float), minlength=size) > 0
    return {"values": values.reshape(shape), "outliers": outliers.reshape(shape),
            "row_labels": [_join(k) for k in row_keys], "col_labels": [_join(k) for k in col_keys],
            "row_title": row_title, "col_title": col_title,
            "row_blocks": _blocks(row_keys, {k: list(k) for k in row_keys}),
            "col_blocks": _blocks(col_keys, {k: list(k) for k in col_keys})}


def data_plots(r) -> list[Plot]:
    """Observed against expected counts, and the residual map (none without diagnostics:
    the true channel of a simulation was not fitted)."""
    dg = r.diagnostics
    if dg is None:
        return []
    counts = np.asarray(r.counts_columns["counts"], dtype=float)
    expected = np.asarray(dg.expected_counts, dtype=float)
    pearson = np.asarray(dg.pearson_residuals, dtype=float)
    nonpositive = np.flatnonzero(expected <= 0)
    outliers = np.flatnonzero((np.abs(np.nan_to_num(pearson, nan=0.0)) > OUTLIER_RESIDUAL)
                              & (expected > 0))
    scatter = Plot("counts", "observed_expected",
                   {"observed": counts, "expected": expected, "outliers": outliers,
                    "nonpositive": nonpositive},
                   title="Observed against expected counts",
                   caption=(f"Every row of the counts file ({counts.size}). Both axes on a "
                            "square-root scale, where Poisson noise has the same width at every "
                            "level: the shaded band is ± 2 standard deviations about the "
                            "diagonal."),
                   alt="scatter plot of observed against expected counts")
    grid = residual_grid(r)
    what = f"{grid['row_title'] or 'one row'} × {grid['col_title']}"
    residuals = Plot("residuals", "residual_map", grid,
                     title="Pearson residuals",
                     caption=(f"The Pearson residual (n − ν)/√ν of every setting, {what}; "
                              "red: more counts than the model expects, blue: fewer. A "
                              "miscalibrated setting shows as a row or column of strong "
                              f"colour. Ringed: a row with |residual| > {OUTLIER_RESIDUAL:g} "
                              "or with counts where the model expects none; grey: not "
                              "measured (or no positive expected counts)."),
                     alt="heat map of Pearson residuals by setting")
    return [scatter, residuals]


# --------------------------------------------------------------------------
# Bootstrap
# --------------------------------------------------------------------------

def _constructions(r, names) -> str:
    """How the intervals of ``names`` were made, in words."""
    how = {name: r.figures[name].interval_method or r.bootstrap.interval for name in names}
    parts = []
    for method, words in METHOD_WORDS.items():
        named = [figure_label(n, r.kind) for n, m in how.items() if m == method]
        if len(named) == len(how):
            return words
        if named:
            parts.append(f"{words} for {', '.join(named)}")
    others = any(m not in METHOD_WORDS for m in how.values())
    if not parts:
        return r.bootstrap.interval
    return "; ".join(parts) + (f"; {r.bootstrap.interval} otherwise" if others else "")


def bootstrap_plot(r) -> Plot | None:
    """Histograms of the bootstrap values of the main figures, with the estimate and the
    interval (None without a bootstrap). Figures without spread (fixed by a constraint,
    like the trace of a trace-preserving estimate) are left out."""
    boot = r.bootstrap
    if boot is None:
        return None
    main = STATE_MAIN_FIGURES if r.kind == "state" else MAIN_FIGURES
    names = [name for name in main if name in boot.names and name in r.figures]
    panels = []
    for name in names:
        values = np.asarray(boot.figures[:, boot.names.index(name)], dtype=float)
        finite = values[np.isfinite(values)]
        if finite.size == 0 or float(np.ptp(finite)) < 1e-12:
            continue
        fig = r.figures[name]
        note = "" if fig.determined else "not determined by the data"
        panels.append({"title": figure_label(name, r.kind), "values": values,
                       "point": fig.value, "ci": fig.ci, "level": fig.level or 0.95,
                       "note": note})
    if not panels:
        return None
    return Plot("bootstrap", "histograms", {"panels": panels},
                title="Bootstrap distributions",
                caption=(f"{boot.samples} {boot.kind} resamples, refitted; the line is the "
                         f"estimate, the band the figure's interval ({_constructions(r, names)})."),
                alt="histograms of the bootstrap values of the main figures")


def result_plots(r) -> list[Plot]:
    """Every figure of a result's report, in the order of the page."""
    plots = matrix_plots(r) + data_plots(r)
    boot = bootstrap_plot(r)
    return plots + ([boot] if boot is not None else [])


__all__ = ["basis_labels", "target_matrices", "map_plots", "matrix_plots", "label_parts",
           "residual_grid", "data_plots", "bootstrap_plot", "result_plots", "PART_ORDER"]
