"""Profile-likelihood intervals (gatescope.profile) and the tilted fit behind them.

Outside references:
- cvxpy (Diamond & Boyd, J. Mach. Learn. Res. 17, 1 (2016)) as a generic convex
  solver: the profile at a value f is the maximum of the Poisson log-likelihood over
  CPTP maps (or density matrices) with the figure fixed at f, solved here directly
  with that equality constraint (solver SCS, O'Donoghue et al., J. Optim. Theory Appl.
  169, 1042 (2016)).
- The Kraus-operator formula of the process fidelity, F_pro = Σ_k |Tr(U†K_k)|²/d²
  (Nielsen, Phys. Lett. A 303, 249 (2002)).
- χ²₁ quantiles from scipy.stats (common practice).

With per-preparation normalisation, complete analyser bases and no background, the
profiled Poisson log-likelihood is Σ_k n_k log p_k(J) plus a constant (the fitted
intensities do not depend on J), so the reference problems below maximise
Σ_k n_k log p_k over the physical set with the figure fixed.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2

from gatescope.channels import kraus_from_choi
from gatescope.conventions import named_gate
from gatescope.estimators import fit_mle
from gatescope.likelihood import PoissonLikelihood, Tilt
from gatescope.merit.process import average_gate_fidelity, process_fidelity
from gatescope.model import build_model
from gatescope.profile import (FIT_OPTIONS, INVERTED_FIGURES, Profile, average_gate_fidelity_figure,
                               default_nulls, named_figure, one_sided_cutoff, pauli_twirl,
                               process_fidelity_figure, profile_figures, profiled_names,
                               purity_figure, state_fidelity_figure, two_sided_cutoff)
from gatescope.synth.noise import random_channel

SCS_TIGHT = dict(eps_abs=1e-9, eps_rel=1e-9, max_iters=200_000)
#: The deviance at a computed end equals the cutoff to the search's tolerance
#: (profile.DEVIANCE_TOL = 1e−3) plus the re-search of `deviance_at`.
END_TOL = 5e-3


# --------------------------------------------------------------------------
# The tilted fit
# --------------------------------------------------------------------------

def test_zero_tilt_gives_the_untilted_fit_exactly(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.01", shots=500, seed=3, n_qubits=1)
    model = build_model(exp)
    plain = fit_mle(model)
    for tilt in (Tilt(), Tilt(linear=np.zeros((4, 4))), Tilt(quadratic=0.0)):
        tilted = fit_mle(model, tilt=tilt)
        assert np.array_equal(tilted.choi, plain.choi)
        assert tilted.log_likelihood == plain.log_likelihood
        assert tilted.iterations == plain.iterations
        assert tilted.info["objective"] == plain.log_likelihood


def test_tilted_fit_reports_the_untilted_likelihood(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.01", shots=500, seed=3, n_qubits=1)
    model = build_model(exp)
    fig = process_fidelity_figure(exp.target)
    fit = fit_mle(model, tilt=fig.tilt(-2000.0))
    lik = PoissonLikelihood(model).evaluate(fit.choi).log_likelihood
    assert fit.log_likelihood == pytest.approx(lik, abs=1e-9)
    assert fit.info["objective"] == pytest.approx(lik - 2000.0 * fig.value(fit.choi), abs=1e-6)
    # the tilt pulls the fidelity down from the estimate's
    assert fig.value(fit.choi) < fig.value(fit_mle(model).choi)


def test_tilt_is_not_a_user_option():
    from gatescope.errors import InputError
    from gatescope.estimators import check_options

    with pytest.raises(InputError):
        check_options("mle-pg", {"tilt": Tilt()})


# --------------------------------------------------------------------------
# The figures as linear (and quadratic) functions of J
# --------------------------------------------------------------------------

@pytest.mark.parametrize("n,gate", [(1, "H"), (1, "S"), (2, "CZ"), (2, "CNOT")])
def test_figure_operators_give_the_figures(n, gate):
    u = named_gate(gate)
    d = 2 ** n
    for seed, rank in ((1, 1), (2, 2), (3, d * d)):
        J = random_channel(n, rank, seed=seed)
        f_pro = process_fidelity_figure(u).value(J)
        # Nielsen, Phys. Lett. A 303, 249 (2002): F_pro = Σ_k |Tr(U†K_k)|²/d²
        assert f_pro == pytest.approx(sum(abs(np.trace(u.conj().T @ k)) ** 2
                                          for k in kraus_from_choi(J)) / d ** 2, abs=1e-12)
        assert f_pro == pytest.approx(process_fidelity(J, u), abs=1e-14)
        assert average_gate_fidelity_figure(u).value(J) == pytest.approx(
            average_gate_fidelity(J, u), abs=1e-14)
        rho = J / d          # the normalised Choi state of a trace-preserving map
        assert purity_figure(d).value(J) == pytest.approx(np.trace(rho @ rho).real, abs=1e-12)


def test_state_figures():
    rng = np.random.default_rng(4)
    psi = rng.normal(size=4) + 1j * rng.normal(size=4)
    psi /= np.linalg.norm(psi)
    g = rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4))
    rho = g @ g.conj().T
    rho /= np.trace(rho).real
    # <ψ|ρ|ψ> for a pure target, given as a ket or as its projector
    for target in (psi, np.outer(psi, psi.conj())):
        assert state_fidelity_figure(target).value(rho) == pytest.approx(
            (psi.conj() @ rho @ psi).real, abs=1e-13)
    assert purity_figure(4, "state").value(rho) == pytest.approx(np.trace(rho @ rho).real,
                                                                 abs=1e-13)
    with pytest.raises(ValueError):
        state_fidelity_figure(np.eye(4) / 4)       # mixed target: not linear


def test_cutoffs_are_chi2_quantiles():
    # scipy.stats.chi2 (common practice): χ²₁ at 0.95 is 3.8415, at 0.90 2.7055
    assert two_sided_cutoff(0.95) == pytest.approx(chi2.ppf(0.95, 1), rel=1e-12)
    assert one_sided_cutoff(0.95) == pytest.approx(chi2.ppf(0.90, 1), rel=1e-12)
    assert two_sided_cutoff(0.99) == pytest.approx(chi2.ppf(0.99, 1), rel=1e-12)


# --------------------------------------------------------------------------
# The profile against a generic convex solver
# --------------------------------------------------------------------------

def reduced_log_likelihood(model, J) -> float:
    """Σ_k n_k log p_k(J) over rows with counts."""
    n = np.asarray(model.counts, dtype=float)
    p = model.forward(J)
    keep = n > 0
    return float(n[keep] @ np.log(p[keep]))


def process_design(exp) -> np.ndarray:
    """Rows a_k with a_k · vec_F(J) = Tr[(ρ_k^T ⊗ E_k) J] (vec_F: column stacking),
    from the experiment's preparation states and analyser effects."""
    rows = []
    for pi, mi in zip(exp.prep_index, exp.meas_index):
        m = np.kron(exp.prep_states[pi].T, exp.meas_effects[mi])
        rows.append(m.T.reshape(-1, order="F"))
    return np.array(rows)


def cvxpy_constrained_max(exp, figure, value):
    """max Σ n log p over CPTP J with the figure equal to ``value`` (a linear figure) or
    the purity at most ``value`` (its lower side, where that bound is active)."""
    import cvxpy as cp

    d = exp.dim
    n = np.asarray(exp.counts, dtype=float)
    keep = n > 0
    a = process_design(exp)[keep]
    J = cp.Variable((d * d, d * d), hermitian=True)
    p = cp.real(a @ cp.vec(J, order="F"))
    constraints = [J >> 0, cp.partial_trace(J, [d, d], axis=1) == np.eye(d)]
    if figure.quadratic:
        constraints.append(cp.sum_squares(cp.real(J)) + cp.sum_squares(cp.imag(J))
                           <= value / figure.scale)
    else:
        constraints.append(cp.real(cp.trace(figure.operator @ J)) == value)
    problem = cp.Problem(cp.Maximize(n[keep] @ cp.log(p)), constraints)
    problem.solve(solver="SCS", **SCS_TIGHT)
    assert problem.status in ("optimal", "optimal_inaccurate"), problem.status
    return problem.value


@pytest.mark.parametrize("name", ["process_fidelity", "average_gate_fidelity", "purity"])
def test_one_qubit_profile_matches_cvxpy(make_experiment, name):
    pytest.importorskip("cvxpy")
    exp, _ = make_experiment("H+depolarizing:0.03", shots=400, seed=11, n_qubits=1)
    model = build_model(exp)
    figure = named_figure(name, exp.target, 2)
    prof = Profile(model, figure)
    est = prof.estimate
    # points on both sides (purity: below its estimate, where the problem is convex)
    mus = (-1500.0, -300.0) if figure.quadratic else (-600.0, -150.0, 150.0, 600.0)
    for mu in mus:
        point = prof.at(mu)
        assert point.converged
        assert np.sign(point.value - est) == np.sign(mu)
        ours = reduced_log_likelihood(model, point.choi)
        # cvxpy as generic convex solver: the constrained maximum at the same value
        ref = cvxpy_constrained_max(exp, figure, point.value)
        # a profile point is feasible, so ours ≤ ref up to SCS's tolerance; and it is the
        # maximum: equal within the solvers' stopping rules
        assert ours == pytest.approx(ref, abs=2e-4), (mu, point.value)


def test_state_fidelity_profile_matches_cvxpy(make_state_experiment):
    cp = pytest.importorskip("cvxpy")
    exp, _ = make_state_experiment("psi-+depolarizing:0.05", shots=300, seed=4)
    model = build_model(exp)
    figure = named_figure("state_fidelity", exp.target_state, model.dim, "state")
    prof = Profile(model, figure)
    for mu in (-400.0, 400.0):
        point = prof.at(mu)
        assert point.converged
        ours = reduced_log_likelihood(model, point.choi)
        # cvxpy as generic convex solver: max Σ n log p(ρ) over density matrices with
        # <ψ|ρ|ψ> fixed; p(ρ) through the model's own forward map, column by column
        d = model.dim
        n = np.asarray(model.counts, dtype=float)
        keep = n > 0
        basis = []
        for k in range(d * d):
            e = np.zeros(d * d, dtype=complex)
            e[k] = 1.0
            basis.append(model.forward(e.reshape(d, d, order="F")))
        a_re = np.array(basis).T[keep]
        basis_i = []
        for k in range(d * d):
            e = np.zeros(d * d, dtype=complex)
            e[k] = 1j
            basis_i.append(model.forward(e.reshape(d, d, order="F")))
        a_im = np.array(basis_i).T[keep]
        rho = cp.Variable((d, d), hermitian=True)
        v = cp.vec(rho, order="F")
        p = a_re @ cp.real(v) + a_im @ cp.imag(v)
        problem = cp.Problem(cp.Maximize(n[keep] @ cp.log(p)),
                             [rho >> 0, cp.real(cp.trace(rho)) == 1,
                              cp.real(cp.trace(figure.operator @ rho)) == point.value])
        problem.solve(solver="SCS", **SCS_TIGHT)
        assert ours == pytest.approx(problem.value, abs=2e-4), (mu, point.value)


# --------------------------------------------------------------------------
# Intervals
# --------------------------------------------------------------------------

@pytest.fixture(scope="module")
def near_unitary(tmp_path_factory):
    from support import simulated_experiment
    exp, truth = simulated_experiment(tmp_path_factory.mktemp("nu"), "H+depolarizing:0.004",
                                      shots=1000, seed=8, n_qubits=1)
    model = build_model(exp)
    return exp, model, fit_mle(model, **FIT_OPTIONS)


@pytest.mark.parametrize("name", ["process_fidelity", "average_gate_fidelity", "purity"])
def test_interval_contains_the_estimate_and_its_ends_sit_at_the_cutoff(near_unitary, name):
    exp, model, mle = near_unitary
    prof = Profile(model, named_figure(name, exp.target, 2), mle=mle)
    two = prof.interval(0.95)
    low = prof.lower_bound(0.95)
    # the lower bound lies between the two-sided lower end and the estimate
    assert two.low < low.low < two.estimate < two.high <= 1.0
    # the deviance at the ends, recomputed by a search on the figure's value
    assert prof.deviance_at(two.low) == pytest.approx(chi2.ppf(0.95, 1), abs=END_TOL)
    assert prof.deviance_at(low.low) == pytest.approx(chi2.ppf(0.90, 1), abs=END_TOL)
    if two.high < 1.0:
        assert prof.deviance_at(two.high) == pytest.approx(chi2.ppf(0.95, 1), abs=END_TOL)
    assert prof.deviance_at(0.5 * (two.low + two.estimate)) < chi2.ppf(0.95, 1)
    assert two.converged and low.converged
    # purity above its estimate is a non-concave search; every other end is exact
    assert two.exact == (name != "purity") and low.exact


def test_average_gate_fidelity_interval_is_the_image_of_the_process_fidelity_one(near_unitary):
    # F_avg = (d F_pro + 1)/(d + 1) for trace-preserving maps (Horodecki, Horodecki &
    # Horodecki, PRA 60, 1888 (1999); Nielsen, Phys. Lett. A 303, 249 (2002)), and a
    # profile-likelihood interval does not depend on the parametrisation
    exp, model, mle = near_unitary
    pro = Profile(model, process_fidelity_figure(exp.target), mle=mle).interval(0.95)
    avg = Profile(model, average_gate_fidelity_figure(exp.target), mle=mle).interval(0.95)
    image = lambda f: (2 * f + 1) / 3          # noqa: E731
    assert avg.low == pytest.approx(image(pro.low), abs=1e-6)
    assert avg.high == pytest.approx(image(pro.high), abs=1e-6)


@pytest.fixture(scope="module")
def perfect_data(tmp_path_factory):
    # counts equal to the expected counts of the ideal gate: no count where the gate
    # predicts none, so the estimate is the target itself (F = 1 to rounding)
    from support import simulated_experiment
    exp, truth = simulated_experiment(tmp_path_factory.mktemp("pd"), "H", shots=1000, seed=1,
                                      n_qubits=1, exact=True)
    model = build_model(exp)
    return exp, model, fit_mle(model, **FIT_OPTIONS)


@pytest.mark.parametrize("name", ["process_fidelity", "average_gate_fidelity"])
def test_estimate_on_the_boundary(perfect_data, name):
    exp, model, mle = perfect_data
    prof = Profile(model, named_figure(name, exp.target, 2), mle=mle)
    assert prof.estimate == pytest.approx(1.0, abs=1e-9)
    assert prof.edge_deviance(+1) == pytest.approx(0.0, abs=1e-6)
    assert prof.consistent_with_top(0.95)
    two = prof.interval(0.95)
    low = prof.lower_bound(0.95)
    assert two.high == 1.0 and two.touches_boundary
    assert two.low < low.low < 1.0
    # one-sided bound at D = z²_{0.95}, two-sided end at D = χ²₁(0.95), measured from F = 1
    assert prof.deviance_at(low.low) == pytest.approx(chi2.ppf(0.90, 1), abs=END_TOL)
    assert prof.deviance_at(two.low) == pytest.approx(chi2.ppf(0.95, 1), abs=END_TOL)


def test_purity_on_the_boundary(perfect_data):
    exp, model, mle = perfect_data
    prof = Profile(model, purity_figure(2), mle=mle)
    assert prof.estimate == pytest.approx(1.0, abs=1e-9)
    two = prof.interval(0.95)
    assert two.high == pytest.approx(1.0, abs=1e-9) and two.touches_boundary
    assert prof.deviance_at(two.low) == pytest.approx(chi2.ppf(0.95, 1), abs=END_TOL)


def test_far_from_the_boundary_the_flag_is_off(near_unitary):
    exp, model, mle = near_unitary
    prof = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    # F = 0.997 with about 1.8e4 counts: F = 1 lies many standard errors away
    assert prof.edge_deviance(+1) > chi2.ppf(0.95, 1)
    assert prof.consistent_with_top(0.95) is False
    assert not prof.interval(0.95).touches_boundary


def test_profile_needs_a_trace_preserving_model_for_purity(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.01", shots=200, seed=3, n_qubits=1)
    model = build_model(exp)
    model.trace_decreasing = True
    with pytest.raises(ValueError):
        Profile(model, purity_figure(2))
    assert "purity" not in profiled_names(model, exp.target)


def test_profile_figures_of_a_state(make_state_experiment):
    exp, rho = make_state_experiment("psi-+depolarizing:0.02", shots=500, seed=7)
    model = build_model(exp)
    found = profile_figures(model, exp.target_state, interval=True, lower_bound=True)
    assert set(found) == {"state_fidelity", "purity"}
    for prof in found.values():
        assert prof.interval.low <= prof.lower.low <= prof.estimate <= prof.interval.high


def test_named_figure_rejects_unknown_names():
    with pytest.raises(ValueError):
        named_figure("unitarity", named_gate("H"), 2)
    with pytest.raises(ValueError):
        named_figure("process_fidelity", None, 2)


# --------------------------------------------------------------------------
# Test inversion
# --------------------------------------------------------------------------

@pytest.mark.parametrize("n,gate", [(1, "H"), (2, "CZ")])
def test_pauli_twirl_is_the_group_average(n, gate):
    # Pauli twirl as the average over the Pauli group, T(Ψ)(ρ) = d⁻² Σ_P P Ψ(P ρ P) P
    # (Dankert, Cleve, Emerson & Livine, Phys. Rev. A 80, 012304 (2009)), applied to
    # U†∘Φ and followed by U, against the chi-diagonal form of `pauli_twirl`
    from gatescope.channels import apply_channel, choi_from_unitary, compose
    from gatescope.conventions import pauli_basis

    u = named_gate(gate)
    d = 2 ** n
    phi = random_channel(n, rank=3, seed=11 + n)
    err = compose(phi, choi_from_unitary(u.conj().T))         # U†∘Φ: Φ first
    rng = np.random.default_rng(5)
    twirled = pauli_twirl(phi, u)
    for _ in range(3):
        a = rng.normal(size=(d, d)) + 1j * rng.normal(size=(d, d))
        rho = a @ a.conj().T
        rho /= np.trace(rho)
        avg = sum(p @ apply_channel(err, p @ rho @ p) @ p for p in pauli_basis(n)) / d ** 2
        want = u @ avg @ u.conj().T
        assert np.allclose(apply_channel(twirled, rho), want, atol=1e-12)
    # the twirl keeps the process fidelity to U (Nielsen's Kraus formula, Phys. Lett. A
    # 303, 249 (2002))
    fid = lambda j: sum(abs(np.trace(u.conj().T @ k)) ** 2 for k in kraus_from_choi(j)) / d ** 2  # noqa: E731
    assert fid(twirled) == pytest.approx(fid(phi), abs=1e-12)


def test_test_inversion_lower_bound(near_unitary):
    exp, model, mle = near_unitary
    prof = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    profile_bound = prof.lower_bound(0.95)
    bound = prof.test_inversion_lower_bound(0.95, samples=60, seed=3)
    assert bound.method == "test-inversion" and bound.sided == "lower"
    assert bound.low < profile_bound.estimate and bound.high == 1.0
    # its cutoff is the deviance at the bound
    assert prof.deviance_at(bound.low) == pytest.approx(bound.cutoff, abs=END_TOL)
    # at the bound the simulated p-value is α = 0.05 up to its Monte Carlo error (binomial,
    # B = 60: standard error 0.028), with the same random numbers as the search
    end = prof.end_point(-1, bound.cutoff)
    p = prof.exceedance(end.choi, prof.statistic(), samples=60, seed=3)
    assert 0.0 < p - 1.0 / 61 <= 0.05 + 2 * 0.028
    # a lower level gives a higher bound (same random numbers)
    assert prof.test_inversion_lower_bound(0.80, samples=60, seed=3).low > bound.low
    # the same seed gives the same bound; the p-values come from the simulated fits
    again = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    assert again.test_inversion_lower_bound(0.95, samples=60, seed=3).low == bound.low
    assert prof.simulated_fits >= 60


def test_test_inversion_interval(near_unitary):
    exp, model, mle = near_unitary
    prof = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    two = prof.test_inversion_interval(0.90, samples=60, seed=4)
    bound = prof.test_inversion_lower_bound(0.95, samples=60, seed=4)
    assert two.method == "test-inversion" and two.sided == "two-sided"
    # each end of the 90% interval is a one-sided 95% end: the lower one is the 95% lower
    # bound itself (same random numbers, the same search)
    assert two.low == pytest.approx(bound.low, abs=1e-12)
    assert two.low < two.estimate < two.high < 1.0
    # at the upper end the p-value of the upper test is 0.05 up to its Monte Carlo error
    end = prof.end_point(+1, two_sided_cutoff(0.90))
    high = prof.test_inversion_end(+1, 0.05, samples=60, seed=4)
    assert high.value == pytest.approx(two.high, abs=1e-12) and high.deviance is not None
    p = prof.exceedance(high.choi, prof.statistic(), samples=60, seed=4, side=+1)
    assert p <= 0.05 + 2 * 0.028
    assert end.value > two.estimate


def test_test_inversion_with_both_nulls(near_unitary):
    # a value is rejected only when every simulated null rejects it: the p-value is the
    # largest of the twirled and the plain one (a test of a composite null is at the level
    # of its least favourable member; Berger & Boos, JASA 89, 1012 (1994), for the
    # supremum over a set of nuisance values), each with the same random numbers
    exp, model, mle = near_unitary
    both = Profile(model, process_fidelity_figure(exp.target), mle=mle,
                   nulls=("twirled", "plain"))
    twirled = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    plain = Profile(model, process_fidelity_figure(exp.target), mle=mle, nulls=("plain",))
    assert twirled.nulls == ("twirled",) == default_nulls(1)   # one qubit: the twirl alone
    assert default_nulls(2) == ("twirled", "plain")
    end = both.end_point(+1, 2.0)
    sources = both.simulated_processes(end.choi)
    assert len(sources) == 2 and np.array_equal(sources[1], end.choi)
    assert np.allclose(sources[0], pauli_twirl(end.choi, exp.target), atol=1e-12)
    observed = both.statistic()
    for side in (-1, +1):
        p = [prof.exceedance(end.choi, observed, samples=30, seed=6, side=side)
             for prof in (both, twirled, plain)]
        assert p[0] == max(p[1], p[2])
    # the top's own test simulates the process given, once
    fits = both.simulated_fits
    both.exceedance(both._near_top(), observed, samples=30, seed=6, side=+1, as_is=True)
    assert both.simulated_fits == fits + 30
    with pytest.raises(ValueError, match="nulls"):
        Profile(model, process_fidelity_figure(exp.target), mle=mle, nulls=("mixed",))


def test_simulated_refits_on_two_workers_give_the_same_p_value(near_unitary):
    # each simulated data set has its own child seed, so the p-value and the intervals do
    # not depend on the number of processes that refit them
    from gatescope.parallel import Runner

    exp, model, mle = near_unitary
    prof = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    end = prof.end_point(-1, 2.0)
    alone = prof.exceedance(end.choi, prof.statistic(), samples=24, seed=5)
    with Runner(2, shared=(model, prof.figure)) as runner:
        prof.runner = runner
        assert prof.exceedance(end.choi, prof.statistic(), samples=24, seed=5) == alone
    assert 1 / 25 <= alone <= 1.0
    one, two = (profile_figures(model, exp.target, names=("process_fidelity",),
                                invert_intervals=("process_fidelity",), samples=20, seed=2,
                                workers=w)["process_fidelity"] for w in (1, 2))
    assert two.interval.method == one.interval.method == "test-inversion"
    assert (two.interval.low, two.interval.high) == (one.interval.low, one.interval.high)


def test_test_inversion_reaches_a_perfect_gate_far_out_in_deviance(tmp_path):
    # a few counts where the gate predicts (almost) none: the target itself lies at a
    # deviance far beyond any cutoff, yet processes ever closer to it stay accepted — their simulated
    # estimates fall below the observed one about as often as the target's — so the upper
    # end is the top of the range, reached and flagged, not the last value a finite step
    # tried. Common practice: a confidence set of a fidelity may contain F = 1 as a limit.
    from support import simulated_experiment
    exp, _ = simulated_experiment(tmp_path, "H+depolarizing:0.0004", shots=1000, seed=3,
                                  n_qubits=1)
    model = build_model(exp)
    prof = Profile(model, process_fidelity_figure(exp.target), mle=fit_mle(model, **FIT_OPTIONS))
    assert prof.edge_deviance(+1) > 100.0
    high = prof.test_inversion_end(+1, 0.025, samples=60, seed=5)
    assert high.value == 1.0 and high.touches_edge and high.converged
    # the p-value of the upper test just below the top is above the tail, by itself
    near = (1.0 - 1e-9) * prof.figure.maximiser + 1e-9 * prof.mle.choi
    assert prof.exceedance(near, prof.statistic(), samples=60, seed=5, side=+1) > 0.025
    two = prof.test_inversion_interval(0.95, samples=60, seed=5)
    assert two.high == 1.0 and two.touches_boundary and two.converged


def test_test_inversion_of_a_state_fidelity(make_state_experiment):
    # a state's fidelity to a pure target is linear with one maximiser, like a process
    # fidelity: the simulated data sets come from the profile maximiser ρ_f itself (no
    # twirl). Carpenter, J. R. Stat. Soc. B 61, 159 (1999): at each end the Monte Carlo
    # p-value of its one-sided test is the tail, up to its binomial error (B = 60: 0.028
    # at 0.05), with the same random numbers.
    exp, _ = make_state_experiment("phi++depolarizing:0.01", shots=500, seed=4)
    model = build_model(exp)
    found = profile_figures(model, exp.target_state, interval=True, lower_bound=True,
                            invert_intervals=INVERTED_FIGURES, invert_bounds=INVERTED_FIGURES,
                            samples=60, seed=2)
    fid, pur = found["state_fidelity"], found["purity"]
    assert fid.interval.method == "test-inversion" and fid.lower.method == "test-inversion"
    assert pur.interval.method == "profile"               # purity: no single maximiser
    assert fid.interval.low <= fid.lower.low <= fid.estimate <= fid.interval.high <= 1.0
    prof = Profile(model, named_figure("state_fidelity", exp.target_state, 4, "state"))
    low = prof.test_inversion_end(-1, 0.05, samples=60, seed=2)
    # the same bound up to the searches' tolerances (the points of the profile each search
    # finds depend on what was computed before)
    assert low.value == pytest.approx(fid.lower.low, abs=0.05 * (fid.estimate - fid.lower.low))
    p = prof.exceedance(low.choi, prof.statistic(), samples=60, seed=2, side=-1)
    assert abs(p - 0.05) <= 2 * 0.028 + 1.0 / 61


def test_best_unitary_matches_a_generic_optimiser(make_experiment):
    # scipy's Nelder-Mead (a generic optimiser) over an independent parametrisation of
    # SU(2), U = Rz(a) Ry(b) Rz(c) (Euler angles; Nielsen & Chuang, Thm 4.1), from several
    # starts: the largest likelihood of a unitary channel it finds is the one the Riemannian
    # ascent finds from the nearest unitary
    from scipy.optimize import minimize

    from gatescope.channels import choi_from_unitary
    from gatescope.merit.process import nearest_unitary
    from gatescope.profile import best_unitary

    exp, _ = make_experiment("H+dephasing:0.02", n_qubits=1, shots=500, seed=9)
    model = build_model(exp)
    lik = PoissonLikelihood(model)
    mle = fit_mle(model, **FIT_OPTIONS)
    ll, u = best_unitary(lik, nearest_unitary(mle.choi)[0])
    assert np.allclose(u.conj().T @ u, np.eye(2), atol=1e-10)

    def rz(t):
        return np.diag([np.exp(-0.5j * t), np.exp(0.5j * t)])

    def ry(t):
        return np.array([[np.cos(t / 2), -np.sin(t / 2)], [np.sin(t / 2), np.cos(t / 2)]])

    def minus_ll(x):
        v = lik.evaluate(choi_from_unitary(rz(x[0]) @ ry(x[1]) @ rz(x[2]))).log_likelihood
        return -v if np.isfinite(v) else 1e30

    rng = np.random.default_rng(0)
    best = min(minimize(minus_ll, rng.uniform(-np.pi, np.pi, 3), method="Nelder-Mead",
                        options={"xatol": 1e-10, "fatol": 1e-10, "maxiter": 20000}).fun
               for _ in range(8))
    assert ll == pytest.approx(-best, abs=1e-6)
    assert ll <= mle.log_likelihood                       # a unitary is one physical process


def test_purity_interval_of_a_unitary_process_reaches_one(make_experiment):
    # a two-qubit unitary process (CZ with a ZZ phase error): its estimate leaves the
    # unitary channels in many directions, so the deviance of purity 1 exceeds χ²₁(0.95)
    # here although the truth is unitary; the simulated test at the most likely unitary
    # accepts it (Carpenter, J. R. Stat. Soc. B 61, 159 (1999): test inversion), and the
    # interval reaches 1
    exp, _ = make_experiment("CZ+zz:0.03", n_qubits=2, shots=1000, seed=4)
    model = build_model(exp)
    mle = fit_mle(model, **FIT_OPTIONS)
    prof = Profile(model, purity_figure(4), mle=mle)
    assert prof.interval(0.95).high < 1.0                 # the likelihood-ratio cut-off
    assert prof.top_accepted(0.025, samples=60, seed=1)
    found = profile_figures(model, exp.target, names=("purity",), samples=60, seed=1,
                            start=mle.choi)["purity"]
    assert found.interval.high == 1.0 and found.touches_boundary
    assert found.interval.low == pytest.approx(prof.interval(0.95).low, rel=1e-6)


def test_exceedance_counts_the_simulated_estimates(perfect_data):
    # data drawn from the target itself: no count where the gate predicts none, yet the
    # fits find small rotations in the shot noise of the other rows, so the simulated
    # estimates lie just below F = 1 (the coherent part a fit takes from the noise)
    exp, model, mle = perfect_data
    prof = Profile(model, process_fidelity_figure(exp.target), mle=mle)
    target = process_fidelity_figure(exp.target).maximiser
    b = 20
    assert prof.exceedance(target, 0.99, samples=b, seed=1) == 1.0
    assert prof.exceedance(target, 1.0 + 1e-12, samples=b, seed=1) == 1.0 / (b + 1)
    assert prof.exceedance(target, 1.0 - 1e-6, samples=b, seed=1) < 0.5
    assert prof.simulated_fits == 3 * b


@pytest.mark.slow
def test_coverage_far_from_the_boundary(tmp_path):
    # Wilks, Ann. Math. Stat. 9, 60 (1938): for a truth in the interior the deviance at the
    # truth tends to χ²₁, so the 95% two-sided interval covers 95% of the time and the 95%
    # lower bound holds 95% of the time. 200 one-qubit experiments at F = 0.95 with 1000
    # counts per basis; the binomial standard error of a coverage of 0.95 over 200 is 0.015,
    # and the check allows three of them.
    from gatescope.estimators import estimate
    from support import simulated_experiment

    n, hits, held = 200, 0, 0
    for seed in range(n):
        exp, truth = simulated_experiment(tmp_path / f"e{seed}", "H+depolarizing:0.0667",
                                          shots=1000, seed=seed, n_qubits=1)
        model = build_model(exp)
        f0 = process_fidelity_figure(exp.target).value(truth)
        point = estimate(model, "mle")
        prof = profile_figures(model, exp.target, interval=True, lower_bound=True,
                               names=("process_fidelity",), start=point.choi)["process_fidelity"]
        hits += prof.interval.low <= f0 <= prof.interval.high
        held += prof.lower.low <= f0
    se = np.sqrt(0.95 * 0.05 / n)
    assert abs(hits / n - 0.95) <= 3 * se, hits / n
    assert abs(held / n - 0.95) <= 3 * se, held / n
