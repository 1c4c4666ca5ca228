"""Linear inversion and projected least squares (gatescope.estimators.linear).
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope.channels import partial_trace_output
from gatescope.estimators import estimate
from gatescope.model import MeasurementModel


def test_lin_is_trace_preserving_and_reports_its_negativity(make_experiment):
    # few counts on a pure gate: linear inversion goes unphysical (common practice)
    exp, _ = make_experiment("CNOT", shots=50, seed=2)
    fit = estimate(MeasurementModel(exp), "lin")
    np.testing.assert_allclose(partial_trace_output(fit.choi), np.eye(4), atol=1e-12)
    assert fit.info["min_eigenvalue"] < 0
    assert fit.info["min_eigenvalue"] == pytest.approx(np.linalg.eigvalsh(fit.choi)[0], abs=1e-12)


def test_lsqr_path_equals_the_dense_solution(make_experiment, monkeypatch):
    # an incomplete, uneven table of (prep, meas) pairs is solved densely up to
    # linear._DENSE_LIMIT entries and by LSQR above it: both are the same least squares
    from gatescope.estimators import linear

    exp, _ = make_experiment("CZ+depolarizing:0.1", shots=800, seed=3)
    keep = np.random.default_rng(5).random(exp.n_rows) < 0.8
    lines = exp.counts_path.read_text().splitlines()
    exp.counts_path.write_text("\n".join([lines[0]] + [ln for ln, k in zip(lines[1:], keep) if k]
                                         + lines[1:40]) + "\n")       # some rows twice
    from gatescope import read_experiment

    exp = read_experiment(exp.path)
    model = MeasurementModel(exp)
    dense = estimate(model, "lin")
    monkeypatch.setattr(linear, "_DENSE_LIMIT", 0)
    iterative = estimate(model, "lin")
    # LSQR stops at atol = btol = 1e-14; the solutions agree far below the statistical error
    np.testing.assert_allclose(iterative.choi, dense.choi, atol=1e-9)


def test_pls_is_the_projection_of_lin(make_experiment):
    from gatescope.projection import project_cptp

    exp, _ = make_experiment("CNOT", shots=50, seed=2)
    model = MeasurementModel(exp)
    lin, pls = estimate(model, "lin"), estimate(model, "pls")
    np.testing.assert_allclose(pls.choi, project_cptp(lin.choi).choi, atol=1e-10)
    assert pls.info["lin_min_eigenvalue"] == lin.info["min_eigenvalue"]


def test_the_pseudo_inverses_are_computed_once_per_model(make_experiment, monkeypatch):
    # a reproducer: a 5-qubit fit spent minutes in the linear-inversion start, one SVD per
    # pass; the passes (and a bootstrap's refits) now share one pseudo-inverse per factor
    exp, _ = make_experiment("CZ+amplitude-damping:0.2", shots=500, seed=2)
    model = MeasurementModel(exp)
    calls = []
    pinv = np.linalg.pinv
    monkeypatch.setattr(np.linalg, "pinv", lambda a, *k, **kw: calls.append(a.shape) or pinv(a, *k, **kw))
    first = estimate(model, "lin")
    assert first.iterations >= 2 and len(calls) == 2
    again = estimate(model, "lin", counts=np.asarray(exp.counts, dtype=float) + 1.0)
    assert len(calls) == 2 and not np.array_equal(again.choi, first.choi)
def test_state_least_squares_solvers_agree(make_state_experiment, monkeypatch):
    # A complete three-qubit grid is solved by the Kronecker formula, a dense least
    # squares or LSQR: the same constrained problem, the same solution.
    from gatescope.estimators import linear
    from gatescope.model import StateModel, build_model

    exp, _ = make_state_experiment("GHZ+depolarizing:0.3", n_qubits=3, shots=300, seed=4)
    grid = build_model(exp)
    args = (exp.single_meas_effects, exp.meas_parts, exp.meas_index, exp.counts)
    dense = StateModel(*args, structured=False)
    freq = np.asarray(exp.counts, dtype=float) / exp.counts.sum() * 27     # 27 bases
    kron = linear.state_least_squares(grid, freq)
    np.testing.assert_allclose(kron, linear.state_least_squares(dense, freq), atol=1e-12)
    assert kron[0] == 1.0                                    # Tr ρ = 1 exactly
    monkeypatch.setattr(linear, "_DENSE_LIMIT", 0)           # dense model by LSQR too
    # LSQR stops at atol = btol = 1e-14: agreement far below the statistical error
    np.testing.assert_allclose(linear.state_least_squares(dense, freq), kron, atol=1e-9)


def test_state_least_squares_with_repeated_and_missing_rows():
    # unequal multiplicities on a structured model (LSQR) against the dense model
    from gatescope.conventions import builtin_states, density
    from gatescope.estimators import linear
    from gatescope.model import StateModel
    from gatescope.model.state import full_grid

    rng = np.random.default_rng(5)
    single = np.array([density(builtin_states()[s]) for s in "HVDARL"])
    meas_index = np.concatenate([np.arange(216), rng.integers(0, 216, size=100)])
    freq = rng.random(meas_index.size)
    args = (single, full_grid(3, 6), meas_index, np.ones(meas_index.size))
    np.testing.assert_allclose(linear.state_least_squares(StateModel(*args), freq),
                               linear.state_least_squares(StateModel(*args, structured=False),
                                                          freq), atol=1e-9)


def test_state_pls_is_the_projection_of_lin(make_state_experiment):
    from gatescope.model import build_model
    from gatescope.projection import project_density

    exp, _ = make_state_experiment("phi+", shots=40, seed=2)       # few counts: lin unphysical
    model = build_model(exp)
    lin, pls = estimate(model, "lin"), estimate(model, "pls")
    assert lin.info["min_eigenvalue"] < 0
    np.testing.assert_allclose(pls.choi, project_density(lin.choi).choi, atol=1e-15)
    assert pls.info["multiplier"] is None
