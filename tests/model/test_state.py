"""The state measurement model (gatescope.model.state): the Born rule on every row, the
qubit-by-qubit maps against dense ones, the adjoint, Pauli coordinates, the likelihood on
a state model, and the identifiability check.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.special import gammaln

from gatescope import GatescopeWarning
from gatescope.conventions import builtin_states, density, kron_all, pauli_basis
from gatescope.likelihood import PoissonLikelihood
from gatescope.model import MeasurementModel, StateModel, build_model
from gatescope.model.state import density_to_pauli, full_grid, pauli_to_density
from support import random_density

PAULI6 = ("H", "V", "D", "A", "R", "L")


def single_effects(labels=PAULI6):
    states = builtin_states()
    return np.array([density(states[lab]) for lab in labels])


def explicit_effects(n, labels=PAULI6):
    """E_m = ⊗ |l_k><l_k| for every label tuple, by conventions.kron_all (qubit 1 leftmost)."""
    states = builtin_states()
    return np.array([kron_all([density(states[lab]) for lab in combo])
                     for combo in itertools.product(labels, repeat=n)])


def pauli6_model(n, counts=None, **kw):
    parts = full_grid(n, 6)
    rows = len(parts)
    return StateModel(single_effects(), parts, np.arange(rows),
                      np.zeros(rows) if counts is None else counts, **kw)


@pytest.mark.parametrize("n", [1, 2, 3, 4])
def test_forward_is_the_born_rule_on_every_row(n):
    # p_k = Tr(E_k ρ) from explicit Kronecker products (Born rule, common practice)
    rng = np.random.default_rng(n)
    labels = ("H", "D", "R", "V", "A")                       # an odd set
    parts = full_grid(n, len(labels))
    meas_index = rng.integers(0, len(parts), size=3 * len(parts))   # repeats, any order
    model = StateModel(single_effects(labels), parts, meas_index, np.zeros(meas_index.size))
    rho = random_density(2 ** n, 2 ** n, n)
    expected = np.einsum("kab,ba->k", explicit_effects(n, labels)[meas_index], rho).real
    np.testing.assert_allclose(model.forward(rho), expected, atol=1e-14)
    assert model.structured == (n >= 3)


@pytest.mark.parametrize("n", [3, 4])
def test_qubitwise_maps_equal_the_dense_ones(n):
    rng = np.random.default_rng(10 + n)
    parts = full_grid(n, 6)
    keep = rng.permutation(len(parts))[: len(parts) // 2]        # an incomplete grid
    meas_index = np.concatenate([keep, keep[:7]])
    args = (single_effects(), parts, meas_index, np.zeros(meas_index.size))
    grid, dense = StateModel(*args, structured=True), StateModel(*args, structured=False)
    x = random_density(2 ** n, 3, n) + 0.3j * (np.eye(2 ** n, k=1) - np.eye(2 ** n, k=-1))
    w = rng.normal(size=meas_index.size)
    np.testing.assert_allclose(grid.forward(x), dense.forward(x), atol=1e-14)
    np.testing.assert_allclose(grid.adjoint(w), dense.adjoint(w), atol=1e-13)
    c = rng.normal(size=4 ** n)
    np.testing.assert_allclose(grid.pauli_table(c)[grid.setting_grid], dense.pauli_table(c),
                               atol=1e-13)
    v = rng.normal(size=grid.grid_size)
    dense_values = v[grid.setting_grid]
    # the adjoint of pauli_table: <pauli_table(c), v> = <c, pauli_table_adjoint(v)>
    assert np.dot(grid.pauli_table(c), v) == pytest.approx(
        np.dot(c, grid.pauli_table_adjoint(v)), rel=1e-12)
    assert np.dot(dense.pauli_table(c), dense_values) == pytest.approx(
        np.dot(c, dense.pauli_table_adjoint(dense_values)), rel=1e-12)


@pytest.mark.parametrize("n,structured", [(1, False), (2, False), (3, True), (3, False), (5, True)])
def test_adjoint_identity(n, structured):
    # Σ_k w_k p_k(ρ) = Tr[A*(w) ρ] for Hermitian ρ (definition of the adjoint)
    rng = np.random.default_rng(20 + n)
    parts = full_grid(n, 6)
    meas_index = rng.integers(0, len(parts), size=len(parts))
    model = StateModel(single_effects(), parts, meas_index, np.zeros(meas_index.size),
                       structured=structured)
    d = 2 ** n
    g = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    rho = g + g.conj().T
    w = rng.normal(size=meas_index.size)
    a = model.adjoint(w)
    np.testing.assert_allclose(a, a.conj().T, atol=1e-13)
    assert np.dot(w, model.forward(rho)) == pytest.approx(np.trace(a @ rho).real, rel=1e-12)


@pytest.mark.parametrize("n", [2, 3])
def test_pauli_coordinates(n):
    # ρ = (1/d) Σ_j Tr(ρ P_j) P_j (Pauli basis, common practice), against conventions.pauli_basis
    d = 2 ** n
    rho = random_density(d, d, 30 + n)
    basis = pauli_basis(n)
    c = np.einsum("ab,jba->j", rho, basis).real
    np.testing.assert_allclose(density_to_pauli(rho, n), c, atol=1e-14)
    np.testing.assert_allclose(pauli_to_density(c, n), rho, atol=1e-15)
    e = np.einsum("mab,jba->mj", explicit_effects(n), basis).real
    np.testing.assert_allclose(pauli6_model(n).pauli_coordinates(), e, atol=1e-14)


def test_likelihood_works_on_a_state_model():
    # PoissonLikelihood against Σ[n log ν − ν − log n!] with the global intensity
    # λ = N/Σp (its closed form without background), written out here; its gradient
    # against a central difference along a traceless Hermitian direction.
    psi = np.array([0, 1, -1, 0]) / np.sqrt(2)
    truth = 0.8 * np.outer(psi, psi) + 0.05 * np.eye(4)
    p_true = np.einsum("mab,ba->m", explicit_effects(2), truth).real
    counts = np.random.default_rng(3).poisson(500 * p_true).astype(float)
    model = pauli6_model(2, counts)
    lik = PoissonLikelihood(model)
    rho = random_density(4, 4, 5)
    p = np.einsum("kab,ba->k", explicit_effects(2), rho).real
    lam = counts.sum() / p.sum()
    nu = lam * p
    direct = np.sum(counts * np.log(nu) - nu - gammaln(counts + 1))
    ev = lik.evaluate(rho)
    assert ev.log_likelihood == pytest.approx(direct, rel=1e-13)
    rng = np.random.default_rng(2)
    g = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    delta = g + g.conj().T
    delta -= np.trace(delta) / 4 * np.eye(4)
    h = 1e-6
    fd = (lik.evaluate(rho + h * delta).log_likelihood
          - lik.evaluate(rho - h * delta).log_likelihood) / (2 * h)
    assert np.vdot(lik.gradient(ev), delta).real == pytest.approx(fd, rel=1e-6)


def test_identifiability():
    full = pauli6_model(2).identifiability()
    assert full.complete and full.rank == 15 and full.meas_rank == 16
    # no circular analysers: every Pauli string with a Y on some qubit is unmeasured
    # (common practice: H, V, D, A have no <Y> component)
    labels = ("H", "V", "D", "A")
    parts = full_grid(2, 4)
    model = StateModel(single_effects(labels), parts, np.arange(len(parts)), np.ones(len(parts)))
    with pytest.warns(GatescopeWarning, match="not measured"):
        ident = model.warn_if_undetermined()
    assert ident.meas_rank == 9 and set(ident.missing_outputs) == {
        lab for lab in ("".join(p) for p in itertools.product("IXYZ", repeat=2)) if "Y" in lab}
    # one projector per basis and one unknown intensity: H, D, R span 3 operator
    # directions but determine only 2 Bloch components (the intensity takes one)
    one = StateModel(single_effects(("H", "D", "R")), full_grid(1, 3), np.arange(3), np.ones(3))
    with pytest.warns(GatescopeWarning, match="determine only 2 of 3"):
        ident = one.warn_if_undetermined()
    assert ident.rank == 2 and ident.meas_rank == 3


def test_identifiability_of_a_large_model_uses_the_product_structure(monkeypatch):
    # above the dense limit the rank comes from rank(e1)^n: exact for the complete grid
    from gatescope.model import state as state_module

    monkeypatch.setattr(state_module, "IDENTIFIABILITY_DENSE_LIMIT", 0)
    ident = pauli6_model(3).identifiability()
    assert ident.rank == 63 and ident.meas_rank == 64 and not ident.missing_outputs
    parts = full_grid(3, 6)
    partial = StateModel(single_effects(), parts, np.arange(100), np.ones(100))
    with pytest.warns(GatescopeWarning, match="upper bound"):
        partial.identifiability()


def test_model_of_a_state_experiment(make_state_experiment):
    exp, rho = make_state_experiment("phi++depolarizing:0.1", shots=500, seed=2)
    model = build_model(exp)
    assert isinstance(model, StateModel) and model.kind == "state" and model.experiment is exp
    assert model.n_rows == 36 and model.n_groups == 1
    expected = np.einsum("kab,ba->k", explicit_effects(2), rho).real
    np.testing.assert_allclose(model.forward(rho), expected, atol=1e-14)
    np.testing.assert_allclose(model.centre(), np.eye(4) / 4)
    with pytest.raises(ValueError, match="state experiment"):
        StateModel.from_experiment(type(exp)(**{**exp.__dict__, "kind": "process"}))


def test_build_model_of_a_process_experiment(make_experiment):
    exp, _ = make_experiment("CZ", shots=100)
    model = build_model(exp)
    assert isinstance(model, MeasurementModel) and model.kind == "process"
    np.testing.assert_allclose(model.centre(), np.eye(16) / 4)          # I_{d²}/d, d = 4
