"""The result file (gatescope.result_file; docs/file-formats.md, "Result file"): every
group and attribute of the layout.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import itertools
from pathlib import Path

import gatescope as gs
import h5py
import numpy as np
import pytest
from gatescope.conventions import GATES
from support import simulated_experiment


def text(value) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


SQ = 1 / np.sqrt(2)


KET = {"H": [1, 0], "V": [0, 1], "D": [SQ, SQ], "A": [SQ, -SQ], "R": [SQ, -1j * SQ], "L": [SQ, 1j * SQ]}


def proj(label: str) -> np.ndarray:
    """Product projector of a label like "HD" or "H D" (qubit 1 leftmost)."""
    parts = label.split() if " " in label else list(label)
    out = np.array([[1.0 + 0j]])
    for p in parts:
        v = np.asarray(KET[p], dtype=complex)
        out = np.kron(out, np.outer(v, v.conj()))
    return out


PAULI = {"I": np.eye(2), "X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]),
         "Z": np.diag([1.0, -1.0])}


def paulis(n):
    labels = ["".join(p) for p in itertools.product("IXYZ", repeat=n)]
    ops = []
    for lab in labels:
        m = np.array([[1.0 + 0j]])
        for c in lab:
            m = np.kron(m, PAULI[c])
        ops.append(m)
    return ops


def test_figures_extra_group_and_exact_round_trip(cz_result):
    res, path, _, diamond = cz_result
    with h5py.File(path, "r") as f:
        extra = f["figures_extra"]
        assert extra["nearest_unitary"].dtype == np.complex128
        np.testing.assert_array_equal(extra["nearest_unitary"][()], res.figure_details["nearest_unitary"])
        assert extra["local_phases_after"].dtype == np.float64
        label = extra.attrs["concurrence_input"]
        assert (label.decode() if isinstance(label, bytes) else label) == "D D"
        for name in ("unitarity", "process_fidelity_local_phases", "concurrence"):
            assert f["figures"][name].shape == ()
        assert ("diamond_distance" in f["figures"]) == diamond
    back = gs.load_result(path)
    assert set(back.figure_details) == set(res.figure_details)
    for key, value in res.figure_details.items():
        if isinstance(value, np.ndarray):
            assert back.figure_details[key].dtype == value.dtype
            np.testing.assert_array_equal(back.figure_details[key], value)
        else:
            assert back.figure_details[key] == value and type(back.figure_details[key]) is type(value)
    assert list(back.figures) == list(res.figures)
    assert [f.value for f in back.figures.values()] == [f.value for f in res.figures.values()]


def test_root_attributes(cz_fit):
    _, _, path = cz_fit
    with h5py.File(path, "r") as f:
        assert text(f.attrs["format"]) == "gatescope.result"
        assert int(f.attrs["format_version"]) == 2
        created = dt.datetime.fromisoformat(text(f.attrs["created_utc"]))
        assert created.utcoffset() == dt.timedelta(0)
        assert abs((dt.datetime.now(dt.timezone.utc) - created).total_seconds()) < 24 * 3600


def test_input_group(full_1q):
    exp, _, path = full_1q
    toml_bytes = exp.path.read_bytes()
    csv_bytes = exp.counts_path.read_bytes()
    csv_rows = [line.split(",") for line in csv_bytes.decode("utf-8").splitlines()[1:]]
    with h5py.File(path, "r") as f:
        ds = f["input/experiment_toml"]
        assert h5py.check_string_dtype(ds.dtype) is not None
        assert text(ds[()]) == toml_bytes.decode("utf-8")
        assert text(ds.attrs["sha256"]) == hashlib.sha256(toml_bytes).hexdigest()
        counts = f["input/counts"]
        assert text(counts.attrs["sha256"]) == hashlib.sha256(csv_bytes).hexdigest()
        for name in ("prep", "meas"):
            assert h5py.check_string_dtype(counts[name].dtype).encoding == "utf-8"
        assert [text(x) for x in counts["prep"][()]] == [r[0] for r in csv_rows]
        assert [text(x) for x in counts["meas"][()]] == [r[1] for r in csv_rows]
        assert counts["counts"].dtype == np.int64
        assert counts["counts"][()].tolist() == [int(r[2]) for r in csv_rows]
        for k, name in enumerate(("seconds", "background", "efficiency"), start=3):
            assert counts[name].dtype == np.float64, name
            assert counts[name][()].tolist() == [float(r[k]) for r in csv_rows], name
        for name in ("prep_index", "meas_index"):
            assert counts[name].dtype == np.int64
        # each row's index points at the state of its label
        prep_states = f["model/prep_states"][()]
        meas_effects = f["model/meas_effects"][()]
        for row, pi, mi in zip(csv_rows, counts["prep_index"][()], counts["meas_index"][()]):
            np.testing.assert_allclose(prep_states[pi], proj(row[0]), atol=1e-15)
            np.testing.assert_allclose(meas_effects[mi], proj(row[1]), atol=1e-15)


def test_model_and_estimate_groups(cz_fit):
    exp, res, path = cz_fit
    d = 4
    with h5py.File(path, "r") as f:
        ps, me = f["model/prep_states"], f["model/meas_effects"]
        assert ps.dtype == np.complex128 and ps.shape == (36, d, d)
        assert me.dtype == np.complex128 and me.shape == (36, d, d)
        est = f["estimate"]
        assert est["choi"].dtype == np.complex128 and est["choi"].shape == (d * d, d * d)
        assert est["chi"].dtype == np.complex128 and est["chi"].shape == (d * d, d * d)
        assert est["ptm"].dtype == np.float64 and est["ptm"].shape == (d * d, d * d)
        for key in ("method", "converged", "iterations", "log_likelihood", "stop_reason", "seconds"):
            assert key in est.attrs, key
        assert text(est.attrs["method"]) == "mle"
        assert bool(est.attrs["converged"]) is True
        assert int(est.attrs["iterations"]) >= 1
        assert float(est.attrs["seconds"]) >= 0
        assert text(est.attrs["stop_reason"])
        J = est["choi"][()]
        chi = est["chi"][()]
        ptm = est["ptm"][()]
    # chi and PTM in the README's conventions, recomputed from the stored Choi matrix:
    # |P>> = Σ_i |i> ⊗ P|i>, χ_mn = <<P_m|J|P_n>>/d², R_ij = Tr[(P_j^T ⊗ P_i) J]/d
    ops = paulis(2)
    vecs = np.array([P.T.reshape(-1) for P in ops]).T
    np.testing.assert_allclose(chi, vecs.conj().T @ J @ vecs / d**2, atol=1e-13)
    ref_ptm = np.array([[np.trace(np.kron(Pj.T, Pi) @ J).real / d for Pj in ops] for Pi in ops])
    np.testing.assert_allclose(ptm, ref_ptm, atol=1e-13)


def test_figures_group(cz_fit):
    _, res, path = cz_fit
    d = 4
    with h5py.File(path, "r") as f:
        figs = f["figures"]
        for name in ("process_fidelity", "average_gate_fidelity", "purity", "trace"):
            assert figs[name].shape == () and figs[name].dtype == np.float64, name
        J = f["estimate/choi"][()]
        v = GATES["CZ"].T.reshape(-1)
        f_pro = np.vdot(v, J @ v).real / d**2
        assert float(figs["process_fidelity"][()]) == pytest.approx(f_pro, abs=1e-14)
        assert float(figs["average_gate_fidelity"][()]) == pytest.approx((d * f_pro + 1) / (d + 1), abs=1e-12)
        assert float(figs["purity"][()]) == pytest.approx(np.vdot(J, J).real / d**2, abs=1e-12)
        assert float(figs["trace"][()]) == pytest.approx(np.trace(J).real / d, abs=1e-12)
        assert "ci_low" not in figs["process_fidelity"].attrs      # no bootstrap in this fit


def test_figures_carry_intervals_and_bootstrap_group(full_1q):
    _, res, path = full_1q
    with h5py.File(path, "r") as f:
        ds = f["figures/process_fidelity"]
        low, high, level = (float(ds.attrs[k]) for k in ("ci_low", "ci_high", "ci_level"))
        assert level == 0.95
        assert low <= high
        b = f["bootstrap"]
        names = [text(x) for x in b["figures"].attrs["names"]]
        assert b["figures"].dtype == np.float64 and b["figures"].shape == (12, len(names))
        assert "process_fidelity" in names
        assert text(b.attrs["kind"]) in ("parametric", "nonparametric")
        assert int(b.attrs["seed"]) == 7 and int(b.attrs["samples"]) == 12
        values = b["figures"][()][:, names.index("process_fidelity")]
    assert np.all((values > 0) & (values <= 1))
    assert (low, high) == res.figures["process_fidelity"].ci


def test_diagnostics_group_shapes(cz_fit):
    exp, _, path = cz_fit
    with h5py.File(path, "r") as f:
        dg = f["diagnostics"]
        for name in ("expected_counts", "pearson_residuals", "deviance_residuals"):
            assert dg[name].shape == (exp.n_rows,) and dg[name].dtype == np.float64, name
        assert "chi2" in dg.attrs and "dof" in dg.attrs
        # 1296 rows − 240 process parameters − 36 intensities
        assert int(dg.attrs["dof"]) == 1296 - 240 - 36


@pytest.mark.parametrize("attr, value, words", [
    ("format", "someone.else", "not a gatescope.result file"),
    ("format_version", 99, "is 99; this gatescope reads format versions 1, 2 .the file is newer"),
])
def test_files_of_another_format_or_version_are_refused(cz_fit, tmp_path, attr, value, words):
    _, res, _ = cz_fit
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path, "r+") as f:
        f.attrs[attr] = value
    with pytest.raises(gs.InputError, match=words):
        gs.load_result(path)


def test_a_file_that_is_not_hdf5_is_refused(tmp_path):
    path = tmp_path / "r.h5"
    path.write_text("prep,meas,counts\n")
    with pytest.raises(gs.InputError, match="not an HDF5 file"):
        gs.load_result(path)
    with pytest.raises(gs.InputError, match="file not found"):
        gs.load_result(tmp_path / "missing.h5")


def test_origin_is_recorded(cz_fit):
    _, _, path = cz_fit
    with h5py.File(path) as f:
        assert text(f.attrs["origin"]) == "fit"


# -- a self-describing file (format 2) ---------------------------------------------------

FORMAT1 = Path(__file__).resolve().parent / "data" / "format1"


def test_the_estimate_states_its_conventions(cz_fit):
    _, _, path = cz_fit
    from gatescope.conventions import pauli_labels

    with h5py.File(path, "r") as f:
        est = f["estimate"]
        assert "input factor first" in text(est["choi"].attrs["convention"])
        assert "Tr_out J = I" in text(est["choi"].attrs["convention"])
        for name in ("chi", "ptm"):
            assert "I < X < Y < Z" in text(est[name].attrs["pauli_order"])
            assert [text(x) for x in est[name].attrs["pauli_labels"]] == pauli_labels(2)
            assert "qubit 1" in text(est[name].attrs["qubit_order"])
        assert "P_i Phi(P_j)" in text(est["ptm"].attrs["convention"])
        assert text(est.attrs["status"]) == "converged"


def test_dimensioned_datasets_carry_units(full_1q, cz_result):
    _, _, path = full_1q
    with h5py.File(path, "r") as f:
        counts = f["input/counts"]
        assert text(counts["seconds"].attrs["units"]) == "s"
        assert text(counts["background"].attrs["units"]) == "counts"
        assert text(counts["counts"].attrs["units"]) == "counts"
        assert text(f["estimate/intensities"].attrs["units"]) == "counts/s"
        assert text(f["diagnostics/expected_counts"].attrs["units"]) == "counts"
        for name in f["figures"]:
            assert text(f["figures"][name].attrs["units"]) == "1"
            assert text(f["figures"][name].attrs["description"])
    with h5py.File(cz_result[1], "r") as f:
        for name in ("local_phases_before", "local_phases_after"):
            assert text(f["figures_extra"][name].attrs["units"]) == "rad"


def test_the_seed_is_absent_without_random_numbers_and_an_integer_with_them(tmp_path, full_1q,
                                                                          make_experiment):
    exp, _ = make_experiment("H", shots=200, n_qubits=1)
    path = gs.fit(exp).save(tmp_path / "r.h5")
    with h5py.File(path, "r") as f:
        assert "seed" not in f["provenance"].attrs
    with h5py.File(full_1q[2], "r") as f:
        seed = f["provenance"].attrs["seed"]
        assert isinstance(seed, np.integer) and int(seed) == 7


def test_warnings_are_stored_one_string_each(tmp_path, make_experiment):
    exp, _ = make_experiment("CNOT+depolarizing:0.05", shots=800, prep=("H", "V"), meas=("H", "V"))
    with pytest.warns(gs.GatescopeWarning):
        res = gs.fit(exp)
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path, "r") as f:
        stored = [text(x) for x in f["warnings"][()]]
        assert f["warnings"].ndim == 1 and h5py.check_string_dtype(f["warnings"].dtype).encoding == "utf-8"
        assert not f["figures/process_fidelity"].attrs["determined"]
        assert f["figures/truth_table_fidelity"].attrs["determined"]
    assert stored == list(res.warnings) and stored[0].startswith("[undetermined] ")
    back = gs.load_result(path)
    assert back.warnings == res.warnings
    assert not back.figures["process_fidelity"].determined


def test_rows_keep_their_csv_lines_and_outliers_their_lines(tmp_path, make_experiment):
    exp, _ = make_experiment("CZ", shots=1000, seed=3)
    text_csv = exp.counts_path.read_text().splitlines()
    # a blank line after the header, and one row whose counts do not fit
    bad = text_csv[5].split(",")
    bad[2] = str(int(bad[2]) + 400)
    lines = [text_csv[0], ""] + text_csv[1:5] + [",".join(bad)] + text_csv[6:]
    exp.counts_path.write_text("\n".join(lines) + "\n")
    exp = gs.read_experiment(exp.path)
    with pytest.warns(gs.GatescopeWarning):
        res = gs.fit(exp)
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path, "r") as f:
        line = f["input/counts/line"][()]
        rows = f["diagnostics/outlier_rows"][()]
        outlier_lines = f["diagnostics/outlier_lines"][()]
    assert line[0] == 3                                   # header 1, blank line 2
    assert 7 in outlier_lines.tolist()                    # the editor's line of the bad row
    np.testing.assert_array_equal(outlier_lines, line[rows])


# -- files of format 1 stay readable -----------------------------------------------------

def test_format_1_files_are_read(tmp_path):
    # written by the format-1 writer (gatescope 0.1.0): an mle fit with a bootstrap, a lin fit
    boot = gs.load_result(FORMAT1 / "fit_1q_bootstrap.h5")
    assert boot.bootstrap.samples == 12 and boot.provenance["seed"] == 3
    assert boot.warnings == () and boot.status is None and "line" not in boot.counts_columns
    assert boot.diagnostics.outlier_lines is None
    lin = gs.load_result(FORMAT1 / "fit_2q_lin.h5")
    assert "seed" not in lin.provenance                   # format 1 wrote "" for none
    assert lin.method == "lin" and np.isinf(lin.log_likelihood)
    # the format-1 writer with states and conditions: a two-qubit state with a bootstrap,
    # a process with [conditions]
    state = gs.load_result(FORMAT1 / "state_2q_bootstrap.h5")
    assert state.kind == "state" and state.rho.shape == (4, 4) and state.choi is None
    assert state.bootstrap.samples == 8 and "state_fidelity" in state.figures
    conditioned = gs.load_result(FORMAT1 / "fit_2q_conditions.h5")
    assert conditioned.conditions == {"delay_ps": 120, "run": "night 3"}
    again_state = gs.load_result(state.save(tmp_path / "state.h5"))
    np.testing.assert_array_equal(again_state.rho, state.rho)
    # saved again, it becomes a format-2 file with the same content
    again = gs.load_result(lin.save(tmp_path / "again.h5"))
    np.testing.assert_array_equal(again.choi, lin.choi)
    with h5py.File(tmp_path / "again.h5", "r") as f:
        assert int(f.attrs["format_version"]) == 2 and "checksums" in f


# -- damaged files: an InputError naming the part, never a traceback --------------------

def damage(path, change):
    with h5py.File(path, "r+") as f:
        change(f)


@pytest.mark.parametrize("change, part, words", [
    (lambda f: f.__delitem__("estimate"), "/estimate missing", "checksums"),
    (lambda f: f["input/counts/counts"].__setitem__(0, 6_000_000_000), "/input/counts/counts",
     "does not match its checksums"),
    (lambda f: f["figures/process_fidelity"].attrs.__setitem__("ci_low", 0.1), "/figures/process_fidelity",
     "does not match its checksums"),
], ids=["group-removed", "counts-altered", "attribute-altered"])
def test_a_changed_file_is_refused_naming_the_part(cz_fit, tmp_path, change, part, words):
    _, res, _ = cz_fit
    path = res.save(tmp_path / "r.h5")
    damage(path, change)
    with pytest.raises(gs.InputError, match=words) as info:
        gs.load_result(path)
    assert part in str(info.value)


@pytest.mark.parametrize("change, part, words", [
    (lambda f: f.attrs.__setitem__("format_version", "1"), "/@format_version", "expected a whole number"),
    (lambda f: f.__delitem__("estimate/chi"), "/estimate/chi", "missing"),
    (lambda f: (f.__delitem__("estimate/choi"), f["estimate"].create_dataset("choi", data=np.zeros((3, 5)))),
     "/estimate/choi", "not the Choi matrix"),
    (lambda f: f["estimate"].attrs.__setitem__("iterations", "many"), "/estimate/@iterations",
     "expected a whole number"),
    (lambda f: f["model/prep_states"].__setitem__((0, 0, 0), np.nan), "/model/prep_states",
     "not finite"),
], ids=["version-as-text", "chi-missing", "choi-3x5", "iterations-as-text", "nan-state"])
def test_a_malformed_unchecked_file_is_refused_naming_the_part(cz_fit, tmp_path, change, part, words):
    # verify=False reads past the checksums, to check the layout checks themselves
    from gatescope import result_file

    _, res, _ = cz_fit
    path = res.save(tmp_path / "r.h5")
    damage(path, change)
    with pytest.raises(gs.InputError, match=words) as info:
        result_file.read(path, verify=False)
    assert info.value.key == part


def test_a_truncated_file_is_called_truncated(cz_fit, tmp_path):
    _, res, _ = cz_fit
    path = res.save(tmp_path / "r.h5")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(gs.InputError) as info:
        gs.load_result(path)
    assert "truncated" in info.value.message and "not an HDF5 file" not in info.value.message


def test_byte_flips_in_the_data_are_found(cz_fit, tmp_path):
    # flip one byte inside the stored Choi matrix: the file still opens, its content differs
    _, res, _ = cz_fit
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path, "r") as f:
        offset = f["estimate/choi"].id.get_offset()
    raw = bytearray(path.read_bytes())
    raw[offset + 3] ^= 0x40
    path.write_bytes(bytes(raw))
    with pytest.raises(gs.InputError, match="/estimate/choi changed"):
        gs.load_result(path)
def test_conditions_group_round_trip(tmp_path):
    folder = tmp_path / "data"
    exp, _ = simulated_experiment(folder, "H", shots=200, seed=2, n_qubits=1)
    with open(exp.path, "a", encoding="utf-8") as fh:
        fh.write('\n[conditions]\ndelay_ps = 120\npump_mW = 40.5\nrun = "night 3"\n')
    res = gs.fit(gs.read_experiment(exp.path))
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path) as f:                      # as any HDF5 tool sees it
        attrs = f["conditions"].attrs
        assert list(attrs) == ["delay_ps", "pump_mW", "run"]     # the file's order
        assert attrs["delay_ps"].dtype == np.int64 and attrs["delay_ps"] == 120
        assert attrs["pump_mW"].dtype == np.float64 and attrs["pump_mW"] == 40.5
        assert text(attrs["run"]) == "night 3"
    back = gs.load_result(path).conditions
    assert back == {"delay_ps": 120, "pump_mW": 40.5, "run": "night 3"}
    assert type(back["delay_ps"]) is int and type(back["pump_mW"]) is float
    # without conditions the group is there and empty
    bare = gs.fit(simulated_experiment(tmp_path / "bare", "H", shots=200, seed=2, n_qubits=1)[0])
    with h5py.File(bare.save(tmp_path / "bare.h5")) as f:
        assert len(f["conditions"].attrs) == 0
    assert gs.load_result(tmp_path / "bare.h5").conditions == {}
# --------------------------------------------------------------------------
# State results (docs/file-formats.md, "Result file": kind = "state")
# --------------------------------------------------------------------------

@pytest.fixture(scope="module")
def pair_fit(tmp_path_factory):
    from support import simulated_state_experiment

    folder = tmp_path_factory.mktemp("pair")
    exp, rho = simulated_state_experiment(folder / "data", "phi++visibility:0.9", shots=800,
                                          seed=3)
    res = gs.fit(exp, "mle", bootstrap=12, seed=4, workers=1)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


def test_state_result_layout(pair_fit):
    exp, res, path = pair_fit
    with h5py.File(path, "r") as f:
        assert text(f.attrs["kind"]) == "state"
        est = f["estimate"]
        assert set(est) == {"rho", "intensities"}
        rho = est["rho"][()]
        assert rho.dtype == np.complex128 and rho.shape == (4, 4)
        model = f["model"]
        assert "prep_states" not in model and "meas_effects" not in model
        single, parts = model["single_meas_effects"][()], model["meas_parts"][()]
        assert single.shape == (6, 2, 2) and parts.shape == (36, 2) and parts.dtype == np.int64
        # each row's setting is the product of its single-qubit effects, qubit 1 first
        meas_index = f["input/counts/meas_index"][()]
        for label, m in zip(f["input/counts/meas"][()], meas_index):
            np.testing.assert_allclose(np.kron(single[parts[m, 0]], single[parts[m, 1]]),
                                       proj(text(label)), atol=1e-15)
        assert "prep" not in f["input/counts"] and "prep_index" not in f["input/counts"]
        target = model["target_state"]
        assert text(target.attrs["name"]) == "phi+"
        np.testing.assert_allclose(target[()], [SQ, 0, 0, SQ], atol=1e-15)
        b = f["bootstrap"]
        assert b["rho_std"].shape == (4, 4) and b["rho_std"].dtype == np.complex128
        assert "choi_std" not in b and "chi_std" not in b and "ptm_std" not in b
        assert "chsh_a" in f["figures_extra"]
        # Tr ρ = 1 and the fidelity to phi+ is <phi+|ρ|phi+> (Nielsen & Chuang §9.2.2)
        psi = np.array([SQ, 0, 0, SQ])
        assert float(f["figures/state_fidelity"][()]) == pytest.approx(
            np.vdot(psi, rho @ psi).real, abs=1e-14)
    assert np.trace(rho).real == pytest.approx(1, abs=1e-13)


def test_state_result_round_trips_exactly(pair_fit):
    _, res, path = pair_fit
    back = gs.load_result(path)
    assert back.kind == "state" and back.choi is None and back.chi is None and back.ptm is None
    np.testing.assert_array_equal(back.rho, res.rho)
    assert list(back.figures) == list(res.figures)
    for name, fig in res.figures.items():
        assert back.figures[name].value == fig.value and back.figures[name].ci == fig.ci
    np.testing.assert_array_equal(back.bootstrap.rho_std, res.bootstrap.rho_std)
    np.testing.assert_array_equal(back.meas_parts, res.meas_parts)
    np.testing.assert_array_equal(back.figure_details["correlation_singular_values"],
                                  res.figure_details["correlation_singular_values"])
    assert back.target_name == "phi+" and back.dim == 4


def test_a_file_without_kind_is_a_process(cz_fit, tmp_path):
    _, res, _ = cz_fit
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path, "r+") as f:
        assert text(f.attrs["kind"]) == "process"
        del f.attrs["kind"]
    with pytest.raises(gs.InputError, match="checksums"):       # an altered file is refused
        gs.load_result(path)
    from gatescope import result_file

    back = gs.Result(**result_file.read(path, verify=False))   # its layout is read as before
    assert back.kind == "process" and back.rho is None
    np.testing.assert_array_equal(back.choi, res.choi)


def test_profile_intervals_bounds_and_the_boundary_flag_round_trip(tmp_path, make_experiment):
    exp, _ = make_experiment("H", n_qubits=1, shots=1000, exact=True)
    res = gs.fit(exp, interval="profile", lower_bound=True)
    path = res.save(tmp_path / "r.h5")
    with h5py.File(path, "r") as f:
        ds = f["figures/process_fidelity"]
        assert text(ds.attrs["ci_method"]) == "profile"
        assert bool(ds.attrs["touches_boundary"]) is True
        assert float(ds.attrs["lower_bound_level"]) == 0.95
        assert "lower_bound" not in f["figures/trace"].attrs
        assert "ci_method" not in f["figures/trace"].attrs
    back = gs.load_result(path)
    for name, fig in res.figures.items():
        got = back.figures[name]
        assert (got.ci, got.lower_bound, got.touches_boundary, got.interval_method) == \
            (fig.ci, fig.lower_bound, fig.touches_boundary, fig.interval_method), name
