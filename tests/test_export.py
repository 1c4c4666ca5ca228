"""Results for scripts and spreadsheets (gatescope.export): JSON and the figures CSV."""

from __future__ import annotations

import csv
import io
import json
import warnings
from pathlib import Path

import gatescope as gs
import pytest
from gatescope.export import CSV_COLUMNS, as_json, figures_csv, json_text

FORMAT1 = Path(__file__).resolve().parent / "data" / "format1"


@pytest.fixture(scope="module")
def boot_result(tmp_path_factory):
    from support import simulated_experiment

    exp, _ = simulated_experiment(tmp_path_factory.mktemp("e") / "d", "H+depolarizing:0.05",
                                  shots=600, seed=3, n_qubits=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return gs.fit(exp, bootstrap=6, seed=2, workers=1)


def test_json_carries_figures_status_fit_and_warnings(boot_result):
    data = json.loads(json_text(boot_result, "r.h5"))
    fid = boot_result.figures["process_fidelity"]
    assert data["figures"]["process_fidelity"] == {"value": fid.value, "ci": list(fid.ci),
                                                   "level": 0.95, "determined": True,
                                                   "in_range": True,
                                                   "interval_method": "test-inversion",
                                                   "lower_bound": None, "lower_bound_method": None,
                                                   "touches_boundary": fid.touches_boundary}
    # the default of a one-qubit bootstrap: test inversion for the fidelities, profile
    # likelihood for the purity (pipeline.default_profiled), the bootstrap's normal
    # interval elsewhere
    assert data["figures"]["purity"]["interval_method"] == "profile"
    assert data["figures"]["purity"]["touches_boundary"] is False
    assert data["status"] == "converged" and data["method"] == "mle" and data["file"] == "r.h5"
    assert data["goodness_of_fit"]["dof"] == boot_result.diagnostics.dof
    assert data["bootstrap"]["samples"] == 6 and data["seed"] == 2
    assert data["warnings"] == list(boot_result.warnings)


def test_json_of_an_unphysical_result_is_strict_json():
    # JSON has no NaN or Infinity: undefined numbers are null
    res = gs.load_result(FORMAT1 / "fit_2q_lin.h5")
    text = json_text(res)
    data = json.loads(text, parse_constant=lambda c: pytest.fail(f"non-JSON constant {c}"))
    assert data["log_likelihood"] is None
    assert data["goodness_of_fit"]["chi2"] is None
    assert data["figures"]["min_eigenvalue"]["in_range"] is False
    rows = data["goodness_of_fit"]["nonpositive_expected"]
    assert rows and all(r["expected"] <= 0 for r in rows) and "row" in rows[0]


def test_csv_table_has_one_row_per_figure(boot_result):
    rows = list(csv.DictReader(io.StringIO(figures_csv(boot_result))))
    assert tuple(rows[0]) == CSV_COLUMNS
    assert [r["figure"] for r in rows] == list(boot_result.figures)
    fid = boot_result.figures["process_fidelity"]
    first = rows[0]
    assert float(first["value"]) == fid.value and float(first["ci_low"]) == fid.ci[0]
    assert first["determined"] == "true"
    assert as_json(boot_result)["figures"]["trace"]["ci"] is not None


def test_csv_table_carries_the_interval_method_and_lower_bound(make_experiment):
    exp, _ = make_experiment("H+depolarizing:0.02", n_qubits=1, shots=1000, seed=4)
    res = gs.fit(exp, interval="profile", lower_bound=True)
    rows = {r["figure"]: r for r in csv.DictReader(io.StringIO(figures_csv(res)))}
    pf = res.figures["process_fidelity"]
    assert rows["process_fidelity"]["interval_method"] == "profile"
    assert float(rows["process_fidelity"]["lower_bound"]) == pf.lower_bound
    assert rows["process_fidelity"]["lower_bound_method"] == "test-inversion"   # one qubit
    assert rows["process_fidelity"]["touches_boundary"] == "false"
    assert rows["trace"]["lower_bound"] == "" and rows["trace"]["interval_method"] == ""
