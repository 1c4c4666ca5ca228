"""The bench folder (gatescope.bench.store): the journal and bench.h5."""

from __future__ import annotations

import json
import math

import numpy as np

from gatescope.bench import store


def test_journal_round_trip_is_exact(tmp_path):
    records = [{"a": 0.1 + 0.2, "b": [1e-300, math.pi], "c": None, "d": float("nan")},
               {"a": 1 / 3, "b": [], "c": "text é", "d": 2}]
    with store.Journal(tmp_path) as j:
        for r in records:
            j.append(r)
    back = store.Journal(tmp_path).read()
    assert back[1] == records[1]
    assert back[0]["a"] == 0.1 + 0.2 and back[0]["b"] == records[0]["b"]
    assert math.isnan(back[0]["d"])


def test_a_line_cut_short_is_dropped_and_overwritten(tmp_path):
    with store.Journal(tmp_path) as j:
        j.append({"k": 1})
        j.append({"k": 2})
    path = tmp_path / store.JOURNAL
    path.write_bytes(path.read_bytes() + b'{"k": 3, "x": [1, 2')     # a crash mid-write
    assert [r["k"] for r in store.Journal(tmp_path).read()] == [1, 2]
    with store.Journal(tmp_path) as j:
        j.append({"k": 4})
    assert [r["k"] for r in store.Journal(tmp_path).read()] == [1, 2, 4]
    assert all(json.loads(line) for line in path.read_text().splitlines())


def test_settings_round_trip(tmp_path):
    assert store.read_settings(tmp_path) is None
    store.write_settings(tmp_path, {"seed": 2 ** 62, "prep": ["H", "V"]})
    assert store.read_settings(tmp_path) == {"seed": 2 ** 62, "prep": ["H", "V"]}


def test_bench_file_round_trip(tmp_path):
    channels = [{"spec": "CZ", "qubits": 2, "target": "CZ", "trace": "preserving",
                 "full_rank": False, "choi": np.eye(16) / 4, "figure_names": ["purity"],
                 "figure_values": [1.0], "prep": ["HH", "HV"], "meas": ["DD", "DA"]}]
    runs = {"channel": np.array([0, 0]), "method": np.array(["mle", "lin"], dtype=object),
            "hs_error": np.array([0.1, np.nan]), "bootstrap_values": np.zeros((2, 3, 1))}
    rows = [{"channel": "CZ", "shots": 100.0, "hs_crb": None}]
    path = store.write_bench(tmp_path / "bench.h5", settings={"seed": 5, "methods": ["mle", "lin"]},
                             provenance={"command_line": "x"}, channels=channels,
                             bounds=[{"channel": 0, "shots": 100.0, "hs_crb": None}], runs=runs,
                             figure_names=["purity"], table=rows,
                             columns=["channel", "shots", "hs_crb"])
    back = store.read_bench(path)
    assert back["settings"]["seed"] == 5 and back["settings"]["methods"] == ["mle", "lin"]
    assert back["channels"][0]["spec"] == "CZ"
    assert list(back["channels"][0]["prep"]) == ["HH", "HV"]
    np.testing.assert_array_equal(back["channels"][0]["choi"], np.eye(16) / 4)
    assert list(back["runs"]["method"]) == ["mle", "lin"]
    assert np.isnan(back["runs"]["hs_error"][1]) and np.isnan(back["bounds"]["hs_crb"][0])
    assert back["columns"] == ["channel", "shots", "hs_crb"]
    assert list(back["table"]["channel"]) == ["CZ"] and np.isnan(back["table"]["hs_crb"][0])


def test_state_bench_file_round_trip(tmp_path):
    states = [{"spec": "phi+", "qubits": 2, "target": "phi+", "full_rank": False,
               "rho": np.eye(4) / 4, "figure_names": ["state_fidelity"],
               "figure_values": [0.25], "meas": ["HH", "HV"]}]
    runs = {"state": np.array([0]), "hs_error": np.array([0.1])}
    path = store.write_bench(tmp_path / "bench.h5", settings={"kind": "state"},
                             provenance={}, channels=states,
                             bounds=[{"state": 0, "shots": 10.0, "hs_crb": 0.5}], runs=runs,
                             figure_names=[], table=[{"state": "phi+"}], columns=["state"],
                             kind="state")
    back = store.read_bench(path)
    assert back["kind"] == "state" and "channels" not in back
    s = back["states"][0]
    assert s["spec"] == "phi+" and "trace" not in s and "prep" not in s and "choi" not in s
    np.testing.assert_array_equal(s["rho"], np.eye(4) / 4)
    assert list(s["meas"]) == ["HH", "HV"] and list(back["bounds"]["state"]) == [0]
    assert list(back["table"]["state"]) == ["phi+"]
