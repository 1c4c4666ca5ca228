"""State tomography against outside references, each with its source beside it.

* QuTiP 5 (Johansson, Nation & Nori, Comput. Phys. Commun. 183, 1760 (2012)), its state
  functions only: ``concurrence``, ``entropy_vn``, ``entropy_linear``, ``fidelity``
  (unsquared: QuTiP returns Tr√(√ρσ√ρ), we report its square) and ``partial_transpose``.
* cvxpy (Diamond & Boyd, J. Mach. Learn. Res. 17, 1 (2016)) with its bundled solvers
  SCS and Clarabel, as a generic convex solver: the projection onto density matrices
  and the maximum-likelihood state.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from gatescope.conventions import builtin_states, density, kron_all, named_state
from gatescope.estimators import estimate
from gatescope.likelihood import PoissonLikelihood
from gatescope.merit import state as sm
from gatescope.model import StateModel
from gatescope.model.state import full_grid
from gatescope.projection import project_density
from support import random_density, random_ket

try:
    import qutip
except ImportError:                                    # the test extra installs it
    qutip = None
try:
    import cvxpy as cp
except ImportError:
    cp = None
needs_qutip = pytest.mark.skipif(qutip is None or int(qutip.__version__.split(".")[0]) < 5,
                                 reason="needs QuTiP 5 (the test extra)")
needs_cvxpy = pytest.mark.skipif(cp is None, reason="needs cvxpy (the test extra)")
# cvxpy's own note when a solver ends "optimal_inaccurate"; the statuses are checked
inaccurate_ok = pytest.mark.filterwarnings("ignore:Solution may be inaccurate:UserWarning")

PAULI6 = ("H", "V", "D", "A", "R", "L")


def q_dm(rho, n):
    return qutip.Qobj(rho, dims=[[2] * n, [2] * n])


# --------------------------------------------------------------------------
# Figures against QuTiP's state functions
# --------------------------------------------------------------------------

@needs_qutip
@pytest.mark.parametrize("seed", range(12))
def test_two_qubit_figures_match_qutip(seed):
    # full-rank random states, where the library's own square roots of eigenvalues are
    # accurate
    rho = random_density(4, 4, seed)
    sigma = random_density(4, 4, 1000 + seed)
    q = q_dm(rho, 2)
    assert sm.concurrence(rho) == pytest.approx(qutip.concurrence(q), abs=1e-10)
    assert sm.von_neumann_entropy(rho) == pytest.approx(qutip.entropy_vn(q, base=2), abs=1e-10)
    # QuTiP's entropy_linear is 1 − Tr ρ²; ours is normalised by d/(d − 1)
    assert sm.linear_entropy(rho) == pytest.approx(4 / 3 * qutip.entropy_linear(q), abs=1e-10)
    # QuTiP's fidelity is Tr√(√ρσ√ρ), unsquared; ours is its square
    assert sm.state_fidelity(rho, sigma) == pytest.approx(
        qutip.fidelity(q, q_dm(sigma, 2)) ** 2, abs=1e-10)
    pt = qutip.partial_transpose(q, [0, 1]).full()          # transpose on qubit 2
    norm = np.abs(np.linalg.eigvalsh(pt)).sum()
    np.testing.assert_allclose(sm.partial_transpose(rho, 2), pt, atol=1e-14)
    assert sm.negativity(rho) == pytest.approx((norm - 1) / 2, abs=1e-10)
    assert sm.log_negativity(rho) == pytest.approx(np.log2(norm), abs=1e-10)


@needs_qutip
@pytest.mark.parametrize("seed", range(4))
def test_entangled_two_qubit_states_match_qutip(seed):
    # Random states are rarely entangled; mix a random pure state with a little noise so
    # that the concurrence and negativity are positive
    psi = random_ket(4, 50 + seed)
    rho = 0.9 * np.outer(psi, psi.conj()) + 0.1 * random_density(4, 4, 60 + seed)
    q = q_dm(rho, 2)
    c = qutip.concurrence(q)
    assert c > 0.05
    assert sm.concurrence(rho) == pytest.approx(c, abs=1e-10)
    norm = np.abs(np.linalg.eigvalsh(qutip.partial_transpose(q, [0, 1]).full())).sum()
    assert sm.negativity(rho) == pytest.approx((norm - 1) / 2, abs=1e-10)


@needs_qutip
@pytest.mark.parametrize("n", [3, 4])
def test_single_qubit_bipartition_negativities_match_qutip(n):
    # QuTiP 5 partial_transpose with the mask of qubit k
    d = 2 ** n
    psi = random_ket(d, n)
    rho = 0.8 * np.outer(psi, psi.conj()) + 0.2 * random_density(d, d, 7 + n)
    figures = sm.compute_state_figures(rho)
    for k in range(1, n + 1):
        mask = [1 if j == k - 1 else 0 for j in range(n)]
        pt = qutip.partial_transpose(q_dm(rho, n), mask).full()
        expected = (np.abs(np.linalg.eigvalsh(pt)).sum() - 1) / 2
        assert figures[f"negativity_{k}"] == pytest.approx(expected, abs=1e-10)
    assert sm.von_neumann_entropy(rho) == pytest.approx(
        qutip.entropy_vn(q_dm(rho, n), base=2), abs=1e-10)


# --------------------------------------------------------------------------
# Projection onto density matrices against cvxpy
# --------------------------------------------------------------------------

def cvxpy_density_projection(x):
    """argmin ‖ρ − X‖_F² over density matrices, by cvxpy + SCS at tight tolerance."""
    d = x.shape[0]
    rho = cp.Variable((d, d), hermitian=True)
    objective = cp.sum_squares(cp.real(rho - x)) + cp.sum_squares(cp.imag(rho - x))
    problem = cp.Problem(cp.Minimize(objective), [rho >> 0, cp.real(cp.trace(rho)) == 1])
    problem.solve(solver="SCS", eps_abs=1e-11, eps_rel=1e-11, max_iters=200_000)
    assert problem.status in ("optimal", "optimal_inaccurate"), problem.status
    return rho.value


@needs_cvxpy
@inaccurate_ok
@pytest.mark.parametrize("n,kind,seed", [(n, kind, s) for n in (1, 2, 3)
                                         for s, kind in enumerate(("gaussian", "near", "large"))])
def test_projection_matches_cvxpy(n, kind, seed):
    d = 2 ** n
    rng = np.random.default_rng(40 + 10 * n + seed)
    g = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    h = 0.5 * (g + g.conj().T)
    x = {"gaussian": 0.3 * h, "near": random_density(d, 2, seed) + 0.05 * h, "large": 4 * h}[kind]
    ours = project_density(x).choi
    assert np.abs(ours - ours.conj().T).max() == 0
    assert np.linalg.eigvalsh(ours)[0] >= -1e-15
    assert np.trace(ours).real == pytest.approx(1, abs=1e-14)
    # cvxpy with SCS (generic convex solver at tight tolerance) lands within ~1e−8; the
    # bound leaves room for its stopping rule
    assert np.abs(ours - cvxpy_density_projection(x)).max() <= 1e-6


# --------------------------------------------------------------------------
# Maximum likelihood against cvxpy
# --------------------------------------------------------------------------

def explicit_effects(n):
    states = builtin_states()
    return np.array([kron_all([density(states[lab]) for lab in combo])
                     for combo in itertools.product(PAULI6, repeat=n)])


def cvxpy_state_mle(n, counts):
    """Maximise Σ n_k log Tr(E_k ρ) over density matrices (cvxpy; Clarabel, then SCS).

    With one global intensity, no background and complete analyser bases, Σ_k p_k is
    the number of bases for every density matrix, so the profiled Poisson
    log-likelihood is Σ n_k log p_k plus a constant. Rows without counts do not enter.
    """
    d = 2 ** n
    effects = explicit_effects(n)
    keep = counts > 0
    # Tr(E ρ) = Σ_ab E[b, a] ρ[a, b] = (Eᵀ vec) with cvxpy's column-major vec
    design = np.array([e.T.reshape(-1, order="F") for e in effects[keep]])
    found = []
    for solver, options in (("CLARABEL", {}), ("SCS", dict(eps_abs=1e-10, eps_rel=1e-10,
                                                           max_iters=100_000))):
        rho = cp.Variable((d, d), hermitian=True)
        p = cp.real(design @ cp.vec(rho, order="F"))
        problem = cp.Problem(cp.Maximize(counts[keep] @ cp.log(p)),
                             [rho >> 0, cp.real(cp.trace(rho)) == 1])
        try:
            problem.solve(solver=solver, **options)
        except cp.error.SolverError:
            continue
        if problem.status in ("optimal", "optimal_inaccurate") and rho.value is not None:
            found.append(rho.value)
    assert found, "no reference solver succeeded"
    return found


def make_density(x):
    """Move a solver's nearly feasible answer into the set, independently of our code:
    Hermitian part, unit trace, then the smallest admixture of I/d that makes it positive.
    The result is feasible, so its likelihood is a lower bound on the optimum."""
    d = x.shape[0]
    x = 0.5 * (x + x.conj().T)
    x = x / np.trace(x).real
    low = np.linalg.eigvalsh(x)[0]
    if low < 0:
        eps = -low * d / (1 - low * d) * (1 + 1e-9)
        x = (1 - eps) * x + eps * np.eye(d) / d
    return x


def check_mle_against_cvxpy(n, truth, shots, seed):
    p = np.einsum("mab,ba->m", explicit_effects(n), truth).real
    counts = np.random.default_rng(seed).poisson(shots * np.clip(p, 0, None)).astype(float)
    single = np.array([density(builtin_states()[lab]) for lab in PAULI6])
    parts = full_grid(n, 6)
    model = StateModel(single, parts, np.arange(len(parts)), counts)
    lik = PoissonLikelihood(model)
    ours = estimate(model, "mle")
    assert ours.converged, ours.stop_reason
    refs = [lik.evaluate(make_density(r)).log_likelihood for r in cvxpy_state_mle(n, counts)]
    ref = max(refs)
    # ours at least as likely as the generic solver's optimum, to 1e−8 relative
    assert ours.log_likelihood >= ref - 1e-8 * abs(ref), (ours.log_likelihood, refs)
    # and the reference is a real optimum, not a failed solve
    assert ref >= ours.log_likelihood - 1e-5 * abs(ref), (ours.log_likelihood, refs)


@needs_cvxpy
@inaccurate_ok
@pytest.mark.parametrize("seed", [1, 2])
def test_two_qubit_mle_reaches_the_cvxpy_optimum(seed):
    truth = 0.92 * density(named_state("phi-", 2)) + 0.08 * random_density(4, 4, seed)
    check_mle_against_cvxpy(2, truth, 1000, seed)


@needs_cvxpy
@inaccurate_ok
def test_three_qubit_mle_reaches_the_cvxpy_optimum():
    truth = 0.85 * density(named_state("GHZ", 3)) + 0.15 * random_density(8, 2, 3)
    check_mle_against_cvxpy(3, truth, 1000, 3)
