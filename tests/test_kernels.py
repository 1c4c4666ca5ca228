"""Every numba kernel against its NumPy twin on random inputs (gatescope.kernels).
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope import kernels
from gatescope.projection import CONGRUENCE_MIN_EIGENVALUE
from gatescope.projection import project_cptp, project_cptp_numpy


def _rows(rng, n_rows=200, n_groups=7, background=True):
    counts = rng.poisson(50.0, size=n_rows).astype(float)
    counts[rng.random(n_rows) < 0.1] = 0.0
    base = rng.uniform(0.0, 2.0, size=n_rows)
    bg = rng.uniform(0.0, 3.0, size=n_rows) if background else np.zeros(n_rows)
    bg[rng.random(n_rows) < 0.3] = 0.0
    groups = rng.integers(0, n_groups, size=n_rows)
    return counts, base, bg, groups


@pytest.mark.parametrize("background", [False, True])
def test_group_intensities_matches_twin(rng, background):
    counts, base, bg, groups = _rows(rng, background=background)
    a = kernels.group_intensities(counts, base, bg, groups, 7)
    b = kernels.group_intensities_numpy(counts, base, bg, groups, 7)
    np.testing.assert_allclose(a, b, rtol=1e-12, atol=0)


def test_group_intensities_is_the_stationary_point(rng):
    # d/dλ Σ [n log(λa + b) − λa − b] = 0 at the returned λ (calculus; no outside source needed)
    counts, base, bg, groups = _rows(rng, background=True)
    lam = kernels.group_intensities(counts, base, bg, groups, 7)
    nu = lam[groups] * base + bg
    score = np.bincount(groups, weights=counts * base / nu - base, minlength=7)
    np.testing.assert_allclose(score, 0.0, atol=1e-8 * counts.sum())


def test_poisson_terms_matches_twin(rng):
    counts, base, bg, groups = _rows(rng)
    lam = rng.uniform(10, 100, size=7)
    exposure = rng.uniform(0.5, 2.0, size=counts.size)
    wa = np.empty_like(counts)
    wb = np.empty_like(counts)
    a = kernels.poisson_terms(counts, base, bg, lam, groups, exposure, wa)
    b = kernels.poisson_terms_numpy(counts, base, bg, lam, groups, exposure, wb)
    assert a == pytest.approx(b, rel=1e-12)
    np.testing.assert_allclose(wa, wb, rtol=1e-12)


def test_poisson_terms_forbidden_rate_is_minus_infinity():
    counts = np.array([3.0, 0.0])
    base = np.array([0.0, 1.0])
    w = np.empty(2)
    args = (counts, base, np.zeros(2), np.array([1.0]), np.zeros(2, dtype=np.int64), np.ones(2), w)
    assert kernels.poisson_terms(*args) == -np.inf
    assert kernels.poisson_terms_numpy(*args) == -np.inf


@pytest.mark.parametrize("d", [2, 4])
def test_projection_kernel_matches_twin(rng, d):
    for _ in range(5):
        x = rng.normal(size=(d * d, d * d)) + 1j * rng.normal(size=(d * d, d * d))
        x = 0.4 * (x + x.conj().T) + np.eye(d * d) / d
        a = project_cptp(x)
        b = project_cptp_numpy(x)
        np.testing.assert_allclose(a.choi, b.choi, atol=1e-11)
        np.testing.assert_allclose(a.multiplier, b.multiplier, atol=1e-8)


def test_tp_congruence_matches_twin(rng):
    d = 4
    g = rng.normal(size=(d * d, d * d)) + 1j * rng.normal(size=(d * d, d * d))
    j = g @ g.conj().T
    j *= d / np.trace(j).real
    tr = np.einsum("iaja->ij", j.reshape(d, d, d, d))
    vals, vecs = np.linalg.eigh(tr)
    m = (vecs / np.sqrt(vals)) @ vecs.conj().T
    twin = np.kron(m, np.eye(d)) @ j @ np.kron(m, np.eye(d)).conj().T
    if vals.min() > 0.5:
        np.testing.assert_allclose(kernels.tp_congruence(j, d, CONGRUENCE_MIN_EIGENVALUE), twin, atol=1e-12)
    out = kernels.tp_congruence(j / vals.min() * 0.6, d, CONGRUENCE_MIN_EIGENVALUE)   # 0.6 > 0.5
    tr_out = np.einsum("iaja->ij", out.reshape(d, d, d, d))
    np.testing.assert_allclose(tr_out, np.eye(d), atol=1e-12)


@pytest.mark.parametrize("d", [2, 4])
def test_newton_matrix_kernel_matches_twin(rng, d):
    from gatescope.projection import _newton_matrix
    n = d * d
    x = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    w, q = np.linalg.eigh(x + x.conj().T)
    np.testing.assert_allclose(kernels._newton_matrix_kernel(w, q, d), _newton_matrix(w, q, d),
                               atol=1e-12)


def test_hermitian_solve_matches_numpy(rng):
    for n in (1, 4, 16):
        g = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
        a = g @ g.conj().T + 0.1 * np.eye(n)
        b = rng.normal(size=n) + 1j * rng.normal(size=n)
        np.testing.assert_allclose(kernels.hermitian_solve(a, b), np.linalg.solve(a, b), rtol=1e-9, atol=1e-11)


def _stiefel_point(rng, d, r, slack=0):
    z = rng.normal(size=(d, d * r + slack)) + 1j * rng.normal(size=(d, d * r + slack))
    return kernels.polar_rows_numpy(z)


def _tangent_vector(rng, z):
    return kernels.tangent_project_numpy(z, rng.normal(size=z.shape) + 1j * rng.normal(size=z.shape))


@pytest.mark.parametrize("d, r, slack", [(2, 3, 0), (4, 16, 0), (4, 3, 4), (8, 5, 0)])
def test_kernels_match_their_twins(rng, d, r, slack):
    z = _stiefel_point(rng, d, r, slack)
    x = rng.normal(size=z.shape) + 1j * rng.normal(size=z.shape)
    np.testing.assert_allclose(kernels.tangent_project(z, x),
                               kernels.tangent_project_numpy(z, x), atol=1e-13)
    np.testing.assert_allclose(kernels.polar_rows(z + 0.1 * x),
                               kernels.polar_rows_numpy(z + 0.1 * x), atol=1e-12)
    m = 6
    s = np.array([_tangent_vector(rng, z) for _ in range(m)])
    y = 3.0 * s + 0.2 * np.array([_tangent_vector(rng, z) for _ in range(m)])
    rho = 1.0 / np.einsum("kij,kij->k", s.conj(), y).real
    order = np.array([3, 4, 5, 0, 1], dtype=np.int64)     # a ring buffer, oldest first
    g = _tangent_vector(rng, z)
    cols = d * r
    cinv = kernels.gram_inverse(z, d, cols, 0.1)
    a = kernels.lbfgs_direction(g, z, s, y, rho, order, d, cols, cinv)
    b = kernels.lbfgs_direction_numpy(g, z, s, y, rho, order, d, cols, cinv)
    np.testing.assert_allclose(a[0], b[0], rtol=1e-10, atol=1e-12 * np.abs(b[0]).max())
    assert a[1] == pytest.approx(b[1], rel=1e-10)
    pa = kernels.lbfgs_pair(z, x, g, s[0])
    pb = kernels.lbfgs_pair_numpy(z, x, g, s[0])
    for u, v in zip(pa, pb):
        np.testing.assert_allclose(u, v, rtol=1e-12, atol=1e-12)
@pytest.mark.parametrize("d", [1, 2, 4, 8, 32])
@pytest.mark.parametrize("scale", [0.05, 1.0, 10.0])
def test_project_density_kernel_matches_twin(rng, d, scale):
    from gatescope.projection import project_density_numpy

    g = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    x = np.ascontiguousarray(scale * (g + g.conj().T) / 2 + np.eye(d) / d)
    a = kernels.project_density_kernel(x)
    b = project_density_numpy(x)
    np.testing.assert_allclose(a, b, atol=1e-14 * max(1.0, scale))
    assert np.array_equal(a, a.conj().T)
