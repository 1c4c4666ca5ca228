"""The projection onto physical maps (gatescope.projection): the Newton matrix against its
definition, the matrix-free product, conjugate gradients against the direct solve.
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope import kernels


def _newton_matrix_by_definition(w, q, d):
    """Σ_rs Ω_rs t_rs t_rs^H pair by pair, Ω the first divided differences of max(·, 0)
    (Daleckii–Krein formula for the derivative of a matrix function: Bhatia, Matrix
    Analysis, Springer 1997, Theorem V.3.3)."""
    n = d * d
    jac = np.zeros((n, n), dtype=complex)
    for r in range(n):
        for s in range(n):
            hi, lo = max(w[r], w[s]), min(w[r], w[s])
            if hi <= 0:
                continue
            omega = 1.0 if lo > 0 else hi / (hi - lo)
            t = (q[:, r].reshape(d, d) @ q[:, s].conj().reshape(d, d).T).reshape(-1)
            jac += omega * np.outer(t, t.conj())
    return jac


@pytest.mark.parametrize("d", [2, 4, 8])
@pytest.mark.parametrize("shift", [-2.0, 0.0, 2.0])
def test_newton_matrix_equals_its_definition(rng, d, shift):
    from gatescope.projection import _newton_matrix
    n = d * d
    x = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    # shift ±2 gives mostly positive / mostly negative spectra, 0 about half of each
    w, q = np.linalg.eigh(x + x.conj().T + shift * np.sqrt(n) * np.eye(n))
    reference = _newton_matrix_by_definition(w, q, d)
    np.testing.assert_allclose(_newton_matrix(w, q, d), reference, atol=1e-12)
    if d <= 4:
        np.testing.assert_allclose(kernels._newton_matrix_kernel(w, q, d), reference, atol=1e-12)


@pytest.mark.parametrize("d", [2, 4, 8])
def test_matrix_free_newton_product_equals_matrix(rng, d):
    from gatescope.projection import _newton_apply, _newton_matrix
    n = d * d
    x = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    w, q = np.linalg.eigh(x + x.conj().T)
    v = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    v = v + v.conj().T
    np.testing.assert_allclose(_newton_apply(w, q, d, v).reshape(-1),
                               _newton_matrix(w, q, d) @ v.reshape(-1), atol=1e-12)


def test_projection_with_conjugate_gradients_matches_direct(rng, monkeypatch):
    from gatescope import projection
    d, n = 8, 64
    x = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    x = 0.3 / d * (x + x.conj().T) + np.eye(n) / d
    direct = projection.project_cptp_numpy(x)
    monkeypatch.setattr(projection, "MATRIX_FREE_DIM", 8)
    iterative = projection.project_cptp_numpy(x)
    np.testing.assert_allclose(iterative.choi, direct.choi, atol=1e-10)


def test_simplex_projection_fixed_points_and_examples():
    # Held, Wolfe & Crowder, Math. Program. 6, 62 (1974): the projection of (2, 0) onto the
    # simplex is (1, 0), of (−1, −1) its centre; a point of the simplex is its own
    from gatescope.projection import project_simplex

    np.testing.assert_allclose(project_simplex(np.array([2.0, 0.0])), [1, 0])
    np.testing.assert_allclose(project_simplex(np.array([-1.0, -1.0])), [0.5, 0.5])
    np.testing.assert_allclose(project_simplex(np.array([0.2, 0.3, 0.5])), [0.2, 0.3, 0.5],
                               atol=1e-16)


@pytest.mark.parametrize("d", [2, 4, 8, 64])
def test_density_projection_is_the_nearest_density_matrix(d):
    # projection theorem (common practice for convex sets): Re Tr[(X − ρ*)(σ − ρ*)] ≤ 0 for
    # every density matrix σ; a density matrix is its own projection
    from gatescope.projection import project_density

    rng = np.random.default_rng(d)
    g = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    x = 0.5 * (g + g.conj().T) / np.sqrt(d)
    proj = project_density(x)
    rho = proj.choi
    assert proj.converged and proj.iterations == 1 and proj.multiplier is None
    assert np.linalg.eigvalsh(rho)[0] >= -1e-15 and abs(np.trace(rho).real - 1) < 1e-13
    for s in range(5):
        h = rng.normal(size=(d, 1 + s)) + 1j * rng.normal(size=(d, 1 + s))
        sigma = h @ h.conj().T / np.linalg.norm(h) ** 2
        assert np.vdot(x - rho, sigma - rho).real <= 1e-12
    np.testing.assert_allclose(project_density(rho).choi, rho, atol=1e-14)


def test_project_physical_dispatches_on_the_model_kind():
    from types import SimpleNamespace

    from gatescope.projection import project_density, project_physical

    x = np.diag([0.9, 0.3, -0.1, -0.2]).astype(complex)
    state = SimpleNamespace(kind="state", trace_decreasing=False)
    np.testing.assert_array_equal(project_physical(state, x).choi, project_density(x).choi)
    process = SimpleNamespace(kind="process", trace_decreasing=False)
    np.testing.assert_allclose(kernels_free_partial_trace(project_physical(process, x).choi),
                               np.eye(2), atol=1e-12)


def kernels_free_partial_trace(choi):
    """Tr_out of a 4 × 4 Choi matrix, written out (input factor first)."""
    return np.einsum("iaja->ij", choi.reshape(2, 2, 2, 2))
