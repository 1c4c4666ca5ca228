"""What a result may claim (gatescope.checks): data that determine nothing, the status of
an estimate, figures the data do not determine."""

from __future__ import annotations

import warnings

import gatescope as gs
import numpy as np
import pytest
from gatescope import checks
from gatescope.channels import choi_from_unitary, choi_to_ptm
from gatescope.conventions import named_gate
from gatescope.estimators import Fit, estimate
from gatescope.merit import process_fidelity, truth_table_fidelity
from gatescope.model import MeasurementModel
from gatescope.synth.noise import random_channel


def rewrite_counts(exp, counts, background=None):
    """Rewrite an experiment's CSV with new counts (and a background column); re-read it."""
    lines = ["prep,meas,counts" + (",background" if background is not None else "")]
    for k in range(exp.n_rows):
        extra = f",{background[k]:.17g}" if background is not None else ""
        lines.append(f"{exp.prep[k]},{exp.meas[k]},{int(counts[k])}{extra}")
    exp.counts_path.write_text("\n".join(lines) + "\n")
    return gs.read_experiment(exp.path)


def fit_quietly(exp, method="mle", **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return gs.fit(exp, method, **kw)


# -- data that determine nothing are refused --------------------------------------------

def test_all_zero_counts_are_refused(make_experiment):
    exp, _ = make_experiment("H", shots=100, n_qubits=1)
    exp = rewrite_counts(exp, np.zeros(exp.n_rows))
    with pytest.raises(gs.InputError, match="every row has zero counts"):
        gs.fit(exp)


def test_counts_equal_to_the_background_on_every_row_are_refused(make_experiment):
    # a reproducer: the fit returned a non-physical Choi matrix labelled converged
    exp, _ = make_experiment("CZ+depolarizing:0.05", shots=300, seed=3)
    exp = rewrite_counts(exp, exp.counts, background=exp.counts.astype(float))
    with pytest.raises(gs.InputError, match="no row has more counts than its background") as info:
        gs.fit(exp)
    assert info.value.file == str(exp.counts_path)


def test_a_group_per_row_is_refused(make_experiment, tmp_path):
    # per-group normalisation with one group per row: every intensity absorbs its row
    exp, _ = make_experiment("H", shots=200, n_qubits=1)
    lines = ["prep,meas,counts,group"] + [f"{p},{m},{c},g{k}" for k, (p, m, c) in
                                          enumerate(zip(exp.prep, exp.meas, exp.counts))]
    exp.counts_path.write_text("\n".join(lines) + "\n")
    exp.path.write_text(exp.path.read_text() + 'normalization = "per-group"\n')
    with pytest.raises(gs.InputError, match="single .prep, meas. setting"):
        gs.fit(gs.read_experiment(exp.path))


def test_one_non_zero_row_is_fitted_with_warnings_and_undetermined_figures(make_experiment):
    exp, _ = make_experiment("CZ", shots=300, seed=2)
    counts = np.zeros(exp.n_rows)
    counts[0] = 7
    res = fit_quietly(rewrite_counts(exp, counts))
    codes = [gs.errors.warning_code(w) for w in res.warnings]
    assert "no-counts" in codes and "undetermined" in codes
    assert not res.figures["process_fidelity"].determined
    assert res.figures["trace"].determined          # fixed by trace preservation


def test_informative_rows_leave_out_empty_and_single_setting_groups(make_experiment):
    exp, _ = make_experiment("H", shots=200, n_qubits=1)
    counts = np.array(exp.counts)
    first = exp.prep_index == exp.prep_index[0]
    counts[first] = 0                                  # one preparation saw nothing
    model = MeasurementModel(rewrite_counts(exp, counts))
    rows = checks.informative_rows(model)
    assert not rows[first].any() and rows[~first].all()


# -- the status of an estimate ---------------------------------------------------------

def test_distance_to_physical_of_known_matrices():
    cz = choi_from_unitary(named_gate("CZ"))
    assert checks.distance_to_physical(cz)[0] < 1e-14
    bent = cz - 0.1 * np.eye(16)                      # eigenvalue −0.1, Tr_out J = 0.6·I
    distance, low = checks.distance_to_physical(bent)
    assert low == pytest.approx(-0.1) and distance == pytest.approx(0.4)
    assert checks.distance_to_physical(0.5 * cz, trace_decreasing=True)[0] < 1e-14


def test_an_unphysical_lin_estimate_is_never_converged_and_is_warned_about(make_experiment):
    exp, _ = make_experiment("CZ", shots=300, seed=5)
    with pytest.warns(gs.GatescopeWarning, match=r"\[unphysical\] the lin estimate"):
        res = gs.fit(exp, "lin")
    assert res.status == "unphysical" and res.converged is False
    assert res.figures["min_eigenvalue"].value < 0


def test_a_fit_stopped_early_is_not_converged_and_warned(make_experiment):
    exp, _ = make_experiment("CZ+depolarizing:0.05", shots=1000, seed=6)
    with pytest.warns(gs.GatescopeWarning, match=r"\[not-converged\]"):
        res = gs.fit(exp, "mle", maxiter=3)
    assert res.status == "not converged" and not res.converged
    assert any(w.startswith("[not-converged]") for w in res.warnings)


@pytest.mark.parametrize("method", ["mle-pg", "mle"])
def test_ideal_data_stopping_at_rounding_are_converged_to_rounding(make_experiment, method):
    # 10^8 counts per basis, exact: ℓ is a sum of terms of ~1e10 whose rounding exceeds
    # the stopping rule's 1e-10·|ℓ|. mle-pg stops because it cannot increase ℓ; the
    # factored mle runs to its iteration limit but certifies ℓ* − ℓ ≤ gap_bound below
    # that rounding. Either way the estimate is at the optimum as far as numbers go.
    exp, truth = make_experiment("CZ+depolarizing:0.05", shots=1e8, exact=True)
    model = MeasurementModel(exp)
    point = estimate(model, method)
    with warnings.catch_warnings():
        warnings.simplefilter("error", gs.GatescopeWarning)
        verdict = checks.assess_estimate(model, point)
    if point.converged:                               # a solver that meets its own rule
        assert verdict.status == "converged"
    else:
        assert verdict.status == "converged to rounding"
        rounding = checks.rounding_level(model, point)
        assert rounding > 1e-10 * abs(point.log_likelihood)
        gap = point.info.get("gap_bound")
        assert gap is None or gap <= rounding
    assert process_fidelity(point.choi, exp.target) == pytest.approx(
        process_fidelity(truth, exp.target), abs=1e-6)


def test_a_non_finite_estimate_is_a_numerical_error(make_experiment):
    exp, _ = make_experiment("H", shots=100, n_qubits=1)
    model = MeasurementModel(exp)
    bad = Fit("mle", np.full((4, 4), np.nan, dtype=complex), np.ones(6), np.nan, True, 1, "x", 0.0)
    with pytest.raises(gs.NumericalError, match="not finite"):
        checks.assess_estimate(model, bad)


# -- counts consistent with background alone --------------------------------------------

def test_background_everywhere_gives_no_signal_and_no_determined_figure(make_experiment):
    # a reproducer: background = 1e4 on every row, counts drawn from it alone, gave a
    # process fidelity of 0.9999 with intensities of 1e-30 and no warning
    exp, _ = make_experiment("CZ", shots=100, seed=8)
    rng = np.random.default_rng(8)
    background = np.full(exp.n_rows, 1e4)
    exp = rewrite_counts(exp, rng.poisson(background), background)
    res = fit_quietly(exp)
    assert any(w.startswith("[no-signal]") for w in res.warnings)
    assert not any(w.startswith("[poor-fit]") for w in res.warnings)
    assert [k for k, f in res.figures.items() if f.determined] == ["trace"]


def test_a_weak_signal_over_background_is_found(make_experiment):
    # 2% of the background as signal: the likelihood-ratio test finds it
    exp, truth = make_experiment("CZ", shots=100, seed=9)
    model = MeasurementModel(exp)
    rng = np.random.default_rng(9)
    signal = 0.02 * 1e4 * 4 * model.forward(truth)
    exp = rewrite_counts(exp, rng.poisson(1e4 + signal), np.full(exp.n_rows, 1e4))
    res = fit_quietly(exp)
    assert not any(w.startswith("[no-signal]") for w in res.warnings)
    assert res.figures["process_fidelity"].determined


def test_no_degrees_of_freedom_are_warned_about(make_experiment):
    exp, _ = make_experiment("CNOT+depolarizing:0.05", shots=500, prep=("H", "V"), meas=("H", "V"))
    res = fit_quietly(exp)
    assert res.diagnostics.dof <= 0
    assert any(w.startswith("[no-dof]") for w in res.warnings)


# -- figures the data do not determine ---------------------------------------------------

def test_ptm_functionals_equal_the_figures(rng):
    # the linear forms behind the check reproduce the figures themselves:
    # F_pro = Tr(R_U^T R)/d² for a unitary U (from memory; the PTM form of Tr(χ_U χ))
    choi = random_channel(2, 3, seed=4)
    ptm = choi_to_ptm(choi)
    for gate in ("CZ", "CNOT", "SWAP"):
        u = named_gate(gate)
        a = choi_to_ptm(choi_from_unitary(u)) / 16
        assert np.sum(a * ptm) == pytest.approx(process_fidelity(choi, u), abs=1e-12)
    u = named_gate("CNOT")
    perm = np.argmax(np.abs(u), axis=0)
    a = sum(np.outer(checks._pauli_vector(np.outer(np.eye(4)[perm[x]], np.eye(4)[perm[x]]), 2),
                     checks._pauli_vector(np.outer(np.eye(4)[x], np.eye(4)[x]), 2))
            for x in range(4)) / 16
    assert np.sum(a * ptm) == pytest.approx(truth_table_fidelity(choi, u), abs=1e-12)


def test_h_v_only_data_determine_the_truth_table_but_not_the_process_fidelity(make_experiment):
    # a reproducer: an H/V-only experiment showed a process fidelity of about 0.5 with no
    # caveat; only the classical truth table is measured by such data
    exp, _ = make_experiment("CNOT+depolarizing:0.05", shots=2000, prep=("H", "V"),
                             meas=("H", "V"))
    res = fit_quietly(exp)
    undetermined = {k for k, f in res.figures.items() if not f.determined}
    assert "process_fidelity" in undetermined and "average_gate_fidelity" in undetermined
    assert "purity" in undetermined and "concurrence" in undetermined
    assert res.figures["truth_table_fidelity"].determined and res.figures["trace"].determined
    assert any(w.startswith("[undetermined]") for w in res.warnings)


def test_complete_data_determine_every_figure(make_experiment):
    exp, _ = make_experiment("CZ+depolarizing:0.05", shots=500)
    res = fit_quietly(exp)
    assert all(f.determined for f in res.figures.values())
    assert res.warnings == ()


def test_four_preparations_determine_the_process_fidelity(make_experiment):
    # H, V, D, R span the qubit's operators: with six analysers every figure is determined
    exp, _ = make_experiment("H+depolarizing:0.05", shots=500, n_qubits=1,
                             prep=("H", "V", "D", "R"))
    res = fit_quietly(exp)
    assert all(f.determined for f in res.figures.values())
