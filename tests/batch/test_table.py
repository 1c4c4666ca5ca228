"""summary.csv (gatescope.batch.table): its columns, rows from results and failures,
numbers that read back exactly, condition columns."""

from __future__ import annotations

import csv
import io

import gatescope as gs
import h5py
import pytest
from gatescope.batch.table import (P_VALUES, columns, row_from_failure, row_from_result,
                                   summary_text, write_summary)
from gatescope.merit import FIGURE_NAMES
from support import simulated_experiment


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    folder = tmp_path_factory.mktemp("table")
    exp, _ = simulated_experiment(folder / "data", "H+depolarizing:0.1", shots=500, seed=3,
                                  n_qubits=1)
    with open(exp.path, "a", encoding="utf-8") as fh:
        fh.write('\n[conditions]\ndelay_ps = 120\npump_mW = 40.5\nrun = "night 3"\nseconds = 2\n')
    res = gs.fit(gs.read_experiment(exp.path), bootstrap=10, seed=4, workers=1)
    path = res.save(folder / "r.h5")
    return res, path, exp.path


def read(text: str) -> list[dict]:
    return list(csv.DictReader(io.StringIO(text)))


def test_columns_in_the_documented_order(fitted):
    res, _, exp_path = fitted
    rows = [row_from_result("b", exp_path, res),
            row_from_failure("a", "/x/experiment.toml", "bad line", 0.1, {"note": "dusty"})]
    header, cond = columns(rows)
    figures = [n for n in FIGURE_NAMES if n in res.figures]
    expected = ["name", "path", "status"]
    for n in figures:
        expected += [n, f"{n}_ci_low", f"{n}_ci_high"]
    expected += [*P_VALUES, "seconds", "error"]
    # conditions sorted by name; `seconds` is taken by a fixed column
    expected += ["delay_ps", "note", "pump_mW", "run", "conditions.seconds"]
    assert header == expected
    assert cond["seconds"] == "conditions.seconds"


def test_a_done_row_carries_the_result_file_numbers_exactly(fitted):
    res, path, exp_path = fitted
    [row] = read(summary_text([row_from_result("scan/d1", exp_path, res)]))
    assert row["name"] == "scan/d1" and row["status"] == "done" and row["error"] == ""
    assert row["path"] == str(exp_path)
    # read the file with h5py directly, not through gatescope's reader
    with h5py.File(path, "r") as f:
        for name, ds in f["figures"].items():
            assert float(row[name]) == float(ds[()])
            assert float(row[f"{name}_ci_low"]) == float(ds.attrs["ci_low"])
            assert float(row[f"{name}_ci_high"]) == float(ds.attrs["ci_high"])
        for key in P_VALUES:
            assert float(row[key]) == float(f["diagnostics"].attrs[key])
        assert float(row["seconds"]) == float(f["provenance"].attrs["wall_seconds"])
    assert (row["delay_ps"], row["pump_mW"], row["run"], row["conditions.seconds"]) == \
        ("120", "40.5", "night 3", "2")


def test_a_failed_row_has_its_message_and_empty_figures(fitted):
    res, _, exp_path = fitted
    message = 'counts.csv, line 3: counts must be non-negative, got "-1"\nsecond line'
    text = summary_text([row_from_failure("bad", "/d/bad/experiment.toml", message, 0.25),
                         row_from_result("good", exp_path, res)])
    bad, good = read(text)
    assert bad["status"] == "failed" and bad["error"] == message      # quoted, kept whole
    assert bad["process_fidelity"] == bad["purity_ci_low"] == "" and bad["seconds"] == "0.25"
    assert good["status"] == "done"


def test_rows_are_sorted_by_name_and_the_file_is_replaced(fitted, tmp_path):
    res, _, exp_path = fitted
    names = ["zeta", "alpha/2", "alpha", "mid"]
    out = tmp_path / "summary.csv"
    out.write_text("old contents\n")
    write_summary(out, [row_from_result(n, exp_path, res) for n in names])
    assert [r["name"] for r in read(out.read_text())] == sorted(names)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["summary.csv"]


def test_without_a_bootstrap_the_interval_cells_are_empty(fitted):
    res, _, exp_path = fitted
    bare = gs.fit(gs.read_experiment(exp_path))
    [row] = read(summary_text([row_from_result("x", exp_path, bare)]))
    assert row["purity"] != "" and row["purity_ci_low"] == row["purity_ci_high"] == ""
