"""The bench's table (gatescope.bench.table): aggregates, slopes, coverage, CSV."""

from __future__ import annotations

import csv
import io
import math

import numpy as np
import pytest

from gatescope.bench import table


def _record(hs, infid=0.01, bias=0.001, seconds=0.1, iterations=10, converged=True, **extra):
    return {"error": None, "hs_error": hs, "infidelity": infid, "fidelity_error": bias,
            "trace_distance": 0.05, "seconds": seconds, "iterations": iterations,
            "converged": converged, "bootstrap": 0, **extra}


def test_summary_of_plain_records():
    hs = [1.0, 2.0, 4.0, 5.0]
    records = [_record(h, infid=i, bias=b, converged=c)
               for h, i, b, c in zip(hs, [0.1, 0.3, 0.2, 0.4], [-1.0, 1.0, 2.0, 2.0],
                                     [True, True, False, True])]
    records.append({"error": "NumericalError: no start"})
    row = table.summarise(records, hs_crb=2.0, true_fidelity=0.9, truth_figures={}, dim=2,
                          interval="normal", level=0.95)
    assert row["repeats"] == 4 and row["errors"] == 1 and row["not_converged"] == 1
    assert row["hs_mse"] == pytest.approx(3.0)
    # standard error of the mean: sample standard deviation / √n
    assert row["hs_mse_se"] == pytest.approx(np.std(hs, ddof=1) / 2)
    assert row["hs_mse_over_crb"] == pytest.approx(1.5)
    assert row["hs_mse_over_crb_se"] == pytest.approx(np.std(hs, ddof=1) / 4)
    assert row["infidelity_median"] == pytest.approx(0.25)
    assert row["fidelity_bias"] == pytest.approx(1.0)
    assert row["fidelity_bias_se"] == pytest.approx(np.std([-1, 1, 2, 2], ddof=1) / 2)
    assert "bootstrap" not in row


def test_no_bound_and_no_target_leave_cells_empty():
    row = table.summarise([_record(1.0), _record(2.0)], hs_crb=None, true_fidelity=None,
                          truth_figures={}, dim=2, interval="normal", level=0.95)
    assert row["hs_crb"] is None and "hs_mse_over_crb" not in row
    assert "fidelity_bias" not in row
    text = table.csv_text([{"channel": "x", **row}], table.COLUMNS)
    cells = next(csv.DictReader(io.StringIO(text)))
    assert cells["hs_crb"] == "" and cells["fidelity_bias"] == "" and cells["channel"] == "x"
    assert float(cells["hs_mse"]) == 1.5


def test_loglog_slope():
    shots = [100.0, 1000.0, 10000.0]
    assert table.loglog_slope(shots, [3e-2, 3e-3, 3e-4]) == pytest.approx(-1.0, abs=1e-12)
    assert table.loglog_slope(shots, [1.0, 10.0 ** -0.5, None]) == pytest.approx(-0.5, abs=1e-12)
    assert table.loglog_slope([100.0], [1.0]) is None
    rows = [{"channel": "c", "qubits": 1, "method": m, "shots": s, "hs_mse": v}
            for m, vals in (("a", [1.0, 0.1]), ("b", [1.0, 0.01]))
            for s, v in zip([1.0, 10.0], vals)]
    table.add_slopes(rows)
    assert [r["hs_mse_slope"] for r in rows] == pytest.approx([-1, -1, -2, -2])


def _boot_record(point, values, truth_names=("process_fidelity", "trace")):
    n = len(values)
    return _record(1.0, bootstrap=n, figure_names=list(truth_names),
                   point_figures=[point, 1.0],
                   bootstrap_values=[[v, 1.0] for v in values])


def test_coverage_of_the_normal_interval():
    """The normal interval is point ± 1.96·s*: with s* = std of the values, two
    repetitions whose interval contains the truth and one whose does not."""
    values = [0.89, 0.91]                     # s* = 0.01414, half width 0.0277
    records = [_boot_record(0.90, values), _boot_record(0.92, values), _boot_record(0.95, values)]
    truth = {"process_fidelity": 0.90, "trace": 1.0}
    cov = table.coverage(records, truth, interval="normal", level=0.95, dim=2)
    assert cov["process_fidelity"][0] == pytest.approx(2 / 3)
    assert cov["process_fidelity"][1] == pytest.approx(math.sqrt(2 / 9 / 3))
    assert "trace" not in cov                     # fixed by the constraints: left out
    row = table.summarise(records, hs_crb=None, true_fidelity=0.9, truth_figures=truth, dim=2,
                          interval="normal", level=0.95)
    assert row["bootstrap"] == 2 and row["interval"] == "normal"
    assert row["coverage_process_fidelity"] == pytest.approx(2 / 3)
    cols = table.columns_of([row])
    assert cols[-2:] == ["coverage_process_fidelity", "coverage_process_fidelity_se"]
    # percentile interval of two values: [0.8905, 0.9095] whatever the point
    cov = table.coverage(records, truth, interval="percentile", level=0.95, dim=2)
    assert cov["process_fidelity"][0] == 1.0


def test_text_table_lists_every_row():
    rows = [{"channel": "CZ", "qubits": 2, "shots": 100.0, "method": "mle", **table.summarise(
        [_record(1.0), _record(3.0)], hs_crb=2.0, true_fidelity=0.9, truth_figures={}, dim=4,
        interval="normal", level=0.95)}]
    table.add_slopes(rows)
    text = table.text_table(rows)
    assert "CZ" in text and "mle" in text and "2 ± 1" in text and "1.000" in text


def test_state_columns_are_named_for_the_state():
    rows = [{"channel": "phi+", "qubits": 2, "shots": 100.0, "method": "mle",
             "process_fidelity_true": 0.9, "hs_mse": 0.1, "hs_mse_se": 0.01, "repeats": 3}]
    named = table.named_for(rows, "state")
    assert named[0]["state"] == "phi+" and named[0]["state_fidelity_true"] == 0.9
    assert "channel" not in named[0] and table.named_for(rows, "process") == rows
    cols = table.columns_of(named, "state")
    assert cols[:4] == ["state", "qubits", "shots", "method"]
    assert "state_fidelity_true" in cols and "process_fidelity_true" not in cols
    assert len(cols) == len(table.COLUMNS)
    assert table.text_table(named, "state").splitlines()[0].startswith("state ")
    text = table.csv_text(named, cols)
    assert next(csv.DictReader(io.StringIO(text)))["state_fidelity_true"] == "0.9"


def test_coverage_uses_the_range_of_a_state_figure():
    """The interval is clipped to the range of the figure: a state's purity lies in
    [1/d, 1], a process's (Tr J²/d²) in [1/d², 1] (common practice). A bootstrap that
    spreads below 1/2 around a point at 0.52 gives a normal interval reaching under 0.5;
    clipped for a one-qubit state it starts at 0.5, so a truth of 0.5 is covered."""
    values = [[0.40], [0.64], [0.45], [0.59], [0.52]]
    records = [_record(0.1, bootstrap=5, figure_names=["purity"], point_figures=[0.52],
                       bootstrap_values=values)]
    state = table.coverage(records, {"purity": 0.5}, interval="normal", level=0.95, dim=2,
                           kind="state")
    assert state["purity"][0] == 1.0
    from gatescope.intervals import interval, parameter_range

    lo, _ = interval(np.array(values)[:, 0], 0.52, 0.95, "normal", parameter_range("purity", 2))
    assert lo < 0.5                        # the process range does not clip there
    lo_state, _ = interval(np.array(values)[:, 0], 0.52, 0.95, "normal",
                           parameter_range("purity", 2, "state"))
    assert lo_state == 0.5
