"""What the report's figures show (gatescope.report.views)."""

from __future__ import annotations

import numpy as np
import pytest
from support import MISCALIBRATED_MEAS, cnot_chi_textbook

import gatescope as gs
from gatescope.report import views


def test_basis_labels_put_qubit_1_first_with_h_as_zero():
    # README, Conventions: H = |0>, qubit 1 the most significant bit
    assert views.basis_labels(2) == ["HH", "HV", "VH", "VV"]
    assert views.basis_labels(3)[3] == "HVV"                  # |011>


def test_label_parts_follow_the_spelling_rule():
    assert views.label_parts("HD", 2) == ["H", "D"]
    assert views.label_parts("+i 0", 2) == ["+i", "0"]
    assert views.label_parts("+i,0", 2) == ["+i", "0"]
    assert views.label_parts("Dtilt", 1) == ["Dtilt"]


def test_the_target_of_a_cnot_is_the_textbook_chi(plain_result):
    r = gs.load_result(plain_result)
    np.testing.assert_allclose(views.target_matrices(r)["chi"], cnot_chi_textbook(), atol=1e-12)
    # PTM of CNOT maps IX -> IX, XI -> XX, ZI -> ZI, IZ -> ZZ (common practice)
    ptm = views.target_matrices(r)["ptm"]
    labels = gs.conventions.pauli_labels(2)
    for src, dst in (("IX", "IX"), ("XI", "XX"), ("ZI", "ZI"), ("IZ", "ZZ")):
        assert ptm[labels.index(dst), labels.index(src)] == pytest.approx(1.0)


def test_estimate_and_target_share_a_scale_and_the_difference_has_its_own(boot_result):
    r = gs.load_result(boot_result)
    chi, ptm = views.matrix_plots(r)
    est, tgt, diff = chi.data["panels"]
    assert est["scale"] == tgt["scale"] == pytest.approx(max(np.abs(r.chi).max(),
                                                             np.abs(tgt["matrix"]).max()))
    np.testing.assert_allclose(diff["matrix"], r.chi - tgt["matrix"])
    assert diff["scale"] == pytest.approx(np.abs(diff["matrix"]).max())
    assert f"{diff['scale']:.3g}" in diff["title"]             # every panel states its scale
    assert chi.data["labels"] == gs.conventions.pauli_labels(2) and chi.data["block"] == 4


def test_a_state_is_drawn_in_the_computational_basis(state_result):
    r = gs.load_result(state_result)
    (rho,) = views.matrix_plots(r)
    assert rho.data["labels"] == ["HH", "HV", "VH", "VV"]
    psi = np.array([0, 1, -1, 0]) / np.sqrt(2)                 # psi- (README, Conventions)
    np.testing.assert_allclose(rho.data["panels"][1]["matrix"], np.outer(psi, psi), atol=1e-12)


def test_the_pooled_residual_is_that_of_the_summed_counts(boot_result):
    r = gs.load_result(boot_result)
    grid = views.residual_grid(r)
    cols = r.counts_columns
    counts = np.asarray(cols["counts"], float)
    nu = r.diagnostics.expected_counts
    prep, meas = list(cols["prep"]), list(cols["meas"])
    for p, m in (("HH", "HH"), ("DR", "LA"), ("VL", "AD")):
        rows = [k for k in range(len(prep)) if prep[k] == p and meas[k] == m]
        expected = (counts[rows].sum() - nu[rows].sum()) / np.sqrt(nu[rows].sum())
        value = grid["values"][grid["row_labels"].index(p), grid["col_labels"].index(m)]
        assert value == pytest.approx(expected)
        if len(rows) == 1:                                     # one row: its own residual
            assert value == pytest.approx(r.diagnostics.pearson_residuals[rows[0]])
    assert grid["row_labels"][:6] == ["HH", "HV", "HD", "HA", "HR", "HL"]
    assert grid["row_blocks"] == [6, 12, 18, 24, 30]


def test_a_miscalibrated_analyser_stands_out_as_a_column(miscalibrated_result):
    r = gs.load_result(miscalibrated_result)
    grid = views.residual_grid(r)
    column_means = np.nanmean(np.abs(grid["values"]), axis=0)
    assert grid["col_labels"][int(np.argmax(column_means))] == MISCALIBRATED_MEAS
    assert grid["outliers"][:, grid["col_labels"].index(MISCALIBRATED_MEAS)].any()


def test_a_state_grid_splits_the_analysers_between_qubits(state_result):
    r = gs.load_result(state_result)
    grid = views.residual_grid(r)
    assert grid["values"].shape == (6, 6)
    assert grid["row_labels"] == list("HVDARL") and grid["col_labels"] == list("HVDARL")
    assert grid["row_title"] == "analyser of qubit 1"
    k = list(r.counts_columns["meas"]).index("DA")
    assert grid["values"][2, 3] == pytest.approx(r.diagnostics.pearson_residuals[k])


def test_bootstrap_histograms_leave_out_figures_without_spread(boot_result, plain_result):
    r = gs.load_result(boot_result)
    plot = views.bootstrap_plot(r)
    titles = [p["title"] for p in plot.data["panels"]]
    assert "process fidelity" in titles and "trace (Tr J / d)" not in titles
    first = plot.data["panels"][0]
    assert first["point"] == r.figures["process_fidelity"].value
    assert first["ci"] == r.figures["process_fidelity"].ci
    assert views.bootstrap_plot(gs.load_result(plain_result)) is None


def test_result_plots_are_in_page_order(boot_result, state_result):
    names = [p.name for p in views.result_plots(gs.load_result(boot_result))]
    assert names == ["chi", "ptm", "counts", "residuals", "bootstrap"]
    names = [p.name for p in views.result_plots(gs.load_result(state_result))]
    assert names == ["rho", "counts", "residuals", "bootstrap"]
