"""The same maximum-likelihood problem, solved by a generic convex solver (cvxpy).

With complete analyser bases in every preparation group, no background and
equal exposures, the profiled intensities do not depend on the channel, so
the Poisson maximum-likelihood problem is: maximise Σ_k n_k log p_k(J) over
Hermitian J ⪰ 0 with Tr_out J = I, p_k = Tr[(ρ_k^T ⊗ E_k) J]. Used by the
benchmarks only (cvxpy is in the test extra).

Two formulations of the same problem:

* ``dense``: p = A·vec(J) with the dense rows × d⁴ matrix A. Fine for 1 and
  2 qubits; at 3 qubits A alone is about 3 GB.
* ``pauli``: a real variable c of Pauli coefficients, c_m = Tr(P_m J), tied to
  J by a sparse equality, and p = A_c·c / d² with A_c[k, m] = Tr(P_m ρ_k^T ⊗ E_k).
  For product Pauli-eigenstate sets every ρ^T ⊗ E has only 4^n non-zero Pauli
  coefficients out of 16^n, so A_c is sparse. Rows without counts are left
  out of the objective (they add nothing to it; p ≥ 0 follows from J ⪰ 0).

``auto`` takes ``dense`` up to 2 qubits and ``pauli`` from 3.
"""

from __future__ import annotations

import time

import numpy as np

FORMULATIONS = ("auto", "dense", "pauli")


def check_reference_problem(exp) -> None:
    """Raise ValueError unless the simple objective Σ n log p is the profiled likelihood."""
    if np.any(np.asarray(exp.background) != 0):
        raise ValueError("the reference formulation needs data without background")
    exposure = np.asarray(exp.seconds) * np.asarray(exp.efficiency)
    if not np.allclose(exposure, exposure[0]):
        raise ValueError("the reference formulation needs equal exposures")
    if getattr(exp, "trace", "preserving") != "preserving":
        raise ValueError("the reference formulation is for trace-preserving models")


def _pauli_vectors(states: np.ndarray, n_qubits: int, transpose: bool) -> np.ndarray:
    """Real Pauli coefficients v[s, m] = Tr(P_m X_s) of Hermitian X_s (or X_sᵀ)."""
    from gatescope.conventions import pauli_basis

    d = 2 ** n_qubits
    paulis = pauli_basis(n_qubits).reshape(d * d, d * d)           # P_m flattened, C order
    x = states.transpose(0, 2, 1) if transpose else states
    # Tr(P X) = Σ_ab P[a, b] X[b, a]
    v = (x.transpose(0, 2, 1).reshape(len(states), d * d) @ paulis.T).real
    v[np.abs(v) < 1e-13] = 0.0
    return v


def _pauli_design(exp, keep: np.ndarray):
    """Sparse A_c (rows kept × d⁴): A_c[k, (a, b)] = Tr(P_a ρ_k^T) · Tr(P_b E_k)."""
    import scipy.sparse as sp

    n = exp.n_qubits
    d2 = 4 ** n
    r = _pauli_vectors(np.asarray(exp.prep_states), n, transpose=True)
    e = _pauli_vectors(np.asarray(exp.meas_effects), n, transpose=False)
    r_nz = [np.nonzero(row)[0] for row in r]
    e_nz = [np.nonzero(row)[0] for row in e]
    pi = np.asarray(exp.prep_index)[keep]
    mi = np.asarray(exp.meas_index)[keep]
    rows, cols, vals = [], [], []
    for k, (p, m) in enumerate(zip(pi, mi)):
        a, b = r_nz[p], e_nz[m]
        cols.append((a[:, None] * d2 + b[None, :]).reshape(-1))
        vals.append(np.outer(r[p, a], e[m, b]).reshape(-1))
        rows.append(np.full(a.size * b.size, k))
    rows, cols, vals = (np.concatenate(x) for x in (rows, cols, vals))
    return sp.csr_matrix((vals, (rows, cols)), shape=(len(pi), d2 * d2))


def _pauli_to_vec(n_qubits: int):
    """Sparse complex T (d⁴ × d⁴) with c = Re(T · vec_F(J)) the Pauli coefficients of J.

    Row m holds P_m (the basis of the 2n qubits input ⊗ output, the documented Pauli order)
    in C order, which pairs with cvxpy's column-major vec(J) to give
    Σ_ab P_m[b, a] J[a, b] = Tr(P_m J). A Pauli string has one non-zero per
    row: column a XOR (its X/Y mask), value the product of the phases.
    """
    import scipy.sparse as sp

    perm = np.array([[0, 1], [1, 0], [1, 0], [0, 1]])                # I X Y Z
    phase = np.array([[1, 1], [1, 1], [-1j, 1j], [1, -1]])
    cols = np.zeros((1, 1), dtype=np.int64)
    vals = np.ones((1, 1), dtype=complex)
    for _ in range(2 * n_qubits):
        w, r = cols.shape
        cols = (cols[:, None, :, None] * 2 + perm[None, :, None, :]).reshape(w * 4, r * 2)
        vals = (vals[:, None, :, None] * phase[None, :, None, :]).reshape(w * 4, r * 2)
    words, size = cols.shape
    rows_of_p = np.broadcast_to(np.arange(size), cols.shape)
    data_rows = np.repeat(np.arange(words), size)
    data_cols = (rows_of_p * size + cols).reshape(-1)
    return sp.csr_matrix((vals.reshape(-1), (data_rows, data_cols)), shape=(words, words))


def solve_mle_cvxpy(exp, solver: str = "CLARABEL", formulation: str = "auto",
                    **solver_options):
    """Return (choi, seconds, status) of cvxpy's solution for experiment ``exp``.

    ``seconds`` is the time of ``problem.solve`` (cvxpy's canonicalisation
    plus the solver), not of building the problem.
    """
    import cvxpy as cp

    if formulation not in FORMULATIONS:
        raise ValueError(f"formulation must be one of {FORMULATIONS}")
    if formulation == "auto":
        formulation = "dense" if exp.n_qubits <= 2 else "pauli"
    d = exp.dim
    n = d * d
    counts = np.asarray(exp.counts, dtype=float)
    j = cp.Variable((n, n), hermitian=True)
    constraints = [j >> 0, cp.partial_trace(j, dims=[d, d], axis=1) == np.eye(d)]
    if formulation == "dense":
        mats = np.array([np.kron(exp.prep_states[i].T, exp.meas_effects[k])
                         for i, k in zip(exp.prep_index, exp.meas_index)])
        # p_k = Σ_ab M_k[b, a] J[a, b]; cvxpy's vec is column-major, so row k is M_k in C order
        a_mat = mats.reshape(len(mats), n * n)
        p = cp.real(a_mat @ cp.vec(j, order="F"))
        objective = cp.Maximize(cp.sum(cp.multiply(counts, cp.log(p))))
    else:
        keep = np.nonzero(counts > 0)[0]
        a_c = _pauli_design(exp, keep)
        t = _pauli_to_vec(exp.n_qubits)
        c = cp.Variable(n * n)
        constraints.append(c == cp.real(t @ cp.vec(j, order="F")))
        p = (a_c @ c) / float(n)
        objective = cp.Maximize(counts[keep] @ cp.log(p))
    problem = cp.Problem(objective, constraints)
    t0 = time.perf_counter()
    problem.solve(solver=solver, **solver_options)
    seconds = time.perf_counter() - t0
    choi = None if j.value is None else 0.5 * (j.value + j.value.conj().T)
    return choi, seconds, problem.status
