"""What a result may claim: checks of the data before a fit and of the estimate after it.

Before the fit, `check_data` refuses data that determine nothing (no counts,
no counts above the background, a single setting in every normalisation
group) with an `InputError`, and warns about normalisation groups that carry
no information; `informative_rows` are the rows the process is determined
from. After the fit:

* `assess_estimate` — the status of the estimate: ``converged``,
  ``converged to rounding`` (the estimator stopped where the
  log-likelihood cannot be resolved to its stopping tolerance: near the
  optimum), ``not converged``, or ``unphysical`` (outside the physical set
  by more than `PHYSICAL_TOLERANCE`); only the first counts as converged,
  and the last two are warned about. A non-finite estimate is a
  `NumericalError`.
* `warn_about_fit` — counts consistent with the background alone (a
  likelihood-ratio test of every intensity being zero, against the χ²
  distribution with as many degrees of freedom as fitted parameters: Wilks,
  Ann. Math. Statist. 9, 60 (1938); the fit sits on the boundary λ ≥ 0, so
  the test is conservative), no degrees of freedom left for the goodness of
  fit.
* `undetermined_figures` — the figures of merit the data do not determine.

A linear figure f(J) = Σ_ij a_ij R_ij of the Pauli transfer matrix R is
determined by the data when the functional a lies in the span of the
rows' functionals (row k of preparation ρ and effect E probes
p = (1/d) Σ_ij e_i R_ij r_j, e_i = Tr(E P_i), r_j = Tr(ρ P_j); README,
"Conventions") together with the functionals the trace-preserving
constraint fixes (the row i = 0 of R). The process fidelity to U is
Σ_ij (R_U)_ij R_ij / d² (the PTM form of Tr(χ_U χ)); the truth-table
fidelity and the concurrence's output state are built from row functionals.
Every other figure (purity, unitarity, eigenvalues, fidelities after an
optimisation) depends on the whole process and is undetermined as soon as
any part of it is.
"""

from __future__ import annotations

import inspect
from dataclasses import dataclass

import numpy as np

from scipy.special import chdtrc, gammaln

from .channels import choi_from_unitary, choi_to_ptm, partial_trace_output
from .conventions import pauli_basis
from .errors import InputError, NumericalError, warn
from .estimators import ESTIMATORS, Fit
from .merit.entanglement import entangling_input
from .merit.process import basis_permutation
from .model import DENSE_RANK_MAX_PARAMETERS, RANK_TOLERANCE_FACTOR, Identifiability, MeasurementModel

#: Distance to the physical set above which an estimate is not physical, per unit of d
#: (the projections reach it to rounding error, about 1e-15; the tests ask for 1e-9).
PHYSICAL_TOLERANCE = 1e-9
#: The counts are consistent with background alone when the likelihood-ratio test of
#: "no signal" (every intensity zero) against the fit has a p-value above this.
NO_SIGNAL_P = 0.01
#: A functional is determined when its part outside the data's span is below this
#: fraction of its size (the span is computed to `model.RANK_TOLERANCE_FACTOR` rounding).
DETERMINED_TOLERANCE = 1e-8

STATUSES = ("converged", "converged to rounding", "not converged", "unphysical")


# --------------------------------------------------------------------------
# Before the fit
# --------------------------------------------------------------------------

def informative_rows(model: MeasurementModel) -> np.ndarray:
    """Boolean mask of the rows that carry information about the process.

    With fitted intensities, a normalisation group informs about the process
    only when some row has more counts than its background (otherwise its
    maximum-likelihood intensity is zero and the group fits any process
    exactly) and it holds at least two distinct (prep, meas) settings (one
    setting's intensity absorbs its counts). With a known intensity
    (``trace = "decreasing"``) every row informs, zero counts included.
    """
    if model.fixed_intensities is not None:
        return np.ones(model.n_rows, dtype=bool)
    g = model.group_index
    excess = np.bincount(g, weights=(model.counts > model.background).astype(float),
                         minlength=model.n_groups) > 0
    setting = model.meas_index if model.kind == "state" else model.pair_index
    pairs = np.unique(np.stack([g, setting]), axis=1)
    settings = np.bincount(pairs[0], minlength=model.n_groups)
    return (excess & (settings >= 2))[g]


def check_data(model: MeasurementModel) -> np.ndarray:
    """Refuse data that determine nothing; warn about groups that carry nothing.

    Returns the `informative_rows` mask.

    Raises
    ------
    InputError
        When every count is zero, no row has more counts than its background, or
        every normalisation group has a single (prep, meas) setting.
    """
    exp = model.experiment
    counts_file = None if exp is None else str(exp.counts_path)
    rows = informative_rows(model)
    if not rows.any():
        if not np.any(model.counts > 0):
            message = "every row has zero counts: there is nothing to fit"
        elif not np.any(model.counts > model.background):
            message = ("no row has more counts than its background: the data carry no signal "
                       "about the process")
        else:
            message = ("every normalisation group has a single (prep, meas) setting, whose "
                       "fitted intensity absorbs its counts: the data say nothing about the "
                       "process. Measure complete analyser bases for each preparation, or use "
                       "normalization = \"global\" (or \"per-group\") in the experiment file")
        raise InputError(message, file=counts_file)
    empty = np.unique(model.group_index[~rows])
    if empty.size:
        names = ", ".join(str(exp.group_names[k]) if exp is not None else str(k)
                          for k in empty[:6])
        more = f" and {empty.size - 6} more" if empty.size > 6 else ""
        warn("no-counts",
             f"{empty.size} of {model.n_groups} normalisation groups ({names}{more}) carry no "
             "information on the process (no counts above their background, or a single "
             "(prep, meas) setting whose intensity absorbs its counts); the process is "
             "determined from the other groups", stacklevel=2)
    return rows


# --------------------------------------------------------------------------
# After the fit
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class Assessment:
    """How an estimate ended (`assess_estimate`).

    ``status`` is one of `STATUSES`; ``converged`` is True only for
    "converged"; ``distance`` is the distance to the physical set:
    max(−λ_min(J), the largest departure of Tr_out J from I) for
    trace-preserving maps, max(−λ_min(J), λ_max(Tr_out J) − 1) for trace
    non-increasing ones.
    """

    status: str
    converged: bool
    physical: bool
    distance: float
    min_eigenvalue: float


def distance_to_physical(choi: np.ndarray, trace_decreasing: bool = False,
                         kind: str = "process") -> tuple[float, float]:
    """(distance to the physical set, smallest eigenvalue of J); see `Assessment`. For a
    state (``kind = "state"``, ``choi`` the density matrix ρ): max(−λ_min(ρ), |Tr ρ − 1|)."""
    choi = np.asarray(choi)
    lam = float(np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0])
    if kind == "state":
        return max(-lam, abs(float(np.trace(choi).real) - 1.0), 0.0), lam
    d = int(round(np.sqrt(choi.shape[0])))
    out = partial_trace_output(choi)
    if trace_decreasing:
        excess = float(np.linalg.eigvalsh(0.5 * (out + out.conj().T))[-1]) - 1.0
    else:
        excess = float(np.max(np.abs(out - np.eye(d))))
    return max(-lam, excess, 0.0), lam


def _default(method: str, name: str, options: dict):
    if name in options:
        return options[name]
    parameter = inspect.signature(ESTIMATORS[method]).parameters.get(name)
    return None if parameter is None else parameter.default


def rounding_level(model: MeasurementModel, fit: Fit) -> float:
    """Rounding error of the log-likelihood at the estimate: ε · Σ_k (|n_k log ν_k| + ν_k)."""
    nu = model.expected_counts(fit.choi, np.asarray(fit.intensities, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(model.counts > 0, np.abs(model.counts * np.log(np.abs(nu))), 0.0)
    return float(np.finfo(float).eps * (np.sum(terms) + np.sum(np.abs(nu))))


def assess_estimate(model: MeasurementModel, fit: Fit, options: dict | None = None) -> Assessment:
    """The status of an estimate, with a warning when it is not converged or not physical.

    An estimator that did not meet its stopping rule has still reached the
    optimum as closely as the numbers allow (status "converged to rounding",
    no warning) when its certified bound on the distance to the maximum of
    the log-likelihood (``Fit.info["gap_bound"]``, ℓ* − ℓ ≤ bound) is below the
    rounding error of ℓ or below its tolerance ``tol`` (relative to |ℓ|); or,
    for an estimator without such a bound, when it stopped short of its
    iteration limit because it could not increase ℓ at a point where rounding
    alone moves ℓ by more than ``tol``·|ℓ|.

    Raises
    ------
    NumericalError
        When the estimate or its intensities are not finite.
    """
    options = options or {}
    if not (np.all(np.isfinite(fit.choi)) and np.all(np.isfinite(fit.intensities))):
        raise NumericalError(f"the {fit.method} estimate is not finite: the data or their "
                             "magnitudes are beyond what the estimator can handle")
    distance, lam = distance_to_physical(fit.choi, model.trace_decreasing, model.kind)
    physical = distance <= PHYSICAL_TOLERANCE * model.dim
    if not physical:
        warn("unphysical",
             f"the {fit.method} estimate is not a physical process (smallest eigenvalue of J "
             f"{lam:.3g}; distance to the physical set {distance:.3g}): figures computed from it "
             "can leave their physical range (a fidelity above 1, for example) and the "
             "goodness of fit is not defined where it predicts negative counts; use mle "
             "(or pls) for a physical estimate", stacklevel=2)
        return Assessment("unphysical", False, False, distance, lam)
    if fit.converged:
        return Assessment("converged", True, True, distance, lam)
    tol = _default(fit.method, "tol", options)
    maxiter = _default(fit.method, "maxiter", options)
    below_limit = maxiter is None or fit.iterations < maxiter
    if tol is not None and np.isfinite(fit.log_likelihood):
        rounding = rounding_level(model, fit)
        wanted = tol * max(1.0, abs(fit.log_likelihood))
        gap = fit.info.get("gap_bound")
        certified = gap is not None and np.isfinite(gap) and gap <= max(rounding, wanted)
        if certified or (below_limit and rounding > wanted):
            return Assessment("converged to rounding", False, True, distance, lam)
    warn("not-converged",
         f"the {fit.method} estimator stopped before it converged ({fit.stop_reason}, after "
         f"{fit.iterations} iterations): the estimate and its figures may be off", stacklevel=2)
    return Assessment("not converged", False, True, distance, lam)


def signal_counts(model: MeasurementModel, fit: Fit) -> tuple[float, float]:
    """(fitted signal counts Σ λ·seconds·efficiency·p, expected counts Σ ν) over all rows."""
    lam = np.asarray(fit.intensities, dtype=float)[model.group_index]
    signal = float(np.sum(lam * model.exposure * np.clip(model.forward(fit.choi), 0.0, None)))
    return signal, signal + float(np.sum(model.background))


def background_only_p_value(model: MeasurementModel, fit: Fit, n_parameters: int) -> float:
    """P-value of the likelihood-ratio test of "background alone" (every intensity 0).

    2·(ℓ(fit) − ℓ(background)) against χ² with ``n_parameters`` degrees of
    freedom; 0 when some row has counts and no background (a signal is certain).
    """
    n, b = model.counts, model.background
    if np.any((b <= 0) & (n > 0)):
        return 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(n > 0, n * np.log(np.where(b > 0, b, 1.0)), 0.0) - b
    background = float(np.sum(terms) - np.sum(gammaln(n + 1.0)))
    statistic = max(2.0 * (fit.log_likelihood - background), 0.0)
    return float(chdtrc(max(n_parameters, 1), statistic))


def warn_about_fit(model: MeasurementModel, fit: Fit, dof: int, n_determined: int) -> bool:
    """Warn when the counts are consistent with background alone (returns True then:
    the data determine no figure) or when no degrees of freedom are left."""
    no_signal = False
    if model.fixed_intensities is None:
        signal, expected = signal_counts(model, fit)
        p = background_only_p_value(model, fit, n_determined + model.n_groups)
        if signal < 1.0 or p > NO_SIGNAL_P:
            no_signal = True
            warn("no-signal",
                 f"the counts are consistent with background alone (the fit attributes "
                 f"{signal:.3g} of {expected:.6g} expected counts to the signal; likelihood-ratio "
                 f"test against no signal: p = {p:.2g}): the data carry no information on the "
                 "process and no figure of merit is determined; check the background column",
                 stacklevel=2)
    if dof <= 0:
        fitted = 0 if model.fixed_intensities is not None else model.n_groups
        warn("no-dof",
             f"{model.n_rows} rows for {n_determined} process parameters and {fitted} "
             f"intensities leave {dof} degrees of freedom: the goodness of fit cannot be "
             "tested", stacklevel=2)
    return no_signal


# --------------------------------------------------------------------------
# Which figures the data determine
# --------------------------------------------------------------------------

def _pauli_vector(op: np.ndarray, n_qubits: int) -> np.ndarray:
    """v_j = Tr(op P_j), the real Pauli coordinates of a Hermitian operator."""
    return np.real(np.einsum("jab,ba->j", pauli_basis(n_qubits), op))


def _row_basis(vectors: np.ndarray) -> np.ndarray:
    """Orthonormal rows spanning the rows of ``vectors`` (rank by `RANK_TOLERANCE_FACTOR`)."""
    if vectors.size == 0:
        return np.zeros((0, vectors.shape[1]))
    _, s, vt = np.linalg.svd(vectors, full_matrices=False)
    tol = max(vectors.shape) * np.finfo(float).eps * (s[0] if s.size else 1.0) * RANK_TOLERANCE_FACTOR
    return vt[: int(np.sum(s > tol))]


class _Span:
    """The functionals a ↦ Σ_ij a_ij R_ij that the chosen rows determine."""

    def __init__(self, model: MeasurementModel, rows: np.ndarray):
        r, e = model.pauli_coordinates()
        self.first = 0 if model.trace_decreasing else 1
        present = model.pairs_present(rows) > 0
        preps, meas = present.any(axis=1), present.any(axis=0)
        self.kind = "none"
        if present[preps][:, meas].all():
            self.kind = "product"
            self.out = _row_basis(e[meas][:, self.first:])
            self.inp = _row_basis(r[preps])
        elif (r.shape[1] - self.first) * r.shape[1] <= DENSE_RANK_MAX_PARAMETERS:
            self.kind = "dense"
            p_idx, m_idx = np.nonzero(present)
            design = (e[m_idx, self.first:][:, :, None] * r[p_idx][:, None, :]).reshape(len(p_idx), -1)
            self.basis = _row_basis(design)

    def determined(self, a: np.ndarray) -> bool:
        a = np.asarray(a, dtype=float)[self.first:]
        size = np.linalg.norm(a)
        if size == 0:
            return True
        if self.kind == "product":
            rest = a - self.out.T @ (self.out @ a @ self.inp.T) @ self.inp
        elif self.kind == "dense":
            flat = a.reshape(-1)
            rest = flat - self.basis.T @ (self.basis @ flat)
        else:                            # too large to decide: say undetermined
            return False
        return bool(np.linalg.norm(rest) <= DETERMINED_TOLERANCE * size)


def undetermined_figures(model: MeasurementModel, rows: np.ndarray, ident: Identifiability,
                         names, *, no_signal: bool = False) -> set[str]:
    """The figures among ``names`` that the rows ``rows`` (a boolean mask) do not determine.

    ``ident`` is ``model.identifiability(rows)``; with ``no_signal`` no figure
    is determined but the trace of a trace-preserving estimate, which the
    constraint fixes.
    """
    names = list(names)
    fixed = set() if model.trace_decreasing or model.kind == "state" else {"trace"}
    if no_signal:
        return set(names) - fixed
    if ident.complete:
        return set()
    if model.kind == "state":             # every state figure depends on the whole state
        return set(names)
    span = _Span(model, rows)
    n, d = model.n_qubits, model.dim
    target = model.experiment.target
    determined = set(fixed)
    trace_functional = np.zeros((d * d, d * d))
    trace_functional[0, 0] = 1.0                          # Tr J / d = R_00
    if "trace" not in fixed and span.determined(trace_functional):
        determined.add("trace")
    if target is not None:
        if span.determined(choi_to_ptm(choi_from_unitary(target)) / d**2):
            determined.add("process_fidelity")
            if "trace" in determined:
                determined.add("average_gate_fidelity")
        perm = basis_permutation(target)
        if perm is not None:
            basis = np.eye(d)
            ok = True
            for x in range(d):
                r_x = _pauli_vector(np.outer(basis[x], basis[x]), n)
                e_y = _pauli_vector(np.outer(basis[perm[x]], basis[perm[x]]), n)
                ok &= span.determined(np.outer(e_y, r_x))
                if model.trace_decreasing:                # the ratio's denominator Tr Φ(|x><x|)
                    ok &= span.determined(np.outer(np.eye(d * d)[0], r_x))
            if ok:
                determined.add("truth_table_fidelity")
        entangling = entangling_input(target) if n == 2 else None
        if entangling is not None:
            psi = entangling[1]
            r_in = _pauli_vector(np.outer(psi, psi.conj()), n)
            if all(span.determined(np.outer(np.eye(d * d)[i], r_in))
                   for i in range(span.first, d * d)):
                determined.add("concurrence")
    return set(names) - determined


__all__ = ["STATUSES", "PHYSICAL_TOLERANCE", "NO_SIGNAL_P", "Assessment", "informative_rows",
           "check_data", "assess_estimate", "distance_to_physical", "rounding_level",
           "signal_counts", "background_only_p_value", "warn_about_fit", "undetermined_figures"]
