"""Lossy or postselected gates: trace = "decreasing" with a known input rate.
"""

from __future__ import annotations

import gatescope as gs
import numpy as np
import pytest
from gatescope.channels import partial_trace_output
from gatescope.synth.noise import build_channel
from gatescope.estimators import estimate
from gatescope.model import MeasurementModel
from gatescope.projection import project_cptni
from support import POSTSELECTED_RATE, postselected_experiment

RATE = POSTSELECTED_RATE


def test_postselected_cz_success_one_ninth(tmp_path):
    # The linear-optics CZ of Ralph, Langford, Bell & White (PRA 65, 062324 (2002))
    # succeeds with probability 1/9; the reconstructed trace Tr J/d is that probability.
    exp, truth = postselected_experiment(tmp_path / "ps", 1 / 9)
    res = gs.fit(exp, "mle")
    total = exp.counts.sum()
    sigma = (1 / 9) / np.sqrt(total)                      # Poisson error of the overall rate
    assert res.figures["trace"].value == pytest.approx(1 / 9, abs=5 * sigma)
    # physical: completely positive and trace non-increasing
    assert np.linalg.eigvalsh(res.choi)[0] >= -1e-10
    assert np.linalg.eigvalsh(partial_trace_output(res.choi)).max() <= 1 + 1e-10
    # F_avg for a trace-decreasing map uses Tr J/d (the README's Conventions)
    f = res.figures
    d = 4
    assert f["average_gate_fidelity"].value == pytest.approx(
        (d * f["process_fidelity"].value + f["trace"].value) / (d + 1), abs=1e-12)
    # 5σ, σ = 2.1e-4 the bootstrap spread of this estimate (measured, 50 resamples)
    assert res.figures["process_fidelity"].value == pytest.approx(
        (1 / 9) * (1 - 0.05 * 15 / 16), abs=1e-3)


def test_projected_least_squares_overestimates_the_trace(tmp_path):
    # Clipping the negative eigenvalues of a noisy linear estimate adds trace; with the
    # trace no longer pinned by trace preservation, pls is biased upwards (common practice:
    # the positive-part projection of a noisy matrix); lin itself is not.
    exp, _ = postselected_experiment(tmp_path / "ps", 1 / 9)
    model = MeasurementModel(exp)
    lin = estimate(model, "lin")
    pls = estimate(model, "pls")
    sigma = (1 / 9) / np.sqrt(exp.counts.sum())
    assert np.trace(lin.choi).real / 4 == pytest.approx(1 / 9, abs=5 * sigma)
    assert np.trace(pls.choi).real >= np.trace(lin.choi).real


def test_mle_beats_pls_and_is_physical(tmp_path):
    exp, _ = postselected_experiment(tmp_path / "ps", 0.3, seed=8)
    model = MeasurementModel(exp)
    mle = estimate(model, "mle")
    pls = estimate(model, "pls")
    assert mle.converged
    assert mle.log_likelihood >= pls.log_likelihood
    assert np.all(mle.intensities == RATE)                 # known, not fitted


def test_trace_decreasing_needs_global_and_rate(tmp_path):
    (tmp_path / "counts.csv").write_text("prep,meas,counts\nH,H,1\n")
    for extra, needle in [('trace = "decreasing"\ninput_rate = 5.0\n', "global"),
                          ('trace = "decreasing"\nnormalization = "global"\n', "input_rate")]:
        (tmp_path / "e.toml").write_text('qubits = 1\ncounts = "counts.csv"\n' + extra)
        with pytest.raises(gs.InputError, match=needle) as info:
            gs.read_experiment(tmp_path / "e.toml")
        assert "e.toml" in str(info.value)


@pytest.mark.parametrize("d", [2, 4])
def test_cptni_projection_against_cvxpy(d):
    # reference: a generic convex solver on min ‖J − X‖_F s.t. J ⪰ 0, Tr_out J ⪯ I
    cp = pytest.importorskip("cvxpy")
    rng = np.random.default_rng(40 + d)
    n = d * d
    x = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    x = 0.3 * (x + x.conj().T) + 0.8 * np.eye(n) / d
    ours = project_cptni(x)
    j = cp.Variable((n, n), hermitian=True)
    problem = cp.Problem(cp.Minimize(cp.norm(j - x, "fro")),
                         [j >> 0, np.eye(d) - cp.partial_trace(j, [d, d], axis=1) >> 0])
    problem.solve(solver="SCS", eps=1e-10, max_iters=100000)
    assert np.abs(ours.choi - j.value).max() < 1e-6
    assert np.linalg.eigvalsh(ours.choi)[0] >= -1e-12
    assert np.linalg.eigvalsh(partial_trace_output(ours.choi)).max() <= 1 + 1e-12


def test_cptni_projection_leaves_tni_points_alone(rng):
    # a point already in the set is its own projection (projection theorem)
    choi = 0.6 * build_channel("H", [("amplitude-damping", 0.3)], 1)
    np.testing.assert_allclose(project_cptni(choi).choi, choi, atol=1e-12)
