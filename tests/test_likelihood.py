"""The Poisson likelihood of the rows (gatescope.likelihood): profiled intensities,
its gradient, and repeated rows as separate observations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import gammaln

import gatescope as gs
from gatescope.estimators.mle import fit_mle
from gatescope.likelihood import PoissonLikelihood
from gatescope.model import MeasurementModel


def test_repeated_rows_count_as_observations_in_the_fit(tmp_path, make_experiment):
    # Every row of a complete one-qubit data set written twice: each row's
    # log-likelihood term counts twice, the maximum stays where it was.
    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=400, seed=2)
    lines = ["prep,meas,counts"] + [f"{p},{m},{n}" for p, m, n in zip(exp.prep, exp.meas, exp.counts)]
    folder = tmp_path / "twice"
    folder.mkdir()
    (folder / "counts.csv").write_text("\n".join(lines + lines[1:]) + "\n", encoding="utf-8")
    (folder / "experiment.toml").write_text('qubits = 1\ncounts = "counts.csv"\n', encoding="utf-8")
    exp2 = gs.read_experiment(folder / "experiment.toml")
    assert exp2.n_rows == 2 * exp.n_rows
    once = fit_mle(MeasurementModel(exp))
    twice = fit_mle(MeasurementModel(exp2))
    assert twice.log_likelihood == pytest.approx(2 * once.log_likelihood, rel=1e-8)
    # the same maximiser (each term doubled); measured to agree to 2e-15
    np.testing.assert_allclose(twice.choi, once.choi, atol=1e-12)


def test_value_is_the_poisson_log_likelihood_at_the_profiled_intensities(make_experiment):
    # ℓ = Σ [n log ν − ν − log n!] (docs/file-formats.md), ν = λ_g·p, and without a
    # background the maximising λ_g is Σn/Σp over the group (set ∂ℓ/∂λ = 0)
    exp, truth = make_experiment("CZ+depolarizing:0.1", shots=300, seed=5)
    model = MeasurementModel(exp)
    ev = PoissonLikelihood(model).evaluate(truth)
    n, p, g = exp.counts.astype(float), model.forward(truth), exp.group_index
    lam = np.bincount(g, weights=n) / np.bincount(g, weights=p)
    np.testing.assert_allclose(ev.intensities, lam, rtol=1e-12)
    nu = lam[g] * p
    direct = np.sum(np.where(n > 0, n * np.log(nu), 0.0) - nu - gammaln(n + 1))
    assert ev.log_likelihood == pytest.approx(direct, rel=1e-12)


def test_gradient_by_finite_differences(make_experiment, rng):
    # d/dt ℓ(J + tH) at t = 0 equals Tr(∇ℓ H) for Hermitian H; with profiled intensities the
    # envelope theorem makes the fixed-λ gradient the right one (calculus)
    exp, truth = make_experiment("CZ+depolarizing:0.2", shots=500, seed=6)
    lik = PoissonLikelihood(MeasurementModel(exp))
    ev = lik.evaluate(truth)
    grad = lik.gradient(ev)
    for _ in range(3):
        h = rng.normal(size=(16, 16)) + 1j * rng.normal(size=(16, 16))
        h = 0.5 * (h + h.conj().T)
        h /= np.linalg.norm(h)
        t = 1e-5
        numeric = (lik.evaluate(truth + t * h).log_likelihood
                   - lik.evaluate(truth - t * h).log_likelihood) / (2 * t)
        # central differences: truncation O(t²) and rounding of ℓ (terms of ~1e5) over t,
        # both near 1e-6 here (measured)
        assert numeric == pytest.approx(np.vdot(grad, h).real, rel=1e-5)


def test_tilted_likelihood_adds_the_tilt_and_its_gradient(make_experiment):
    from gatescope.likelihood import Tilt, TiltedLikelihood

    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=400, seed=2)
    model = MeasurementModel(exp)
    base = PoissonLikelihood(model)
    rng = np.random.default_rng(5)
    w = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    w = w + w.conj().T
    tilt = Tilt(linear=w, quadratic=-0.7)
    lik = TiltedLikelihood(base, tilt)
    J = model.centre()
    ev = lik.evaluate(J)
    expected = float(np.vdot(w, J).real) - 0.7 * float(np.vdot(J, J).real)
    assert ev.tilt == pytest.approx(expected, rel=1e-13)
    assert ev.log_likelihood == pytest.approx(base.evaluate(J).log_likelihood + expected,
                                              rel=1e-13)
    # the gradient against central differences along a Hermitian direction
    # (ℓ(J + hΔ) − ℓ(J − hΔ))/2h = Re Tr(G Δ) + O(h²)
    delta = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    delta = 1e-3 * (delta + delta.conj().T)
    h = 1e-4
    numeric = (lik.evaluate(J + h * delta).log_likelihood
               - lik.evaluate(J - h * delta).log_likelihood) / (2 * h)
    assert float(np.vdot(lik.gradient(ev), delta).real) == pytest.approx(numeric, rel=1e-6)
