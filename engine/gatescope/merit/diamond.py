"""The diamond distance to the target, by semidefinite program (needs cvxpy, the
``sdp`` extra)."""

from __future__ import annotations

import numpy as np

from ..channels import choi_from_unitary, dim_of_choi, partial_trace_output


def diamond_distance(choi: np.ndarray, other: np.ndarray, *, eps: float = 1e-9) -> dict:
    """‖Φ − Ψ‖◇ for the Choi matrix J of Φ and a unitary (or a Choi matrix) Ψ.

    The semidefinite program of Watrous (J. Watrous, "Simpler semidefinite
    programs for completely bounded norms", Chicago J. Theor. Comput. Sci.
    2013, article 8; arXiv:1207.5726, 2012 — from memory), solved with
    cvxpy. With Δ = J − J_Ψ in our ordering (input factor first):

        ‖Φ − Ψ‖◇ = max 2 Re Tr(Δ W) − Re Tr(σ Tr_out Δ)
                   over 0 ⪯ W ⪯ σ ⊗ I, σ ⪰ 0, Tr σ = 1.

    It follows from ‖(Φ − Ψ) ⊗ id‖ being attained on a pure input (the maps
    preserve Hermiticity), ‖Y‖₁ = max_{0⪯P⪯I} 2 Tr(PY) − Tr Y, and
    W = (√σ ⊗ I) P (√σ ⊗ I). When both maps preserve the trace, Tr_out Δ = 0
    and it is Watrous' program for the difference of two channels; for a
    trace-decreasing estimate the second term stays.

    Solver: SCS (a first-order conic solver; ``eps`` its absolute and
    relative tolerance) when both maps preserve the trace, and from three
    qubits on in any case (an interior-point solver runs out of memory
    there); Clarabel for a trace-decreasing estimate on one or two qubits,
    where SCS needs thousands of iterations.

    Returns
    -------
    dict with ``value`` (between 0 and 2 for channels), ``status`` (the
    solver's), ``solver`` and ``program`` ("trace-preserving" or
    "trace-decreasing").

    Raises
    ------
    ImportError
        When cvxpy is not installed (the ``sdp`` extra).
    """
    import cvxpy as cp

    d = dim_of_choi(choi)
    other = np.asarray(other, dtype=complex)
    other_choi = choi_from_unitary(other) if other.shape == (d, d) else other
    delta = np.asarray(choi, dtype=complex) - other_choi
    delta = 0.5 * (delta + delta.conj().T)
    eye = np.eye(d)
    tp = all(np.allclose(partial_trace_output(c), eye, atol=1e-8) for c in (choi, other_choi))
    w = cp.Variable((d * d, d * d), hermitian=True)
    sigma = cp.Variable((d, d), hermitian=True)
    objective = 2 * cp.real(cp.trace(delta @ w))
    if not tp:
        loss = partial_trace_output(delta)
        objective = objective - cp.real(cp.trace(0.5 * (loss + loss.conj().T) @ sigma))
    constraints = [w >> 0, sigma >> 0, cp.real(cp.trace(sigma)) == 1, cp.kron(sigma, eye) - w >> 0]
    problem = cp.Problem(cp.Maximize(objective), constraints)
    if tp or d > 4:
        solver = "SCS"
        problem.solve(solver="SCS", eps_abs=eps, eps_rel=eps, max_iters=100_000)
    else:
        solver = "CLARABEL"
        problem.solve(solver="CLARABEL")
    return {"value": float(problem.value) if problem.value is not None else float("nan"),
            "status": str(problem.status), "solver": solver,
            "program": "trace-preserving" if tp else "trace-decreasing"}


def cvxpy_available() -> bool:
    try:
        import cvxpy  # noqa: F401
    except ImportError:
        return False
    return True
