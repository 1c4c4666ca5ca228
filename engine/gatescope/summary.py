"""A compact terminal summary of a `Result` (the `show` command)."""

from __future__ import annotations

import numpy as np
from scipy.stats import chi2 as _chi2

from .results import Result

LABELS = {
    "process_fidelity": "process fidelity",
    "average_gate_fidelity": "average gate fidelity",
    "purity": "purity",
    "trace": "trace (Tr J / d)",
    "min_eigenvalue": "min eigenvalue of J",
}


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
    # value with the distances to the interval ends, then the interval itself
    return (f"{_num(fig.value)} {_signed(hi - fig.value)} {_signed(lo - fig.value)}  "
            f"[{_num(lo)}, {_num(hi)}] at {100 * fig.level:g}%")


def summary(result: Result) -> str:
    """Figures (with intervals), fit status, goodness of fit and provenance as text."""
    r = result
    lines = []
    toml_title = next((ln.split("=", 1)[1].strip().strip('"') for ln in r.experiment_toml.splitlines()
                       if ln.strip().startswith("title") and "=" in ln), "")
    d = int(round(np.sqrt(r.choi.shape[0])))
    n = int(round(np.log2(d)))
    lines.append(f"gatescope result: {toml_title or '(untitled)'}")
    lines.append(f"  qubits {n}, target {r.target_name or 'none'}, rows {len(r.counts_columns['counts'])}, "
                 f"counts {int(np.sum(r.counts_columns['counts']))}")
    lines.append("")
    lines.append("figures of merit")
    for name, fig in r.figures.items():
        lines.append(f"  {LABELS.get(name, name):24s} {_fmt_figure(fig)}")
    if r.bootstrap is not None:
        b = r.bootstrap
        refit = f" refitted with {b.method}" if b.method else ""
        errors = f", {b.errors} raised an error" if b.errors else ""
        lines.append(f"  (bootstrap: {b.samples} {b.kind} resamples{refit}, {b.interval} intervals, "
                     f"seed {b.seed}; {b.failures} did not converge{errors})")
    lines.append("")
    lines.append("fit")
    lines.append(f"  method {r.method}, converged {'yes' if r.converged else 'NO'}, "
                 f"{r.iterations} iterations, {r.seconds:.3f} s")
    lines.append(f"  stop reason: {r.stop_reason}")
    lines.append(f"  log-likelihood {r.log_likelihood:.6f}")
    dg = r.diagnostics
    p = float(_chi2.sf(dg.chi2, dg.dof)) if dg.dof > 0 else float("nan")
    lines.append(f"  Pearson chi2 {dg.chi2:.2f} on {dg.dof} degrees of freedom (p = {p:.3g}); "
                 f"deviance {dg.deviance:.2f}")
    pr = r.provenance
    lines.append("")
    lines.append("provenance")
    lines.append(f"  gatescope {pr.get('gatescope_version', '?')}, created {r.created_utc}")
    lines.append(f"  host {pr.get('host', '?')}, python {pr.get('python', '?')}, "
                 f"seed {pr.get('seed', '') if pr.get('seed', '') != '' else 'none'}")
    lines.append(f"  command: {pr.get('command_line', '')}")
    lines.append(f"  input sha256: experiment {r.toml_sha256[:12]}…, counts {r.csv_sha256[:12]}…")
    return "\n".join(lines)
