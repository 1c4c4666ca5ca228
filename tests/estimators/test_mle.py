"""Poisson maximum likelihood (gatescope.estimators.mle).
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope import read_experiment
from gatescope.estimators import estimate
from gatescope.model import MeasurementModel


@pytest.fixture(scope="module")
def noisy_cz(tmp_path_factory):
    from support import simulated_experiment
    return simulated_experiment(tmp_path_factory.mktemp("cz"), "CZ+zz:0.1+depolarizing:0.05",
                                shots=800, seed=4)


def test_mle_is_the_maximum(noisy_cz):
    exp, _ = noisy_cz
    model = MeasurementModel(exp)
    mle = estimate(model, "mle")
    pls = estimate(model, "pls")
    assert mle.log_likelihood >= pls.log_likelihood
    # a small CPTP move away from the optimum does not increase the likelihood
    from gatescope.likelihood import PoissonLikelihood
    lik = PoissonLikelihood(model)
    for t in (1e-3, 1e-2):
        mixed = (1 - t) * mle.choi + t * np.eye(16) / 4
        assert lik.evaluate(mixed).log_likelihood <= mle.log_likelihood + 1e-9


def test_mle_with_known_background_and_efficiency(make_experiment, rng):
    # counts = λ·s·e·p + b with the background and efficiency columns given: the fit recovers truth
    exp, truth = make_experiment("CZ+depolarizing:0.1", shots=1.0)
    model = MeasurementModel(exp)
    p = model.forward(truth)
    seconds = rng.uniform(0.5, 2.0, exp.n_rows)
    eff = rng.uniform(0.7, 1.0, exp.n_rows)
    bg = rng.uniform(0.0, 5.0, exp.n_rows)
    expected = 1e7 * seconds * eff * p + bg
    lines = ["prep,meas,counts,seconds,efficiency,background"]
    for k in range(exp.n_rows):
        lines.append(f"{exp.prep[k]},{exp.meas[k]},{int(round(expected[k]))},{seconds[k]:.17g},{eff[k]:.17g},{bg[k]:.17g}")
    exp.counts_path.write_text("\n".join(lines) + "\n")
    fit = estimate(MeasurementModel(read_experiment(exp.path)), "mle")
    # rounded expected counts at 10⁷: measured 9e-7 on J and 1e-7 on λ (the solver stops
    # on the rounding of the log-likelihood at these counts); ten times that
    assert np.abs(fit.choi - truth).max() < 1e-5
    np.testing.assert_allclose(fit.intensities, 1e7, rtol=1e-6)


def test_state_mle_is_the_maximum(make_state_experiment):
    from gatescope.likelihood import PoissonLikelihood
    from gatescope.model import build_model

    exp, _ = make_state_experiment("psi-+visibility:0.9+depolarizing:0.02", shots=300, seed=2)
    model = build_model(exp)
    mle, pls = estimate(model, "mle"), estimate(model, "pls")
    assert mle.converged and mle.log_likelihood >= pls.log_likelihood
    # a small move towards I/4 (physical) does not increase the likelihood
    lik = PoissonLikelihood(model)
    for t in (1e-3, 1e-2):
        mixed = (1 - t) * mle.choi + t * np.eye(4) / 4
        assert lik.evaluate(mixed).log_likelihood <= mle.log_likelihood + 1e-9
    # a warm start (as in the bootstrap) reaches the same optimum, to the stopping rule
    # (relative change 1e-10 per step with residual 1e-4; measured 1.2e-10 apart)
    warm = estimate(model, "mle", start=mle.choi)
    assert warm.converged
    assert warm.log_likelihood == pytest.approx(mle.log_likelihood, rel=1e-9)
