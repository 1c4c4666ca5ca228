"""Linear inversion (``lin``) and projected least squares (``pls``), for processes and
states.

* ``lin`` — least squares on relative frequencies in Pauli coordinates: the
  Pauli transfer matrix of a process with trace preservation imposed
  exactly, or the Pauli vector c_j = Tr(ρ P_j) of a state with c_0 = Tr ρ = 1
  imposed exactly; may be unphysical (negative eigenvalues).
* ``pls`` — ``lin`` followed by the Euclidean projection onto the physical
  set (Guţă, Kahn, Kueng & Tropp, J. Phys. A 53, 204001 (2020);
  Surawy-Stepney, Kahn, Kueng & Guţă, Quantum 6, 844 (2022) for processes):
  CPTP maps, or density matrices (`gatescope.projection.project_physical`).
"""

from __future__ import annotations

import time
import weakref

import numpy as np
from scipy.sparse.linalg import LinearOperator, lsqr

from ..channels import apply_on_every_qubit, ptm_to_choi
from ..likelihood import PoissonLikelihood
from ..model import MeasurementModel, StateModel
from ..model.state import pauli_to_density
from ..projection import project_physical
from .base import Fit

#: Entries of the pair design matrix (of a process) or of the setting design matrix (of a
#: state) up to which the least-squares problem is solved densely; above it by LSQR on
#: the matrix-free operator (memory, not speed, decides).
_DENSE_LIMIT = 20_000_000         # entries of the pair design matrix solved densely


def _frequencies(model: MeasurementModel, counts: np.ndarray, probs: np.ndarray):
    """Relative frequencies with moment intensities λ_g = Σ(n − b)/Σ(s·e·p)."""
    g = model.group_index
    if model.fixed_intensities is not None:
        lam = model.fixed_intensities
    else:
        num = np.bincount(g, weights=counts - model.background, minlength=model.n_groups)
        den = np.bincount(g, weights=model.exposure * probs, minlength=model.n_groups)
        with np.errstate(divide="ignore", invalid="ignore"):
            lam = np.where(den > 0, num / den, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = lam[g] * model.exposure
        freq = np.where(scale > 0, (counts - model.background) / scale, 0.0)
    return freq, lam


#: Pseudo-inverses of the analyser and preparation coordinates, per model: the passes of
#: one fit (and the refits of a bootstrap) reuse them instead of one SVD per pass.
_PINV = weakref.WeakKeyDictionary()


def _kronecker_pinvs(model: MeasurementModel, e1: np.ndarray, r: np.ndarray):
    cached = _PINV.get(model)
    if cached is None:
        cached = _PINV[model] = (np.linalg.pinv(e1), np.linalg.pinv(r).T)
    return cached


def _linear_least_squares(model: MeasurementModel, freq: np.ndarray) -> np.ndarray:
    """PTM R minimising Σ_k (f_k − p_k(R))², p = (1/d) e_mᵀ R r_p.

    For a trace-preserving model the first row is fixed, R[0] = (1, 0, …);
    for a trace non-increasing one every entry is free.
    """
    d = model.dim
    d2 = d * d
    r, e = model.pauli_coordinates()
    mult = model.pairs_present().reshape(-1)
    sums = np.bincount(model.pair_index, weights=freq, minlength=mult.size)
    q = np.nonzero(mult)[0]
    p_idx, m_idx = np.divmod(q, model.n_meas)
    weight = np.sqrt(mult[q].astype(float))
    first = 0 if model.trace_decreasing else 1
    n_free = d2 - first
    # the fixed trace-preserving first row contributes Tr(E)·Tr(ρ)/d
    fixed_table = (e[:, :1] @ r[:, :1].T) / d if first else np.zeros((model.n_meas, model.n_preps))
    target = weight * (sums[q] / mult[q] - fixed_table[m_idx, p_idx])
    e1 = e[:, first:] / d
    n_cols = n_free * d2
    if q.size == mult.size and np.all(mult == mult[0]):
        # complete table, equal multiplicity: the design is a Kronecker product
        y = (sums / mult).reshape(model.n_preps, model.n_meas).T - fixed_table
        pinv_e, pinv_r = _kronecker_pinvs(model, e1, r)
        sol = (pinv_e @ y @ pinv_r).reshape(-1)
    elif q.size * n_cols <= _DENSE_LIMIT:
        design = (e1[m_idx][:, :, None] * r[p_idx][:, None, :]).reshape(q.size, n_cols)
        sol = np.linalg.lstsq(weight[:, None] * design, target, rcond=None)[0]
    else:
        def matvec(v):
            table = r @ v.reshape(n_free, d2).T @ e1.T          # [p, m], as the pair index
            return weight * table.reshape(-1)[q]

        def rmatvec(u):
            table = np.zeros(model.n_preps * model.n_meas)
            table[q] = weight * u
            return (e1.T @ table.reshape(model.n_preps, model.n_meas).T @ r).reshape(-1)

        op = LinearOperator((q.size, n_cols), matvec=matvec, rmatvec=rmatvec, dtype=float)
        sol = lsqr(op, target, atol=1e-14, btol=1e-14, iter_lim=10 * n_cols)[0]
    ptm = np.zeros((d2, d2))
    ptm[0, 0] = 1.0
    ptm[first:] = sol.reshape(n_free, d2)
    return ptm


def _cells(model: StateModel):
    """Row → cell map of `StateModel.pauli_table`: grid cells (structured) or settings."""
    if model.structured:
        return model.row_grid, model.grid_size
    return model.meas_index, model.n_meas


def _kronecker_solution(model: StateModel, mean: np.ndarray) -> np.ndarray | None:
    """Constrained least squares on a complete product grid with equal multiplicities.

    The design is then ⊗_k (e1/2), e1[l, j] = Tr(E_l P_j), so the unconstrained
    solution is ⊗_k pinv(e1/2) applied qubit by qubit, and the constraint c_0 = 1
    is met by c = c_u − (c_u[0] − 1) · ⊗_k h, h = G⁻¹e₀ / (G⁻¹)₀₀, G = (e1/2)ᵀ(e1/2)
    (the Lagrange solution, with G⁻¹ a Kronecker product). None when e1 does not
    have rank 4 (the state is then not determined; the caller solves otherwise).
    """
    n = model.n_qubits
    e_half = model.single_pauli_coordinates() / 2.0
    if np.linalg.matrix_rank(e_half) < 4:
        return None
    g_inv = np.linalg.inv(e_half.T @ e_half)
    h = g_inv[:, 0] / g_inv[0, 0]
    c_u = apply_on_every_qubit(mean.reshape((model.n_single,) * n), np.linalg.pinv(e_half), n)
    c_u = c_u.reshape(-1)
    correction = np.ones(1)
    for _ in range(n):
        correction = np.kron(correction, h)
    return c_u - (c_u[0] - 1.0) * correction


def state_least_squares(model: StateModel, freq: np.ndarray) -> np.ndarray:
    """Pauli coordinates c (c_0 = 1) minimising Σ_k (f_k − p_k(c))², p = (1/d) e c.

    Rows of one cell (setting, or grid cell from three qubits) enter through
    their mean with weight = their number. Three solvers, the same solution:
    the Kronecker formula of `_kronecker_solution` (complete product grid,
    equal multiplicities, structured model), a dense least squares on the
    cells present (small models), or LSQR (Paige & Saunders, ACM Trans. Math.
    Softw. 8, 43 (1982)) with the qubit-by-qubit maps `StateModel.pauli_table`
    and its adjoint (everything else).
    """
    d = model.dim
    d2 = d * d
    cell, n_cells = _cells(model)
    mult = np.bincount(cell, minlength=n_cells)
    sums = np.bincount(cell, weights=freq, minlength=n_cells)
    q = np.nonzero(mult)[0]
    mean = sums[q] / mult[q]
    if model.structured and q.size == n_cells and np.all(mult == mult[0]):
        sol = _kronecker_solution(model, mean)
        if sol is not None:
            return sol
    weight = np.sqrt(mult[q].astype(float))
    unit = np.zeros(d2)
    unit[0] = 1.0
    fixed = model.pauli_table(unit)[q]              # contribution of c_0 = 1
    target = weight * (mean - fixed)
    if not model.structured and q.size * (d2 - 1) <= _DENSE_LIMIT:
        design = model.pauli_coordinates()[q, 1:] / d
        sol = np.linalg.lstsq(weight[:, None] * design, target, rcond=None)[0]
        return np.concatenate([[1.0], sol])

    def matvec(v):
        return weight * model.pauli_table(np.concatenate([[0.0], v]))[q]

    def rmatvec(u):
        values = np.zeros(n_cells)
        values[q] = weight * u
        return model.pauli_table_adjoint(values)[1:]

    op = LinearOperator((q.size, d2 - 1), matvec=matvec, rmatvec=rmatvec, dtype=float)
    sol = lsqr(op, target, atol=1e-14, btol=1e-14, iter_lim=10 * d2)[0]
    return np.concatenate([[1.0], sol])


def fit_lin(model: MeasurementModel | StateModel, *, counts=None, start=None,
            tol: float = 1e-10, maxiter: int = 200) -> Fit:
    """Linear inversion by least squares on relative frequencies.

    Relative frequencies are f_k = (n_k − b_k)/(λ_g s_k e_k). The
    intensities λ_g are first those of the model's centre, the completely
    depolarising channel or the maximally mixed state (exact for any
    trace-preserving process or any state when every group holds complete
    analyser bases with equal exposure), and are then re-estimated from the
    current linear estimate until they stop changing (``maxiter`` passes,
    relative change ``tol``). A process is solved for in Pauli-transfer-matrix
    coordinates (`_linear_least_squares`), a state in Pauli coordinates
    (`state_least_squares`). The result can have negative eigenvalues;
    ``info["min_eigenvalue"]`` reports the smallest.
    """
    t0 = time.perf_counter()
    lik = PoissonLikelihood(model, counts)
    if model.kind == "state":
        def solve(freq):
            return pauli_to_density(state_least_squares(model, freq), model.n_qubits)
    else:
        def solve(freq):
            return ptm_to_choi(_linear_least_squares(model, freq))
    probs = model.forward(model.centre())
    lam_prev = None
    passes = 0
    for passes in range(1, maxiter + 1):
        freq, lam = _frequencies(model, lik.counts, probs)
        choi = solve(freq)
        probs = model.forward(choi)
        settled = lam_prev is not None and np.allclose(lam, lam_prev, rtol=tol, atol=0)
        if settled:
            break
        lam_prev = lam
    ev = lik.evaluate(choi)
    min_eig = float(np.linalg.eigvalsh(choi)[0])
    reason = ("least squares; intensities settled after {} passes".format(passes) if settled
              else "least squares; intensities still changing after the last pass")
    return Fit("lin", choi, ev.intensities, ev.log_likelihood, bool(settled), passes, reason,
               time.perf_counter() - t0, {"min_eigenvalue": min_eig})


def fit_pls(model: MeasurementModel | StateModel, *, counts=None, start=None,
            tol: float = 1e-10, maxiter: int = 200) -> Fit:
    """Projected least squares: the ``lin`` estimate projected onto CPTP maps
    (onto trace non-increasing CP maps for ``trace = "decreasing"``, onto density
    matrices for a state)."""
    t0 = time.perf_counter()
    lin = fit_lin(model, counts=counts, tol=tol, maxiter=maxiter)
    proj = project_physical(model, lin.choi)
    lik = PoissonLikelihood(model, counts)
    ev = lik.evaluate(proj.choi)
    info = {"lin_min_eigenvalue": lin.info["min_eigenvalue"],
            "projection_iterations": proj.iterations, "multiplier": proj.multiplier}
    return Fit("pls", proj.choi, ev.intensities, ev.log_likelihood, proj.converged,
               lin.iterations, "projection of the linear-inversion estimate",
               time.perf_counter() - t0, info)
