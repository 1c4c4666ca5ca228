"""A compact terminal summary of a `Result` (the `show` command), of a process or a
state, and the short summary `fit` prints.

Honest screens: the warnings a fit raised come first; a figure the data do
not determine is shown as such, with the estimator's value in brackets; a
value outside the range of every physical process is flagged; nothing that
is not a number (NaN, ±inf) is printed as one; rows are named by their line
in the CSV (header = line 1). Control characters from the file (a title with
escape sequences, say) are printed escaped, never sent to the terminal.
"""

from __future__ import annotations

import tomllib

import numpy as np

from .checks import PHYSICAL_TOLERANCE
from .conventions import n_qubits_of
from .diagnostics import MIN_BOOTSTRAP_TEST, OUTLIER_RESIDUAL, POOR_FIT_P
from .errors import printable as clean
from .estimators import MAXIMUM_LIKELIHOOD
from .intervals import parameter_range
from .result import Result

LABELS = {
    "process_fidelity": "process fidelity",
    "average_gate_fidelity": "average gate fidelity",
    "purity": "purity",
    "trace": "trace (Tr J / d)",
    "min_eigenvalue": "min eigenvalue of J",
    "unitarity": "unitarity",
    "nearest_unitary_fidelity": "fidelity to nearest unitary",
    "process_fidelity_local_phases": "process fid., local Z phases",
    "truth_table_fidelity": "truth-table fidelity",
    "concurrence": "concurrence of output",
    "diamond_distance": "diamond distance to target",
}
#: Labels of the state figures (``negativity_k`` is labelled by `_label`).
STATE_LABELS = {
    "state_fidelity": "state fidelity",
    "purity": "purity (Tr ρ²)",
    "von_neumann_entropy": "von Neumann entropy (bits)",
    "linear_entropy": "linear entropy",
    "concurrence": "concurrence",
    "tangle": "tangle",
    "entanglement_of_formation": "entanglement of formation",
    "negativity": "negativity",
    "log_negativity": "log-negativity",
    "chsh_max": "largest CHSH value",
}
#: `show` prints the density matrix of states up to this many qubits.
DENSITY_MATRIX_MAX_QUBITS = 2

#: Outlier rows listed by `show` (the rest are counted).
MAX_OUTLIERS_SHOWN = 20


#: Main figures of the short summary `fit` prints, in order.
MAIN_FIGURES = ("process_fidelity", "average_gate_fidelity", "purity", "unitarity",
                "truth_table_fidelity", "concurrence")
STATE_MAIN_FIGURES = ("state_fidelity", "purity", "concurrence", "negativity", "chsh_max")


def _num(x: float) -> str:
    if not np.isfinite(x):
        return "not defined"
    if abs(x) < 5e-13:
        return "0"
    return f"{x:.5f}" if abs(x) >= 1e-4 else f"{x:.3g}"


def status_of(r: Result) -> str:
    """How the estimate ended (`gatescope.checks.STATUSES`); for files that did not record
    it, from the converged flag and the smallest eigenvalue."""
    if r.status:
        return r.status
    if r.origin == "truth":
        return "converged"
    low = r.figures.get("min_eigenvalue")           # a process's; a state's is not stored
    if low is not None and np.isfinite(low.value) and low.value < -PHYSICAL_TOLERANCE * r.dim:
        return "unphysical"
    return "converged" if r.converged else "not converged"


def _status_text(r: Result) -> str:
    status = status_of(r)
    if status == "converged":
        return "converged"
    if status == "converged to rounding":
        return ("converged to rounding precision (the log-likelihood cannot be resolved further "
                "at these counts)")
    if status == "unphysical":
        low = r.figures.get("min_eigenvalue")
        return "UNPHYSICAL estimate" + (f" (smallest eigenvalue of J {_num(low.value)})"
                                        if low is not None and r.kind != "state" else "")
    return "NOT converged"


def _out_of_range(name: str, value: float, dim: int, kind: str = "process") -> str:
    bounds = parameter_range(name, dim, kind)
    if bounds is None or not np.isfinite(value):
        return ""
    slack = 1e-9
    if value < bounds[0] - slack or value > bounds[1] + slack:
        return (f"  (!) outside [{_num(bounds[0])}, {_num(bounds[1])}], impossible for a physical "
                + ("state" if kind == "state" else "process"))
    return ""


def _signed(x: float) -> str:
    return ("−" if x < 0 else "+") + _num(abs(x))


#: How `show` and the report name an interval or bound not made by the bootstrap.
METHOD_WORDS = {"profile": "profile likelihood", "test-inversion": "test inversion"}


def _fmt_figure(fig) -> str:
    bound = ("" if fig.lower_bound is None else
             f"; lower bound {_num(fig.lower_bound)} (one-sided {100 * fig.level:g}%"
             + (", test inversion" if fig.lower_bound_method == "test-inversion" else "") + ")")
    if fig.ci is None:
        return _num(fig.value) + bound
    lo, hi = fig.ci
    if abs(hi - lo) < 5e-13:           # fixed by a constraint (e.g. trace of a TP map)
        return f"{_num(fig.value)}  (no spread) at {100 * fig.level:g}%" + bound
    how = (" " + METHOD_WORDS[fig.interval_method]) if fig.interval_method in METHOD_WORDS else ""
    # value with the distances to the interval ends, then the interval itself
    return (f"{_num(fig.value)} {_signed(hi - fig.value)} {_signed(lo - fig.value)}  "
            f"[{_num(lo)}, {_num(hi)}] at {100 * fig.level:g}%{how}" + bound)


#: What the top of a figure's range means, for `boundary_lines`.
_TOP = {"process_fidelity": "a perfect gate", "average_gate_fidelity": "a perfect gate",
        "state_fidelity": "the target state exactly", "purity": None}


def boundary_text(name: str, fig, kind: str) -> str:
    """In words, for a figure whose profile-likelihood interval reaches the top of its range
    (``Figure.touches_boundary``): what the data are consistent with."""
    what = _TOP.get(name) or ("a pure state" if kind == "state" else "a pure process")
    return (f"the data are consistent with {what} at {100 * fig.level:g}% confidence; the "
            "interval reaches 1 and is one-sided")


def boundary_lines(r: Result) -> list[str]:
    """`boundary_text` of every figure that touches the top of its range, one line each."""
    return [f"  {_label(name, r.kind == 'state')}: {boundary_text(name, fig, r.kind)}"
            for name, fig in r.figures.items() if fig.touches_boundary]


def title_of(r: Result) -> str:
    """The experiment's title ("" when none)."""
    try:
        return str(tomllib.loads(r.experiment_toml).get("title", ""))
    except (tomllib.TOMLDecodeError, RecursionError):  # written by hand elsewhere; cosmetic
        return ""


def _figure_line(name: str, fig, dim: int, kind: str = "process") -> str:
    label = f"  {_label(name, kind == 'state'):30s} "
    if not fig.determined:
        return label + f"not determined by the data (the estimator's value: {_num(fig.value)})"
    return label + _fmt_figure(fig) + _out_of_range(name, fig.value, dim, kind)


def _warning_lines(r: Result) -> list[str]:
    out = []
    if r.warnings:
        out.append(f"WARNINGS ({len(r.warnings)}), kept in the result file:")
        out.extend(f"  {w}" for w in r.warnings)
        out.append("")
    if r.origin != "truth" and status_of(r) == "unphysical" and \
            not any(w.startswith("[unphysical]") for w in r.warnings):
        what = "state" if r.kind == "state" else "process"
        out.append(f"UNPHYSICAL ESTIMATE: the {r.method} estimate is not a physical {what}; "
                   f"figures marked (!) lie outside the range of every physical {what}, and the "
                   "likelihood is not defined where it predicts negative counts. Refit with mle "
                   "(or pls) for a physical estimate.")
        out.append("")
    undetermined = [_label(k, r.kind == "state") for k, f in r.figures.items() if not f.determined]
    if undetermined:
        what = "states" if r.kind == "state" else "processes"
        out.append(f"NOT DETERMINED BY THE DATA: {', '.join(undetermined)} (their values depend "
                   f"on the estimator's choice among {what} that fit the data equally well)")
        out.append("")
    return out


def summary(result: Result, *, source: str | None = None) -> str:
    """Figures (with intervals), fit status, goodness of fit and provenance as text.

    ``source`` is an extra line about the file (its format, its checksums).
    """
    r = result
    lines = []
    toml_title = title_of(r)
    dim = r.dim
    n = n_qubits_of(dim)
    state = r.kind == "state"
    lines.append(f"gatescope result: {toml_title or '(untitled)'}")
    lines.append(f"  {'state, ' if state else ''}qubits {n}, "
                 f"target {'state ' if state else ''}{r.target_name or 'none'}, "
                 f"rows {len(r.counts_columns['counts'])}, "
                 f"counts {int(np.sum(r.counts_columns['counts']))}")
    if source:
        lines.append(f"  {source}")
    if r.conditions:
        lines.append("  conditions: " + ", ".join(f"{name} = {value!r}"
                                                  for name, value in r.conditions.items()))
    lines.append("")
    lines.extend(_warning_lines(r))
    lines.append("figures of merit")
    for name, fig in r.figures.items():
        lines.append(_figure_line(name, fig, dim, r.kind))
    lines.extend(_state_details(r) if state else _figure_details(r))
    if r.bootstrap is not None:
        b = r.bootstrap
        refit = f" refitted with {b.method}" if b.method else ""
        errors = f", {b.errors} raised an error" if b.errors else ""
        lines.append(f"  (bootstrap: {b.samples} {b.kind} resamples{refit}, {b.interval} intervals, "
                     f"seed {b.seed}; {b.failures} did not converge{errors})")
    for method, words in METHOD_WORDS.items():
        named = [_label(k, state) for k, f in r.figures.items() if f.interval_method == method]
        if named:
            lines.append(f"  ({words.replace(' ', '-')} intervals: {', '.join(named)})")
    lines.extend(boundary_lines(r))
    if state:
        lines.extend(_density_matrix(r))
    lines.append("")
    if r.origin == "truth":
        lines.append(f"true {'state' if state else 'channel'} of a simulation (not a fit)")
        lines.append(f"  {r.stop_reason}")
        lines.append(f"  log-likelihood at the simulated counts {r.log_likelihood:.6f}")
    else:
        lines.append("fit")
        lines.append(f"  method {r.method}, {_status_text(r)}, {r.iterations} iterations, "
                     f"{r.seconds:.3f} s")
        lines.append(f"  stop reason: {r.stop_reason}")
        if np.isfinite(r.log_likelihood):
            lines.append(f"  log-likelihood {r.log_likelihood:.6f}")
        else:
            lines.append("  log-likelihood: not defined for this estimate (it predicts no counts, "
                         "or negative counts, where counts were seen)")
        lines.extend(_goodness_of_fit(r))
    pr = r.provenance
    lines.append("")
    lines.append("provenance")
    compiled = pr.get("compile_seconds")
    lines.append(f"  gatescope {pr.get('gatescope_version', '?')}, created {r.created_utc}"
                 + (f", {compiled:.1f} s compiling numerical kernels (first run)"
                    if isinstance(compiled, (int, float)) else ""))
    seed = pr.get("seed")
    lines.append(f"  host {pr.get('host', '?')}, python {pr.get('python', '?')}, "
                 f"seed {seed if seed not in (None, '') else 'none'}")
    lines.append(f"  command: {pr.get('command_line', '')}")
    lines.append(f"  input sha256: experiment {r.toml_sha256[:12]}…, counts {r.csv_sha256[:12]}…")
    return "\n".join(clean(line) for line in lines)


def figure_label(name: str, kind: str = "process") -> str:
    """The label of figure ``name`` in words, as `show` prints it ("process fidelity")."""
    return _label(name, kind == "state")


def number_text(x: float) -> str:
    """A number as `show` prints it ("not defined" for NaN and ±inf)."""
    return _num(x)


def status_text(r: Result) -> str:
    """How the estimate ended, in the words of `show` ("converged to rounding precision
    (...)", "UNPHYSICAL estimate (...)", ...)."""
    return _status_text(r)


def _label(name: str, state: bool) -> str:
    if not state:
        return LABELS.get(name, name)
    if name.startswith("negativity_"):
        return f"negativity, qubit {name[len('negativity_'):]} | rest"
    return STATE_LABELS.get(name, name)


def _state_details(r: Result) -> list[str]:
    """The CHSH settings that reach ``chsh_max``."""
    det = r.figure_details
    out = []
    if "chsh_a" in det:
        out.append("    CHSH settings reaching it, Bloch directions (<X>, <Y>, <Z>):")
        for key, who in (("chsh_a", "a  (qubit 1)"), ("chsh_a_prime", "a' (qubit 1)"),
                         ("chsh_b", "b  (qubit 2)"), ("chsh_b_prime", "b' (qubit 2)")):
            out.append(f"      {who} (" + ", ".join(f"{round(x, 3) + 0.0:+.3f}" for x in det[key])
                       + ")")
    if "correlation_singular_values" in det:
        t = np.asarray(det["correlation_singular_values"])
        out.append("    singular values of the correlation matrix T_ij = Tr[ρ σ_i⊗σ_j]: "
                   + ", ".join(f"{x:.4f}" for x in t))
    return out


def _density_matrix(r: Result) -> list[str]:
    """For up to `DENSITY_MATRIX_MAX_QUBITS` qubits the density matrix, with its bootstrap
    standard deviations when there are any."""
    rho = np.asarray(r.rho)
    out = []
    if rho.shape[0] <= 2 ** DENSITY_MATRIX_MAX_QUBITS:
        out.append("")
        out.append("density matrix (rows; basis H = |0>, qubit 1 first)")
        for row in rho:
            out.append("  " + "  ".join(f"{z.real:+.4f}{z.imag:+.4f}j" for z in row))
        std = None if r.bootstrap is None else r.bootstrap.rho_std
        if std is not None:
            out.append("  its bootstrap standard deviations (real part/imaginary part)")
            for row in np.asarray(std):
                out.append("  " + "  ".join(f" {z.real:.4f}/{z.imag:.4f}  " for z in row).rstrip())
    return out


def _degrees(phases) -> str:
    return "(" + ", ".join(f"{np.degrees(x):+.2f}°" for x in np.asarray(phases).ravel()) + ")"


def _figure_details(r: Result) -> list[str]:
    """The non-scalar parts of the figures: phases, the concurrence input, the nearest unitary."""
    det = r.figure_details
    out = []
    if "local_phases_before" in det:
        out.append(f"    local Z phases per qubit: before the gate {_degrees(det['local_phases_before'])}, "
                   f"after {_degrees(det['local_phases_after'])}")
    if "concurrence_input" in det:
        out.append(f"    concurrence for the input {det['concurrence_input']} "
                   f"(ideal output: {_num(float(det.get('concurrence_ideal', np.nan)))})")
    if "diamond_distance" in r.figures and "diamond_solver" in det:
        out.append(f"    diamond distance by semidefinite program ({det['diamond_solver']}, "
                   f"{det.get('diamond_status', '?')}), not bootstrapped")
    elif r.target is not None and "diamond_distance" not in r.figures:
        out.append("    diamond distance not computed (fit with --diamond; needs cvxpy)")
    u = det.get("nearest_unitary")
    if u is not None and u.shape[0] <= 4:
        out.append("    nearest unitary (rows):")
        for row in u:
            out.append("      " + "  ".join(f"{z.real:+.3f}{z.imag:+.3f}j" for z in row))
    return out


def row_numbers(r: Result, rows) -> tuple[str, np.ndarray]:
    """(heading, numbers) of rows: their CSV lines (header = line 1) when the file has
    them; else, for files that did not record them, the data row (first = 1)."""
    rows = np.asarray(rows, dtype=int)
    line = r.counts_columns.get("line")
    if line is not None:
        return "line", np.asarray(line, dtype=int)[rows]
    return "row", rows + 1


def _row_table(r: Result, rows, heading: str, *, residual: bool) -> list[str]:
    dg = r.diagnostics
    cols = r.counts_columns
    name, numbers = row_numbers(r, rows)
    where = "CSV line, header = line 1" if name == "line" else "CSV data row, first = 1"
    has_prep = "prep" in cols                          # a state has no preparations
    out = [f"  {heading} ({where}):",
           f"    {name:>6s}  " + (f"{'prep':10s} " if has_prep else "")
           + f"{'meas':10s} {'counts':>9s} {'expected':>11s}"
           + (f" {'residual':>9s}" if residual else "")]
    for k, number in list(zip(rows, numbers))[:MAX_OUTLIERS_SHOWN]:
        prep = f"{str(cols['prep'][k]):10s} " if has_prep else ""
        out.append(f"    {number:6d}  {prep}{str(cols['meas'][k]):10s} "
                   f"{int(cols['counts'][k]):9d} {dg.expected_counts[k]:11.2f}"
                   + (f" {dg.pearson_residuals[k]:+9.2f}" if residual else ""))
    if len(rows) > MAX_OUTLIERS_SHOWN:
        out.append(f"    ... and {len(rows) - MAX_OUTLIERS_SHOWN} more")
    return out


def _goodness_of_fit(r: Result) -> list[str]:
    dg = r.diagnostics
    expected = np.asarray(dg.expected_counts, dtype=float)
    nonpositive = np.flatnonzero(expected <= 0)
    defined = np.isfinite(dg.chi2) and np.isfinite(dg.deviance)
    tested = defined and dg.dof > 0 and np.isfinite(dg.chi2_p_value)
    if not defined:
        out = [f"  goodness of fit: not defined for this estimate ({nonpositive.size} row(s) with "
               "non-positive expected counts)"]
    elif not tested:
        out = [f"  Pearson chi2 {dg.chi2:.2f}, deviance {dg.deviance:.2f}; no test: {dg.dof} "
               "degrees of freedom"]
    else:
        out = [f"  Pearson chi2 {dg.chi2:.2f} (p = {dg.chi2_p_value:.3g}), deviance "
               f"{dg.deviance:.2f} (p = {dg.deviance_p_value:.3g}), on {dg.dof} degrees of freedom"]
        if dg.bootstrap_resamples:
            out.append(f"  bootstrap test of the deviance: p = {dg.bootstrap_p_value:.3g} "
                       f"({dg.bootstrap_resamples} resamples refitted; "
                       + ("it decides whether the model fits)" if dg.bootstrap_decides else
                          f"at least {MIN_BOOTSTRAP_TEST} needed to decide)"))
        if r.method not in MAXIMUM_LIKELIHOOD:
            out.append(f"  (a {r.method} estimate does not maximise the likelihood, so these "
                       "p-values are lower than for the model itself; refit with mle to test the "
                       "model)")
        elif dg.poor_fit:
            test = "bootstrap test" if dg.bootstrap_decides else f"p < {POOR_FIT_P:g}"
            out.append(f"  WARNING: {test}, the model does not describe the data: "
                       "check for miscalibrated optics, drift of the source, or a wrong "
                       "background")
    if nonpositive.size:
        out.extend(_row_table(r, nonpositive, f"{nonpositive.size} row(s) where the estimate "
                                              "expects zero or negative counts", residual=False))
    rows = np.asarray(dg.outlier_rows, dtype=int)
    rows = rows[expected[rows] > 0]
    if rows.size:
        order = rows[np.argsort(-np.abs(dg.pearson_residuals[rows]), kind="stable")]
        out.extend(_row_table(r, order, f"{rows.size} row(s) with |Pearson residual| > "
                                        f"{OUTLIER_RESIDUAL:g}", residual=True))
    return out


def fit_summary(result: Result, path) -> str:
    """The short summary `fit` prints: the main figures with their intervals, the fit's
    status and p-value, the warnings (cut to one line; `show` prints them whole) and
    the path of the result file."""
    r = result
    dim = r.dim
    lines = [f"gatescope fit: {title_of(r) or '(untitled)'}"]
    main = STATE_MAIN_FIGURES if r.kind == "state" else MAIN_FIGURES
    shown = [k for k in main if k in r.figures] or list(r.figures)[:4]
    for name in shown:
        lines.append(_figure_line(name, r.figures[name], dim, r.kind))
    lines.extend(boundary_lines(r))
    fit = f"  fit: {r.method}, {_status_text(r).split(' (')[0]}"
    dg = r.diagnostics
    if dg is not None and dg.bootstrap_decides:
        fit += (f"; goodness of fit p = {dg.bootstrap_p_value:.3g} (bootstrap, "
                f"{dg.bootstrap_resamples} resamples)")
    elif dg is not None and np.isfinite(dg.p_value) and dg.dof > 0:
        fit += f"; goodness of fit p = {dg.p_value:.3g} ({dg.dof} degrees of freedom)"
    elif dg is not None:
        fit += "; no goodness-of-fit test"
    lines.append(fit)
    if r.warnings:
        lines.append(f"  {len(r.warnings)} warning(s):")
        for w in r.warnings:
            lines.append(f"    {w if len(w) <= 110 else w[:107] + '...'}")
    else:
        lines.append("  no warnings")
    lines.append(f"  result written to {path} (gatescope show for everything)")
    return "\n".join(clean(line) for line in lines)
