"""The same maximum-likelihood problem, solved by a generic convex solver (cvxpy).

With complete analyser bases in every preparation group, no background and
equal exposures, the profiled intensities do not depend on the channel, so
the Poisson maximum-likelihood problem is: maximise Σ_k n_k log p_k(J) over
Hermitian J ⪰ 0 with Tr_out J = I, p_k = Tr[(ρ_k^T ⊗ E_k) J]. Used by the
benchmarks only (cvxpy is in the test extra).
"""

from __future__ import annotations

import time

import numpy as np


def solve_mle_cvxpy(exp, solver: str = "CLARABEL", **solver_options):
    """Return (choi, seconds, status) of cvxpy's solution for experiment ``exp``."""
    import cvxpy as cp

    d = exp.dim
    n = d * d
    mats = np.array([np.kron(exp.prep_states[i].T, exp.meas_effects[j])
                     for i, j in zip(exp.prep_index, exp.meas_index)])
    # p_k = Σ_ab M_k[b, a] J[a, b]; cvxpy's vec is column-major, so row k is M_k in C order
    a_mat = mats.reshape(len(mats), n * n)
    counts = np.asarray(exp.counts, dtype=float)
    j = cp.Variable((n, n), hermitian=True)
    p = cp.real(a_mat @ cp.vec(j, order="F"))
    objective = cp.Maximize(cp.sum(cp.multiply(counts, cp.log(p))))
    constraints = [j >> 0, cp.partial_trace(j, dims=[d, d], axis=1) == np.eye(d)]
    problem = cp.Problem(objective, constraints)
    t0 = time.perf_counter()
    problem.solve(solver=solver, **solver_options)
    seconds = time.perf_counter() - t0
    choi = None if j.value is None else 0.5 * (j.value + j.value.conj().T)
    return choi, seconds, problem.status
