"""The factored maximum-likelihood solver (gatescope.estimators.factored), the ``mle`` of
processes: never below the accelerated projected gradient (``mle-pg``), warm refits, the
rank grown by the dual certificate, and its geometry against independent definitions.

What every estimator must do (physical output, ideal data, ``counts=``, backgrounds,
normalisations, trace-decreasing data) is the battery's (tests/estimators/test_battery.py);
the comparison with a generic convex solver is in tests/reference/test_mle_vs_cvxpy.py.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from gatescope import kernels
from gatescope.channels import partial_trace_output
from gatescope.estimators import factored
from gatescope.estimators.factored import fit_mle_factored
from gatescope.estimators.mle import fit_mle
from gatescope.likelihood import PoissonLikelihood
from gatescope.model import MeasurementModel
from gatescope.reader import read_experiment
from gatescope.synth.noise import build_channel
from gatescope.synth.simulate import channel_from_spec
from support import dark_experiment, simulated_experiment


def is_cptp(choi, tol):
    d = int(round(np.sqrt(choi.shape[0])))
    return (np.abs(choi - choi.conj().T).max() <= tol
            and np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0] >= -tol
            and np.abs(partial_trace_output(choi) - np.eye(d)).max() <= tol)


def relative(a, b):
    return (a - b) / abs(b)


@pytest.fixture(scope="module")
def noisy_cz(tmp_path_factory):
    return simulated_experiment(tmp_path_factory.mktemp("cz"), "CZ+zz:0.1+depolarizing:0.05",
                                shots=800, seed=4)


@pytest.fixture(scope="module")
def dark_cz(tmp_path_factory):
    return dark_experiment(tmp_path_factory.mktemp("dark"), "CZ+zz:0.2")


def test_background_on_noisy_near_unitary_data(make_experiment, rng):
    # Poisson counts of a near-unitary gate on top of a known background: the same
    # maximum as fit_mle (the background enters only through the likelihood)
    exp, truth = make_experiment("CZ+zz:0.2", shots=1.0)
    model = MeasurementModel(exp)
    bg = rng.uniform(0.5, 3.0, exp.n_rows)
    counts = rng.poisson(1000.0 / 6 * model.forward(truth) * 6 + bg)
    lines = ["prep,meas,counts,background"]
    for k in range(exp.n_rows):
        lines.append(f"{exp.prep[k]},{exp.meas[k]},{counts[k]},{bg[k]:.17g}")
    exp.counts_path.write_text("\n".join(lines) + "\n")
    model = MeasurementModel(read_experiment(exp.path))
    new = fit_mle_factored(model)
    old = fit_mle(model)
    assert new.converged, new.stop_reason
    assert is_cptp(new.choi, 1e-10)
    assert relative(new.log_likelihood, old.log_likelihood) >= -1e-9


@pytest.mark.parametrize("spec, dark, seed", [("CZ+zz:0.2", True, 7), ("CZ+zz:0.2", True, 3),
                                              ("sqrtSWAP+dephasing:0.01", True, 4),
                                              ("CZ+depolarizing:0.2", False, 7),
                                              ("random:16:5", False, 2),
                                              ("CNOT+amplitude-damping:0.05", False, 1)])
def test_likelihood_never_below_fit_mle(tmp_path, spec, dark, seed):
    if dark:
        exp, _ = dark_experiment(tmp_path, spec, seed=seed)
    else:
        exp, _ = simulated_experiment(tmp_path, spec, shots=1000, seed=seed)
    model = MeasurementModel(exp)
    new = fit_mle_factored(model)
    old = fit_mle(model)
    assert new.converged and old.converged
    assert relative(new.log_likelihood, old.log_likelihood) >= -1e-9
    assert is_cptp(new.choi, 1e-10)


def test_warm_started_refits_of_resamples(dark_cz):
    # parametric Poisson resamples of the fitted model, refitted from the point estimate,
    # in both warm-start modes
    exp, _ = dark_cz
    model = MeasurementModel(exp)
    point = fit_mle(model)
    means = model.expected_counts(point.choi, point.intensities)
    for ss in np.random.SeedSequence(5).spawn(4):
        counts = np.random.default_rng(ss).poisson(means).astype(float)
        old = fit_mle(model, counts=counts, start=point.choi)
        for warm in ("mix", "rank"):
            new = fit_mle_factored(model, counts=counts, start=point.choi, warm=warm)
            assert new.converged, new.stop_reason
            assert relative(new.log_likelihood, old.log_likelihood) >= -1e-9
            assert is_cptp(new.choi, 1e-10)


def test_certificate_adds_the_missing_kraus_directions(tmp_path):
    # Started at rank one (a random unitary channel, which predicts counts in every row) on
    # data of a full-rank channel, the solver can only reach the maximum by growing the
    # rank through the dual-slack certificate.
    exp, _ = simulated_experiment(tmp_path, "CZ+depolarizing:0.2", shots=1000, seed=7)
    model = MeasurementModel(exp)
    start = channel_from_spec("random:1:9", 2).choi
    assert np.linalg.matrix_rank(start, tol=1e-9) == 1
    new = fit_mle_factored(model, start=start, warm="rank")
    old = fit_mle(model)
    assert new.info["grown"] > 0 and new.info["rank"] >= 12
    assert new.converged, new.stop_reason
    assert relative(new.log_likelihood, old.log_likelihood) >= -1e-9


def test_history_never_decreases_beyond_rounding(dark_cz):
    exp, _ = dark_cz
    fit = fit_mle_factored(MeasurementModel(exp), record=True)
    ll = np.array([h[0] for h in fit.info["history"]])
    assert np.all(np.diff(ll) >= -1e-12 * np.abs(ll[1:]))


# --------------------------------------------------------------------------
# Geometry against independent definitions
# --------------------------------------------------------------------------

def random_point(rng, d, r, slack=0):
    z = rng.normal(size=(d, d * r + slack)) + 1j * rng.normal(size=(d, d * r + slack))
    return kernels.polar_rows_numpy(z)


def random_tangent(rng, z, scale=1.0):
    x = rng.normal(size=z.shape) + 1j * rng.normal(size=z.shape)
    return kernels.tangent_project_numpy(z, scale * x)




def test_two_loop_recursion_equals_the_bfgs_matrix(rng):
    # The two-loop recursion applies the BFGS inverse-Hessian update
    # H ← (I − ρ s yᵀ) H (I − ρ y sᵀ) + ρ s sᵀ pair by pair, oldest first, to H₀ = γ·I with
    # γ = sᵀy/yᵀy of the newest pair (Nocedal & Wright, Numerical Optimization, 2nd ed.
    # (2006), eqs. (6.17), (7.19), (7.20)). With one Kraus operator (r = 1) the Gram metric
    # W†W = Tr J is a number, which γ absorbs, so the kernel must give −P(H g) for that
    # explicit matrix built on real coordinates of the tangent space at a unitary Z.
    d = 2
    z = kernels.polar_rows_numpy(rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d)))
    n = 2 * d * d
    real = lambda v: np.concatenate([v.real.ravel(), v.imag.ravel()])
    cplx = lambda u: (u[: n // 2] + 1j * u[n // 2:]).reshape(d, d)
    proj = np.array([real(kernels.tangent_project_numpy(z, cplx(e))) for e in np.eye(n)]).T
    a = rng.normal(size=(n, n))
    hess = proj @ (a @ a.T + 2 * np.eye(n)) @ proj               # SPD on the tangent space
    s = np.array([cplx(proj @ rng.normal(size=n)) for _ in range(3)])
    y = np.array([cplx(hess @ real(v)) for v in s])
    rho = 1.0 / np.array([real(u) @ real(v) for u, v in zip(s, y)])
    g = cplx(proj @ rng.normal(size=n))
    p, slope = kernels.lbfgs_direction(g, z, s, y, rho, np.arange(3), d, d,
                                        kernels.gram_inverse(z, d, d, 0.3))
    gamma = (real(s[-1]) @ real(y[-1])) / (real(y[-1]) @ real(y[-1]))
    h = gamma * proj
    for u, v, rh in zip(s, y, rho):
        left = np.eye(n) - rh * np.outer(real(u), real(v))
        h = left @ h @ left.T + rh * np.outer(real(u), real(u))
    np.testing.assert_allclose(real(p), -proj @ h @ real(g), rtol=1e-10, atol=1e-12)
    assert slope == pytest.approx(-real(g) @ h @ real(g), rel=1e-10) and slope < 0


def test_polar_retraction_is_the_polar_factor(rng):
    # scipy.linalg.polar (a = p·u with side="left") gives the nearest matrix with orthonormal
    # rows as the unitary factor u (polar decomposition, common practice)
    for d, n in [(2, 6), (4, 20), (8, 40)]:
        x = rng.normal(size=(d, n)) + 1j * rng.normal(size=(d, n))
        u, _ = scipy.linalg.polar(x, side="left")
        np.testing.assert_allclose(kernels.polar_rows(x), u, atol=1e-12)
        q = kernels.polar_rows(x)
        np.testing.assert_allclose(q @ q.conj().T, np.eye(d), atol=1e-13)


def test_tangent_projection_is_an_orthogonal_projection(rng):
    z = random_point(rng, 4, 5)
    x, v = (rng.normal(size=z.shape) + 1j * rng.normal(size=z.shape) for _ in range(2))
    px = kernels.tangent_project(z, x)
    # tangent: Zξ† + ξZ† = 0; idempotent; self-adjoint for Re Tr A†B
    np.testing.assert_allclose(z @ px.conj().T + px @ z.conj().T, 0, atol=1e-12)
    np.testing.assert_allclose(kernels.tangent_project(z, px), px, atol=1e-12)
    assert np.vdot(px, v).real == pytest.approx(np.vdot(x, kernels.tangent_project(z, v)).real,
                                                rel=1e-12)


def test_riemannian_gradient_by_finite_differences(noisy_cz, rng):
    # d/dt ℓ(R_Z(tξ)) at t = 0 equals <P_Z(E), ξ> (calculus; central differences)
    exp, _ = noisy_cz
    model = MeasurementModel(exp)
    lik = PoissonLikelihood(model)
    prob = factored._Problem(lik, 4, 0)
    start = fit_mle(model, maxiter=5).choi
    pt = prob.differentiate(prob.point(factored.factor_choi(start, 4, 0)))
    for _ in range(3):
        xi = random_tangent(rng, pt.z, 1.0)
        xi /= np.linalg.norm(xi)
        h = 1e-4                    # rounding of ℓ (≈1e−9) / h stays below the tolerance
        up = prob.point(kernels.polar_rows(pt.z + h * xi)).ev.log_likelihood
        down = prob.point(kernels.polar_rows(pt.z - h * xi)).ev.log_likelihood
        assert (up - down) / (2 * h) == pytest.approx(np.vdot(pt.rgrad, xi).real, rel=1e-5)


def test_effective_rank_of_known_channels():
    # exp(entropy) of the normalised Choi spectrum: 1 for a unitary channel, d² for the
    # completely depolarising one, 2 for an even mixture of two orthogonal unitaries
    # (the Choi vectors of I and Z are orthogonal: Tr(I†Z) = 0) (common practice)
    assert factored.effective_rank(build_channel("CNOT", [], 2)) == pytest.approx(1.0)
    assert factored.effective_rank(np.eye(16) / 4) == pytest.approx(16.0)
    half = build_channel("I", [("dephasing", 0.5)], 1)          # ρ ↦ ½ρ + ½ZρZ
    assert factored.effective_rank(half) == pytest.approx(2.0)
    assert factored.auto_shift(build_channel("CNOT", [], 2)) == 0.1
    assert factored.auto_shift(np.eye(16) / 4) == 0.001


def test_factored_choi_is_trace_preserving_exactly_on_the_stiefel_manifold(rng):
    # U U† = Tr_out(W W†) (index calculus of the Choi convention J = Σ|K>><<K|)
    z = random_point(rng, 4, 6)
    w = z.reshape(16, -1)
    j = w @ w.conj().T
    np.testing.assert_allclose(partial_trace_output(j), z @ z.conj().T, atol=1e-13)
    assert is_cptp(j, 1e-12)
    # and the columns of W are the Kraus operators: J = Σ_k |K_k>><<K_k|, |K>> = vec of Kᵀ
    from gatescope.channels import choi_from_kraus
    kraus = [w[:, k].reshape(4, 4).T for k in range(w.shape[1])]
    np.testing.assert_allclose(choi_from_kraus(kraus), j, atol=1e-13)
