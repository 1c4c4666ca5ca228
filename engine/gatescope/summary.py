"""A compact terminal summary of a `Result` (the `show` command), of a process or a state."""

from __future__ import annotations

import tomllib

import numpy as np

from .conventions import n_qubits_of
from .diagnostics import OUTLIER_RESIDUAL, POOR_FIT_P
from .estimators import MAXIMUM_LIKELIHOOD
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


def _num(x: float) -> str:
    if abs(x) < 5e-13:
        return "0"
    return f"{x:.5f}" if abs(x) >= 1e-4 else f"{x:.3g}"


def _signed(x: float) -> str:
    return ("−" if x < 0 else "+") + _num(abs(x))


def _fmt_figure(fig) -> str:
    if fig.ci is None:
        return _num(fig.value)
    lo, hi = fig.ci
    if abs(hi - lo) < 5e-13:           # fixed by a constraint (e.g. trace of a TP map)
        return f"{_num(fig.value)}  (no spread) at {100 * fig.level:g}%"
    # value with the distances to the interval ends, then the interval itself
    return (f"{_num(fig.value)} {_signed(hi - fig.value)} {_signed(lo - fig.value)}  "
            f"[{_num(lo)}, {_num(hi)}] at {100 * fig.level:g}%")


def summary(result: Result) -> str:
    """Figures (with intervals), fit status, goodness of fit and provenance as text."""
    r = result
    lines = []
    try:
        toml_title = str(tomllib.loads(r.experiment_toml).get("title", ""))
    except tomllib.TOMLDecodeError:     # a file written by hand elsewhere; the title is cosmetic
        toml_title = ""
    n = n_qubits_of(r.dim)
    state = r.kind == "state"
    lines.append(f"gatescope result: {toml_title or '(untitled)'}")
    lines.append(f"  {'state, ' if state else ''}qubits {n}, "
                 f"target {'state ' if state else ''}{r.target_name or 'none'}, "
                 f"rows {len(r.counts_columns['counts'])}, "
                 f"counts {int(np.sum(r.counts_columns['counts']))}")
    if r.conditions:
        lines.append("  conditions: " + ", ".join(f"{name} = {value!r}"
                                                  for name, value in r.conditions.items()))
    lines.append("")
    lines.append("figures of merit")
    for name, fig in r.figures.items():
        lines.append(f"  {_label(name, state):30s} {_fmt_figure(fig)}")
    lines.extend(_state_details(r) if state else _figure_details(r))
    if r.bootstrap is not None:
        b = r.bootstrap
        refit = f" refitted with {b.method}" if b.method else ""
        errors = f", {b.errors} raised an error" if b.errors else ""
        lines.append(f"  (bootstrap: {b.samples} {b.kind} resamples{refit}, {b.interval} intervals, "
                     f"seed {b.seed}; {b.failures} did not converge{errors})")
    if state:
        lines.extend(_density_matrix(r))
    lines.append("")
    if r.origin == "truth":
        lines.append(f"true {'state' if state else 'channel'} of a simulation (not a fit)")
        lines.append(f"  {r.stop_reason}")
        lines.append(f"  log-likelihood at the simulated counts {r.log_likelihood:.6f}")
    else:
        lines.append("fit")
        lines.append(f"  method {r.method}, converged {'yes' if r.converged else 'NO'}, "
                     f"{r.iterations} iterations, {r.seconds:.3f} s")
        lines.append(f"  stop reason: {r.stop_reason}")
        lines.append(f"  log-likelihood {r.log_likelihood:.6f}")
        lines.extend(_goodness_of_fit(r))
    pr = r.provenance
    lines.append("")
    lines.append("provenance")
    lines.append(f"  gatescope {pr.get('gatescope_version', '?')}, created {r.created_utc}")
    lines.append(f"  host {pr.get('host', '?')}, python {pr.get('python', '?')}, "
                 f"seed {pr.get('seed', '') if pr.get('seed', '') != '' else 'none'}")
    lines.append(f"  command: {pr.get('command_line', '')}")
    lines.append(f"  input sha256: experiment {r.toml_sha256[:12]}…, counts {r.csv_sha256[:12]}…")
    return "\n".join(lines)


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


def _goodness_of_fit(r: Result) -> list[str]:
    dg = r.diagnostics
    out = [f"  Pearson chi2 {dg.chi2:.2f} (p = {dg.chi2_p_value:.3g}), deviance {dg.deviance:.2f} "
           f"(p = {dg.deviance_p_value:.3g}), on {dg.dof} degrees of freedom"]
    if r.method not in MAXIMUM_LIKELIHOOD:
        out.append(f"  (a {r.method} estimate does not maximise the likelihood, so these p-values "
                   "are lower than for the model itself; refit with mle to test the model)")
    elif dg.poor_fit:
        out.append(f"  WARNING: p < {POOR_FIT_P:g}, the model does not describe the data: check for "
                   "miscalibrated optics, drift of the source, or a wrong background")
    rows = np.asarray(dg.outlier_rows, dtype=int)
    if rows.size:
        out.append(f"  {rows.size} row(s) with |Pearson residual| > {OUTLIER_RESIDUAL:g} "
                   "(CSV data row, first = 1):")
        has_prep = "prep" in r.counts_columns              # a state has no preparations
        prep_head = f"{'prep':10s} " if has_prep else ""
        out.append(f"    {'row':>6s}  {prep_head}{'meas':10s} {'counts':>9s} {'expected':>11s} "
                   f"{'residual':>9s}")
        order = rows[np.argsort(-np.abs(np.nan_to_num(dg.pearson_residuals[rows], nan=np.inf)),
                                kind="stable")]
        cols = r.counts_columns
        for k in order[:MAX_OUTLIERS_SHOWN]:
            prep = f"{str(cols['prep'][k]):10s} " if has_prep else ""
            out.append(f"    {k + 1:6d}  {prep}{str(cols['meas'][k]):10s} "
                       f"{int(cols['counts'][k]):9d} {dg.expected_counts[k]:11.2f} "
                       f"{dg.pearson_residuals[k]:+9.2f}")
        if rows.size > MAX_OUTLIERS_SHOWN:
            out.append(f"    ... and {rows.size - MAX_OUTLIERS_SHOWN} more (all in /diagnostics/outlier_rows)")
    return out
