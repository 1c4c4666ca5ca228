"""The process measurement model (gatescope.model.process): the structured maps equal the
dense design matrix, and the identifiability check names what the data leave undetermined.
"""

from __future__ import annotations

import re
import warnings

import gatescope as gs
import numpy as np
import pytest
from gatescope.synth.noise import random_channel
from gatescope.model import MeasurementModel


def _labels_named(message: str, n_qubits: int) -> set[str]:
    return set(re.findall(rf"\b[IXYZ]{{{n_qubits}}}\b", message))


def dense_design(exp):
    """Row k of the dense design: vec((ρ_k^T ⊗ E_k)^T), so p = A · vec(J) (docs/file-formats.md, "Input")."""
    return np.array([np.kron(exp.prep_states[i].T, exp.meas_effects[j]).T.reshape(-1)
                     for i, j in zip(exp.prep_index, exp.meas_index)])


def random_hermitian(rng, n):
    g = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    return g + g.conj().T


def test_too_few_preparations_warn_and_the_fit_still_runs(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.05", shots=500, seed=4, prep=("H", "V"))
    assert exp.prep_states.shape[0] == 2
    with pytest.warns(gs.GatescopeWarning) as record:
        res = gs.fit(exp, "pls")
    messages = [str(w.message) for w in record if issubclass(w.category, gs.GatescopeWarning)]
    named = set().union(*(_labels_named(m, 1) for m in messages))
    # H and V span I and Z only: the input components X and Y are undetermined
    assert named == {"X", "Y"}, messages
    assert any("undetermined" in m for m in messages)
    assert res.choi.shape == (4, 4) and np.isfinite(res.figures["process_fidelity"].value)


def test_too_few_preparations_two_qubits_name_the_missing_inputs(make_experiment):
    exp, _ = make_experiment("CZ", shots=200, seed=4, prep=("H", "V"))
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        res = gs.fit(exp, "pls")
    messages = [str(w.message) for w in record if issubclass(w.category, gs.GatescopeWarning)]
    assert messages
    named = set().union(*(_labels_named(m, 2) for m in messages))
    assert named, messages
    # every named input component contains X or Y; the diagonal ones (I, Z only) are determined
    assert all(("X" in lab or "Y" in lab) for lab in named), named
    assert not named & {"II", "IZ", "ZI", "ZZ"}
    assert np.isfinite(res.log_likelihood)


def test_too_few_analysers_warn_about_outputs(make_experiment):
    exp, _ = make_experiment("H", shots=500, seed=4, meas=("H", "V"))
    with pytest.warns(gs.GatescopeWarning, match="output"):
        gs.fit(exp, "pls")


def test_complete_data_do_not_warn(make_experiment):
    exp, _ = make_experiment("H", shots=500, seed=4)
    with warnings.catch_warnings():
        warnings.simplefilter("error", gs.GatescopeWarning)
        gs.fit(exp, "pls")


@pytest.mark.parametrize("spec, n_qubits", [("random:3:7", 1), ("random:4:8", 2)])
def test_forward_and_adjoint_equal_dense(make_experiment, rng, spec, n_qubits):
    exp, _ = make_experiment(spec, n_qubits=n_qubits, shots=100)
    model = MeasurementModel(exp)
    a = dense_design(exp)
    d2 = exp.dim ** 2
    for _ in range(3):
        j = random_hermitian(rng, d2)
        np.testing.assert_allclose(model.forward(j), (a @ j.reshape(-1)).real, atol=1e-12)
        w = rng.normal(size=exp.n_rows)
        # adjoint: Σ_k w_k ρ_k^T ⊗ E_k
        dense_adj = np.einsum("k,kab->ab", w, a.reshape(-1, d2, d2).transpose(0, 2, 1))
        np.testing.assert_allclose(model.adjoint(w), dense_adj, atol=1e-11)
        # adjoint identity <A x, y> = <x, A* y>
        assert np.vdot(model.adjoint(w), j).real == pytest.approx(w @ model.forward(j), abs=1e-9)


def test_random_row_subset_and_repeats(make_experiment, rng, tmp_path):
    exp, _ = make_experiment("random:2:3", shots=100)
    lines = (exp.counts_path.read_text().splitlines())
    keep = sorted(rng.choice(np.arange(1, len(lines)), size=300, replace=True))   # repeats allowed
    (exp.counts_path).write_text("\n".join([lines[0]] + [lines[k] for k in keep]) + "\n")
    from gatescope import read_experiment
    sub = read_experiment(exp.path)
    assert sub.n_rows == 300
    model = MeasurementModel(sub)
    a = dense_design(sub)
    j = random_channel(2, 5, seed=11)
    np.testing.assert_allclose(model.forward(j), (a @ j.reshape(-1)).real, atol=1e-12)


def test_probabilities_of_a_channel_sum_to_bases(make_experiment):
    # Six-state analysers form three complete bases per qubit, so for any trace-preserving
    # channel the probabilities of one preparation sum to 3^n (common practice).
    exp, choi = make_experiment("random:4:5", shots=100)
    p = MeasurementModel(exp).forward(choi)
    sums = np.bincount(exp.prep_index, weights=p)
    np.testing.assert_allclose(sums, 9.0, atol=1e-12)


def test_identifiability_complete_and_incomplete(make_experiment):
    exp, _ = make_experiment("CZ", shots=100)
    ident = MeasurementModel(exp).identifiability()
    assert ident.complete and ident.rank == 240
    exp2, _ = make_experiment("CZ", shots=100, prep=("H", "V", "D"))
    ident2 = MeasurementModel(exp2).identifiability()
    assert ident2.prep_rank == 9 and not ident2.complete
    assert "YI" in ident2.missing_inputs or "IY" in ident2.missing_inputs


@pytest.mark.parametrize("spec, prep", [("random:6:41", ("H", "V", "D", "A", "R", "L")),
                                        ("random:2:42", ("H", "V", "D", "R"))])
def test_qubitwise_maps_equal_the_pair_table(make_experiment, rng, monkeypatch, spec, prep):
    # three qubits: the qubit-by-qubit contraction against the P × M table (both exact)
    from gatescope.model import process as model_module
    exp, choi = make_experiment(spec, n_qubits=3, shots=10, prep=prep)
    structured = MeasurementModel(exp)
    assert structured.structured
    monkeypatch.setattr(model_module, "STRUCTURED_FROM_QUBITS", 99)
    table = MeasurementModel(exp)
    assert not table.structured
    j = random_hermitian(rng, 64)
    np.testing.assert_allclose(structured.forward(j), table.forward(j), atol=1e-12)
    w = rng.normal(size=exp.n_rows)
    np.testing.assert_allclose(structured.adjoint(w), table.adjoint(w), atol=1e-10)
    assert np.vdot(structured.adjoint(w), j).real == pytest.approx(w @ structured.forward(j), rel=1e-10)


def test_identifiability_of_an_incomplete_pair_table(make_experiment, monkeypatch):
    # every preparation and every analyser present, but not every pair: the rank of the
    # design restricted to the pairs present (dense path), or its bound (above the limit)
    from gatescope.model import process as model_module
    from gatescope import read_experiment

    exp, _ = make_experiment("H+depolarizing:0.1", n_qubits=1, shots=500, seed=2,
                             prep=("H", "V", "D", "R"))
    lines = exp.counts_path.read_text().splitlines()
    # D is the only preparation with an X component (Pauli vectors H (1,0,0,1), V (1,0,0,-1),
    # D (1,1,0,0), R (1,0,-1,0)); analysed in the Z basis only, it leaves the responses of
    # the X and Y outputs to the X input, R[X,X] and R[Y,X], undetermined: rank 12 − 2
    kept = [ln for ln in lines[1:] if not (ln.startswith("D,") and ln.split(",")[1] in "DARL")]
    exp.counts_path.write_text("\n".join([lines[0]] + kept) + "\n")
    exp = read_experiment(exp.path)
    ident = MeasurementModel(exp).identifiability()
    assert ident.prep_rank == 4 and ident.meas_rank == 3
    assert ident.rank == 10 and not ident.complete
    with pytest.warns(gs.GatescopeWarning, match="pairs present determine only 10 of 12"):
        MeasurementModel(exp).warn_if_undetermined()
    monkeypatch.setattr(model_module, "DENSE_RANK_MAX_PARAMETERS", 0)
    bound = MeasurementModel(exp).identifiability()
    present = int((MeasurementModel(exp).pairs_present() > 0).sum())
    assert present == 20 and bound.rank == min(4 * 3, present)


def test_identifiability_of_a_subset_of_rows(make_experiment):
    # the rows of the H and V preparations alone span two input directions (I and Z)
    exp, _ = make_experiment("H", shots=200, n_qubits=1)
    model = MeasurementModel(exp)
    rows = np.isin(np.asarray(exp.prep)[:], ["H", "V"])
    sub = model.identifiability(rows)
    assert (sub.prep_rank, sub.meas_rank) == (2, 3) and not sub.complete
    assert set(sub.missing_inputs) == {"X", "Y"}
    assert model.identifiability().complete
    with pytest.warns(gs.GatescopeWarning, match=r"^\[undetermined\] the preparations span only 2"):
        model.warn_if_undetermined(rows)
