"""Fisher information of the row model and the Cramér–Rao bound (gatescope.bench.crb).

Why a finite-difference curvature checks the *expected* information: the
log-likelihood is ℓ = Σ_k [n_k log ν_k − ν_k] + const, with ν_k = λ_g a_k
p_k(J) + b_k linear in J and in λ separately. Its Hessian is

    −Σ_k n_k ∇ν_k ∇ν_kᵀ / ν_k² + Σ_k (n_k/ν_k − 1) ∇²ν_k,

so at counts equal to the expected counts (n = ν, not integers, which the
likelihood accepts) the second sum vanishes and the observed information
equals the expected one, Σ ∇ν ∇νᵀ/ν. The intensities are profiled out; at
n = ν their maximiser for the true J is the true λ, and the curvature of a
profile log-likelihood at the maximum is minus the Schur complement
F_θθ − F_θλ F_λλ⁻¹ F_λθ (standard; e.g. Pawitan, *In All Likelihood*,
2001, on profile likelihood). So −d²ℓ_profile(J + tΔ)/dt² at t = 0 must
equal vᵀ F_eff v, v the coordinates of Δ.
"""

from __future__ import annotations

import numpy as np
import pytest

import gatescope as gs
from gatescope.bench import crb
from gatescope.channels import partial_trace_output
from gatescope.estimators import estimate
from gatescope.likelihood import PoissonLikelihood
from gatescope.model import MeasurementModel
from gatescope.synth.simulate import Channel, channel_from_spec, simulate_counts
from support import simulated_experiment


def _experiment(folder, spec, *, n_qubits=2, shots=1000.0, columns=False, toml_extra="",
                prep=("H", "V", "D", "A", "R", "L"), meas=("H", "V", "D", "A", "R", "L"),
                choi=None, seed=3):
    """Write an experiment of a known channel; with ``columns`` add unequal seconds,
    efficiencies and a background, drawn from ``seed``. Returns (model, J)."""
    channel = (channel_from_spec(spec, n_qubits) if choi is None
               else Channel(choi, n_qubits, None, spec))
    rng = np.random.default_rng(seed)
    rows = simulate_counts(channel, shots=shots, prep_set=prep, meas_set=meas, seed=seed)
    folder.mkdir(parents=True, exist_ok=True)
    head = "prep,meas,counts" + (",seconds,efficiency,background" if columns else "")
    lines = [head]
    for p, m, _, c in rows:
        line = f"{p},{m},{c}"
        if columns:
            line += (f",{rng.uniform(0.7, 1.3):.17g},{rng.uniform(0.6, 1.0):.17g},"
                     f"{rng.uniform(0.5, 4.0):.17g}")
        lines.append(line)
    (folder / "counts.csv").write_text("\n".join(lines) + "\n")
    toml = f'qubits = {n_qubits}\ncounts = "counts.csv"\n' + toml_extra
    (folder / "experiment.toml").write_text(toml)
    return MeasurementModel(gs.read_experiment(folder / "experiment.toml")), channel.choi


def _random_direction(rng, d, trace_preserving=True):
    """A random Hermitian direction of unit Frobenius norm, with Tr_out = 0 if asked.

    Projection onto Tr_out X = 0: X − (Tr_out X) ⊗ I/d (input factor first)."""
    x = rng.normal(size=(d * d, d * d)) + 1j * rng.normal(size=(d * d, d * d))
    x = x + x.conj().T
    if trace_preserving:
        x = x - np.kron(partial_trace_output(x), np.eye(d)) / d
    return x / np.linalg.norm(x)


def _profile_curvature(model, choi, intensities, direction, h=1e-3):
    """−d²ℓ/dt² of the profiled log-likelihood at counts = expected counts, 5-point stencil."""
    lik = PoissonLikelihood(model, counts=model.expected_counts(choi, intensities))
    f = [lik.evaluate(choi + t * h * direction).log_likelihood for t in (-2, -1, 0, 1, 2)]
    return -(-f[0] + 16 * f[1] - 30 * f[2] + 16 * f[3] - f[4]) / (12 * h * h)


# --------------------------------------------------------------------------
# The basis
# --------------------------------------------------------------------------

@pytest.mark.parametrize("directions, d", [(crb.TRACE_PRESERVING, 2), (crb.ALL_DIRECTIONS, 2),
                                           (crb.TRACE_PRESERVING, 4)])
def test_basis_is_orthonormal_hermitian_and_trace_preserving(directions, d):
    m = crb.n_parameters(d, directions)
    basis = np.array([crb.from_coordinates(np.eye(m)[k], d, directions) for k in range(m)])
    flat = basis.reshape(m, -1)
    np.testing.assert_allclose(flat.conj() @ flat.T, np.eye(m), atol=1e-12)
    np.testing.assert_allclose(basis, basis.conj().transpose(0, 2, 1), atol=1e-14)
    if directions == crb.TRACE_PRESERVING:
        assert m == d ** 4 - d ** 2
        for b in basis:
            np.testing.assert_allclose(partial_trace_output(b), 0, atol=1e-14)
    else:
        assert m == d ** 4
    rng = np.random.default_rng(0)
    x = _random_direction(rng, d, directions == crb.TRACE_PRESERVING)
    v = crb.coordinates(x, directions)
    np.testing.assert_allclose(np.linalg.norm(v), 1.0, rtol=1e-12)      # an isometry
    np.testing.assert_allclose(crb.from_coordinates(v, d, directions), x, atol=1e-12)


# --------------------------------------------------------------------------
# Finite-difference curvature of the profiled likelihood
# --------------------------------------------------------------------------

SIX = ("H", "V", "D", "A", "R", "L")

CASES = {
    # (spec, qubits, columns, toml extra, analysers)
    "1q per-preparation": ("random:4:2", 1, False, "", SIX),
    "2q one analyser per basis": ("CNOT+amplitude-damping:0.2+depolarizing:0.1", 2, False, "",
                                  ("H", "D", "R")),
    "2q per-preparation, background, unequal exposures":
        ("CZ+depolarizing:0.1+amplitude-damping:0.05", 2, True, "", SIX),
    "2q global normalisation, background": ("CZ+zz:0.3+depolarizing:0.15", 2, True,
                                            'normalization = "global"\n', SIX),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_information_matches_profile_likelihood_curvature(tmp_path, case):
    spec, n, columns, extra, meas = CASES[case]
    model, choi = _experiment(tmp_path, spec, n_qubits=n, columns=columns, toml_extra=extra,
                              meas=meas)
    lam = np.full(model.n_groups, 1000.0)
    info = crb.fisher_information(model, choi, lam)
    assert info.profiled and info.directions == crb.TRACE_PRESERVING
    np.testing.assert_array_equal(info.matrix, info.matrix.T)
    rng = np.random.default_rng(11)
    for _ in range(4):
        x = _random_direction(rng, model.dim)
        v = crb.coordinates(x)
        dense = v @ info.matrix @ v
        # finite differences of ℓ_profile, through the likelihood the estimators use
        curvature = _profile_curvature(model, choi, lam, x)
        np.testing.assert_allclose(curvature, dense, rtol=2e-6)
        # the matrix-free product through the model's forward map
        np.testing.assert_allclose(crb.information_along(model, choi, lam, x), dense, rtol=1e-10)


def test_fixed_intensities_information_on_all_directions(tmp_path):
    """A trace non-increasing model (known input rate): no profiling, all d⁴ directions."""
    base = channel_from_spec("CZ+depolarizing:0.2", 2).choi
    choi = 0.6 * base + 0.2 * np.eye(16) / 4          # Tr_out J = 0.8·I: inside the set
    model, _ = _experiment(tmp_path, "lossy CZ", choi=choi, columns=True,
                           toml_extra='trace = "decreasing"\nnormalization = "global"\n'
                                      'input_rate = 1000.0\n')
    assert model.fixed_intensities is not None
    info = crb.fisher_information(model, choi)
    assert not info.profiled and info.directions == crb.ALL_DIRECTIONS
    assert info.n_parameters == 256
    rng = np.random.default_rng(5)
    for _ in range(3):
        x = _random_direction(rng, 4, trace_preserving=False)
        v = crb.coordinates(x, crb.ALL_DIRECTIONS)
        dense = v @ info.matrix @ v
        np.testing.assert_allclose(_profile_curvature(model, choi, model.fixed_intensities, x),
                                   dense, rtol=2e-6)
    bound = crb.hs_crb(model, choi)
    assert np.isfinite(bound) and bound > 0
    # the same channel on the face Tr_out J = I of the set: the bound does not apply
    assert crb.hs_crb(model, base) is None


def test_dense_matrix_equals_explicit_design(tmp_path):
    """Kronecker assembly against the plain definition: a rows × m design matrix built by
    mapping every basis element with model.forward, F = Gᵀ diag(w) G − Schur part."""
    model, choi = _experiment(tmp_path, "CZ+zz:0.2+amplitude-damping:0.1+depolarizing:0.1",
                              columns=True)
    lam = np.linspace(800, 1200, model.n_groups)
    info = crb.fisher_information(model, choi, lam)
    m = info.n_parameters
    design = np.array([model.forward(crb.from_coordinates(np.eye(m)[k], 4)) for k in range(m)]).T
    p = model.forward(choi)
    lam_row = lam[model.group_index]
    a = model.exposure
    nu = lam_row * a * p + model.background
    dnu = (lam_row * a)[:, None] * design                             # ∂ν/∂θ
    full = dnu.T @ (dnu / nu[:, None])
    dlam = np.zeros((model.n_rows, model.n_groups))
    dlam[np.arange(model.n_rows), model.group_index] = a * p          # ∂ν/∂λ
    cross = dnu.T @ (dlam / nu[:, None])
    nuis = dlam.T @ (dlam / nu[:, None])
    expected = full - cross @ np.linalg.solve(nuis, cross.T)
    np.testing.assert_allclose(info.matrix, expected, rtol=1e-9, atol=1e-9 * np.abs(expected).max())


# --------------------------------------------------------------------------
# The bound
# --------------------------------------------------------------------------

@pytest.mark.parametrize("n, spec, bound_times_n", [
    # Completely depolarising channel, J = I/d (Tr J = d), six states in and out, no
    # background: p_k = Tr(ρ)Tr(E)/d = 1/d, ν_k = λ/d, ∂ν_k/∂θ_ij = λ r_p[j] e_m[i]/d, so
    # F = (λ/d)·(Σ_m e_m e_mᵀ restricted to i ≠ I) ⊗ (Σ_p r_p r_pᵀ), with
    # Σ_p r_p r_pᵀ = ⊗_q diag(6, 2, 2, 2) for the product six-state set (the same for the
    # effects), and the nuisance cross terms vanish (Σ_m e_m[i] = 0 for i ≠ I). Hence
    # Tr F⁻¹ = (d/λ)·Σ_{i≠I} Σ_j 1/(s_i s_j), s = Π_q (6 for I, 2 otherwise), i.e.
    # (d/λ)·((5/3)^n − 6^−n)·(5/3)^n: 5/λ for one qubit, 275/(9λ) for two.
    # (Derived by hand from the Poisson Fisher information, Cramér 1946.)
    (1, "I+depolarizing:1", 5.0),
    (2, "CZ+depolarizing:1", 275.0 / 9.0),
])
def test_completely_depolarising_closed_form(tmp_path, n, spec, bound_times_n):
    exp, choi = simulated_experiment(tmp_path, spec, n_qubits=n)
    model = MeasurementModel(exp)
    for shots in (100.0, 1000.0, 10000.0):
        bound = crb.hs_crb(model, choi, np.full(model.n_groups, shots))
        np.testing.assert_allclose(bound, bound_times_n / shots, rtol=1e-10)


def test_bound_scales_as_one_over_counts_and_exists_only_at_full_rank(tmp_path):
    exp, choi = simulated_experiment(tmp_path / "a", "CZ+zz:0.2+depolarizing:0.1")
    model = MeasurementModel(exp)
    b1 = crb.hs_crb(model, choi, np.full(model.n_groups, 1000.0))
    b2 = crb.hs_crb(model, choi, np.full(model.n_groups, 4000.0))
    np.testing.assert_allclose(b1 / b2, 4.0, rtol=1e-10)     # no background: F ∝ λ
    unitary = channel_from_spec("CZ").choi
    assert crb.hs_crb(model, unitary, np.full(model.n_groups, 1000.0)) is None
    assert not crb.full_rank(unitary)
    # an incomplete design (two preparations per qubit) leaves directions undetermined
    exp2, _ = simulated_experiment(tmp_path / "b", "CZ+depolarizing:0.1", prep=("H", "V"))
    model2 = MeasurementModel(exp2)
    assert crb.hs_crb(model2, choi, np.full(model2.n_groups, 1000.0)) == float("inf")


def test_size_limit_refuses_before_allocating(tmp_path):
    exp, choi = simulated_experiment(tmp_path, "CZ+depolarizing:0.1")
    model = MeasurementModel(exp)
    with pytest.raises(ValueError, match="use information_along"):
        crb.fisher_information(model, choi, np.full(36, 1000.0), max_bytes=1000)
    assert crb.n_parameters(16, crb.TRACE_PRESERVING) == 65280      # four qubits
    assert 8 * 65280 ** 2 > crb.MAX_FISHER_BYTES


def test_inverse_trace_against_numpy(rng):
    a = rng.normal(size=(700, 700))
    f = a @ a.T + 700 * np.eye(700)
    expected = np.trace(np.linalg.inv(f))
    np.testing.assert_allclose(crb.inverse_trace(f.copy()), expected, rtol=1e-11)
    assert crb.inverse_trace(-np.eye(3)) == float("inf")


@pytest.mark.slow
def test_three_qubits_dense_matches_matrix_free(tmp_path):
    exp, choi = simulated_experiment(tmp_path, "random:64:3", n_qubits=3)
    model = MeasurementModel(exp)
    lam = np.full(model.n_groups, 1000.0)
    info = crb.fisher_information(model, choi, lam)
    assert info.n_parameters == 4032
    rng = np.random.default_rng(2)
    for _ in range(3):
        x = _random_direction(rng, 8)
        v = crb.coordinates(x)
        np.testing.assert_allclose(crb.information_along(model, choi, lam, x),
                                   v @ info.matrix @ v, rtol=1e-10)
    bound = crb.inverse_trace(info.matrix)
    assert np.isfinite(bound) and bound > 0


@pytest.mark.slow
def test_mle_reaches_the_bound_at_ten_thousand_counts(tmp_path):
    """Asymptotic efficiency of the maximum-likelihood estimator (common practice): for a
    full-rank channel well inside the set, its mean squared error approaches Tr F⁻¹."""
    spec = "H+amplitude-damping:0.3+depolarizing:0.2"       # Choi eigenvalues 0.1 … 1.46
    shots = 1e4
    exp, choi = simulated_experiment(tmp_path, spec, n_qubits=1, shots=shots)
    model = MeasurementModel(exp)
    lam = np.full(model.n_groups, shots)
    bound = crb.hs_crb(model, choi, lam)
    nu = model.expected_counts(choi, lam)
    rng = np.random.default_rng(2027)
    errors = np.array([np.linalg.norm(estimate(model, "mle", counts=rng.poisson(nu).astype(float))
                                      .choi - choi) ** 2 for _ in range(2000)])
    ratio = errors.mean() / bound
    stderr = errors.std(ddof=1) / np.sqrt(errors.size) / bound      # about 0.01
    assert stderr < 0.03
    assert 0.8 <= ratio <= 1.3


# --------------------------------------------------------------------------
# States: the same information on the trace-zero directions of a density matrix
# --------------------------------------------------------------------------

def _state_experiment(folder, rho, *, n_qubits, shots=1000.0, meas=SIX, per_group=False,
                      columns=False, seed=4):
    """Write a state experiment (every product analyser of ``meas``) of the density matrix
    ``rho``; with ``per_group`` one normalisation group per analyser basis (the part of the
    label in H/V, D/A or R/L of every qubit), with ``columns`` unequal seconds,
    efficiencies and a background. Returns the StateModel."""
    from gatescope.model import StateModel
    from gatescope.synth.state import simulate_state_counts

    state = Channel(rho, n_qubits, None, "test state")
    rows = simulate_state_counts(state, shots=shots, meas_set=meas, seed=seed)
    rng = np.random.default_rng(seed)
    basis = {"H": "z", "V": "z", "D": "x", "A": "x", "R": "y", "L": "y"}
    head = "meas,counts" + (",seconds,efficiency,background" if columns else "") + \
        (",group" if per_group else "")
    lines = [head]
    for m, _, c in rows:
        line = f"{m},{c}"
        if columns:
            line += (f",{rng.uniform(0.7, 1.3):.17g},{rng.uniform(0.6, 1.0):.17g},"
                     f"{rng.uniform(0.5, 4.0):.17g}")
        if per_group:
            line += "," + "".join(basis[s] for s in m)
        lines.append(line)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "counts.csv").write_text("\n".join(lines) + "\n")
    toml = f'kind = "state"\nqubits = {n_qubits}\ncounts = "counts.csv"\n'
    if per_group:
        toml += 'normalization = "per-group"\n'
    (folder / "experiment.toml").write_text(toml)
    return StateModel.from_experiment(gs.read_experiment(folder / "experiment.toml"))


def _random_trace_zero(rng, d):
    x = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
    x = x + x.conj().T
    x = x - np.trace(x).real * np.eye(d) / d
    return x / np.linalg.norm(x)


@pytest.mark.parametrize("d", [2, 4, 8])
def test_state_basis_is_orthonormal_hermitian_and_trace_zero(d):
    m = crb.n_parameters(d, crb.TRACE_ZERO)
    assert m == d * d - 1
    basis = np.array([crb.from_coordinates(np.eye(m)[k], d, crb.TRACE_ZERO) for k in range(m)])
    flat = basis.reshape(m, -1)
    np.testing.assert_allclose(flat.conj() @ flat.T, np.eye(m), atol=1e-12)
    np.testing.assert_allclose(basis, basis.conj().transpose(0, 2, 1), atol=1e-14)
    np.testing.assert_allclose(np.trace(basis, axis1=1, axis2=2), 0, atol=1e-14)
    x = _random_trace_zero(np.random.default_rng(1), d)
    v = crb.coordinates(x, crb.TRACE_ZERO)
    np.testing.assert_allclose(np.linalg.norm(v), 1.0, rtol=1e-12)      # an isometry
    np.testing.assert_allclose(crb.from_coordinates(v, d, crb.TRACE_ZERO), x, atol=1e-12)


@pytest.mark.parametrize("r", [(0.0, 0.0, 0.8), (0.3, -0.5, 0.4), (0.0, 0.0, 0.0)])
def test_single_qubit_state_closed_form(tmp_path, r):
    """One qubit, the six Pauli projectors, N expected counts per basis, one unknown
    intensity. Derived by hand from the Fisher information of Poisson counts,
    I = Σ_k (∂ν_k)²/ν_k (common practice): with Bloch vector r, ν_± = N(1 ± r_a)/2 for
    axis a, and the coordinate θ_a = Tr(σ_a Δρ)/√2 moves r_a by √2 θ_a, so
    ∂ν_±/∂θ_a = ±N/√2 and F_aa = (N²/2)·Σ_± 1/ν_± = 2N/(1 − r_a²), diagonal. The
    intensity's cross terms Σ_± (∂ν_±/∂θ_a)(∂ν_±/∂λ)/ν_± = Σ_± ±1/√2 vanish, so profiling
    costs nothing and Tr F⁻¹ = Σ_a (1 − r_a²)/(2N) = (3 − |r|²)/(2N) — the variance of
    the frequency estimate of r, (1 − r_a²)/N per axis, times ‖Δρ‖²_F = |Δr|²/2
    (common practice)."""
    r = np.array(r)
    paulis = pauli_basis_1()
    rho = 0.5 * (np.eye(2) + np.einsum("a,aij->ij", r, paulis))
    shots = 1000.0
    model = _state_experiment(tmp_path, rho, n_qubits=1, shots=shots)
    info = crb.fisher_information(model, rho, np.full(model.n_groups, shots))
    assert info.profiled and info.directions == crb.TRACE_ZERO
    # Pauli order I, X, Y, Z (README): the coordinates are those of X, Y, Z
    np.testing.assert_allclose(info.matrix, np.diag(2 * shots / (1 - r ** 2)), rtol=1e-12,
                               atol=1e-9)
    np.testing.assert_allclose(crb.hs_crb(model, rho, np.full(1, shots)),
                               (3 - r @ r) / (2 * shots), rtol=1e-12)


def pauli_basis_1():
    """σ_x, σ_y, σ_z written out (common practice)."""
    return np.array([[[0, 1], [1, 0]], [[0, -1j], [1j, 0]], [[1, 0], [0, -1]]], dtype=complex)


STATE_CASES = {
    # (qubits, per-group normalisation, extra columns, analysers)
    "1q global": (1, False, False, SIX),
    "2q global, background, unequal exposures": (2, False, True, SIX),
    "2q per-group (one intensity per basis)": (2, True, False, SIX),
    "2q per-group, background": (2, True, True, SIX),
    "3q global, four analysers": (3, False, False, ("H", "V", "D", "R")),
}


@pytest.mark.parametrize("case", sorted(STATE_CASES))
def test_state_information_matches_profile_likelihood_curvature(tmp_path, case):
    """Finite differences of the profiled log-likelihood (module docstring), through the
    likelihood the estimators use, against vᵀ F v; and the plain definition
    F = Gᵀ diag(w) G − Schur part with the design G built column by column from
    model.forward of the basis elements."""
    from support import random_density

    n, per_group, columns, meas = STATE_CASES[case]
    d = 2 ** n
    rho = random_density(d, d, seed=n + 10 * per_group + 100 * columns)
    model = _state_experiment(tmp_path, rho, n_qubits=n, per_group=per_group, columns=columns,
                              meas=meas)
    assert model.n_groups == (3 ** n if per_group else 1)
    lam = np.linspace(900.0, 1100.0, model.n_groups)
    info = crb.fisher_information(model, rho, lam)
    assert info.profiled and info.n_parameters == d * d - 1
    rng = np.random.default_rng(3)
    for _ in range(3):
        x = _random_trace_zero(rng, d)
        v = crb.coordinates(x, crb.TRACE_ZERO)
        dense = v @ info.matrix @ v
        np.testing.assert_allclose(_profile_curvature(model, rho, lam, x), dense, rtol=2e-6)
        np.testing.assert_allclose(crb.information_along(model, rho, lam, x), dense, rtol=1e-10)
    m = info.n_parameters
    design = np.array([model.forward(crb.from_coordinates(np.eye(m)[k], d, crb.TRACE_ZERO))
                       for k in range(m)]).T
    p = model.forward(rho)
    lam_row = lam[model.group_index]
    a = model.exposure
    nu = lam_row * a * p + model.background
    dnu = (lam_row * a)[:, None] * design
    dlam = np.zeros((model.n_rows, model.n_groups))
    dlam[np.arange(model.n_rows), model.group_index] = a * p
    cross = dnu.T @ (dlam / nu[:, None])
    expected = dnu.T @ (dnu / nu[:, None]) - cross @ np.linalg.solve(
        dlam.T @ (dlam / nu[:, None]), cross.T)
    np.testing.assert_allclose(info.matrix, expected, rtol=1e-9,
                               atol=1e-9 * np.abs(expected).max())


def test_state_bound_needs_full_rank_and_a_complete_design(tmp_path):
    from support import random_density

    rho = random_density(4, 4, seed=8)
    model = _state_experiment(tmp_path / "a", rho, n_qubits=2)
    b1 = crb.hs_crb(model, rho, np.full(1, 1000.0))
    b2 = crb.hs_crb(model, rho, np.full(1, 4000.0))
    np.testing.assert_allclose(b1 / b2, 4.0, rtol=1e-10)          # no background: F ∝ λ
    assert crb.hs_crb(model, random_density(4, 2, seed=8), np.full(1, 1000.0)) is None
    # H, V and D only: the Y components are not measured, F is singular
    partial = _state_experiment(tmp_path / "b", rho, n_qubits=2, meas=("H", "V", "D"))
    assert crb.hs_crb(partial, rho, np.full(1, 1000.0)) == float("inf")


def test_two_qubit_maximally_mixed_state_closed_form(tmp_path):
    """ρ = I/4, the 36 products of the six projectors, N expected counts per analyser basis,
    no background: every row has ν = N/4 and ∂ν/∂θ_j = N e_m[j]/2 (θ_j the coordinate on
    P_j/2), so F = 4N·Σ_m g_m g_mᵀ with g_m = e_m/2 restricted to j ≠ II, and
    Σ_m e_m e_mᵀ = diag(6, 2, 2, 2) ⊗ diag(6, 2, 2, 2) for the product six-projector set;
    the intensity's cross terms vanish (Σ_m e_m[j] = 0 for j ≠ II). Hence F_jj = N·s_j with
    s_j = Π_q (6 for I, 2 otherwise) and Tr F⁻¹ = (1/N)(6/12 + 9/4) = 11/(4N). (Derived by
    hand from the Poisson Fisher information, Cramér 1946.)"""
    model = _state_experiment(tmp_path, np.eye(4) / 4, n_qubits=2)
    for shots in (100.0, 1000.0, 10000.0):
        np.testing.assert_allclose(crb.hs_crb(model, np.eye(4) / 4, np.full(1, shots)),
                                   11.0 / (4.0 * shots), rtol=1e-12)
