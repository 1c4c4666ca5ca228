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
