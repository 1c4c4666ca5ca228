"""The result file (CONTRACT §5): layout, exact round trip, atomic save; and what
`gatescope.fit` puts in it for simulated data."""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import itertools
from importlib import metadata

import h5py
import numpy as np
import pytest
from scipy.special import gammaln

import gatescope as gs
from gatescope import results as results_module
from gatescope.conventions import GATES
from gatescope.simulate import channel_from_spec, simulate_counts

from conftest import simulated_experiment

SQ = 1 / np.sqrt(2)
KET = {"H": [1, 0], "V": [0, 1], "D": [SQ, SQ], "A": [SQ, -SQ], "R": [SQ, -1j * SQ], "L": [SQ, 1j * SQ]}
PAULI = {"I": np.eye(2), "X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]),
         "Z": np.diag([1.0, -1.0])}


def proj(label: str) -> np.ndarray:
    """Product projector of a label like "HD" or "H D" (qubit 1 leftmost)."""
    parts = label.split() if " " in label else list(label)
    out = np.array([[1.0 + 0j]])
    for p in parts:
        v = np.asarray(KET[p], dtype=complex)
        out = np.kron(out, np.outer(v, v.conj()))
    return out


def paulis(n):
    labels = ["".join(p) for p in itertools.product("IXYZ", repeat=n)]
    ops = []
    for lab in labels:
        m = np.array([[1.0 + 0j]])
        for c in lab:
            m = np.kron(m, PAULI[c])
        ops.append(m)
    return ops


def tr_out(J, d):
    return np.einsum("iaja->ij", J.reshape(d, d, d, d))


# --------------------------------------------------------------------------
# Fixtures: one 2-qubit CZ fit, and a 1-qubit experiment with every optional column
# --------------------------------------------------------------------------

@pytest.fixture(scope="module")
def cz_fit(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cz")
    exp, true_choi = simulated_experiment(folder / "data", "CZ", shots=1000, seed=11)
    res = gs.fit(exp, "mle", seed=5)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


def write_full_1q(folder, spec="H+amplitude-damping:0.1", shots=800, seed=3):
    """A one-qubit six-state run with seconds, background and efficiency columns, its
    counts drawn from the row model of CONTRACT §3 with those columns."""
    folder.mkdir(parents=True, exist_ok=True)
    channel = channel_from_spec(spec, 1)
    rows = simulate_counts(channel, shots=shots, seed=seed)
    rng = np.random.default_rng(seed)
    lines = ["prep,meas,counts,seconds,background,efficiency"]
    for k, (p, m, expected, _) in enumerate(rows):
        seconds, background, efficiency = 1.0 + 0.5 * (k % 2), 0.25 * (k % 3), 0.9 + 0.05 * (k % 2)
        n = rng.poisson(expected * seconds * efficiency + background)
        lines.append(f"{p},{m},{n},{seconds},{background},{efficiency}")
    (folder / "counts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "experiment.toml").write_text(
        'title = "one qubit with every column"\nqubits = 1\ntarget = "H"\ncounts = "counts.csv"\n',
        encoding="utf-8")
    return gs.read_experiment(folder / "experiment.toml")


@pytest.fixture(scope="module")
def full_1q(tmp_path_factory):
    folder = tmp_path_factory.mktemp("full")
    exp = write_full_1q(folder / "data")
    res = gs.fit(exp, "mle", bootstrap=12, seed=7, workers=1)
    path = res.save(folder / "out" / "result.h5")
    return exp, res, path


# --------------------------------------------------------------------------
# Exact round trip
# --------------------------------------------------------------------------

def assert_same(a, b, where="result"):
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        assert type(a) is type(b), where
        for f in dataclasses.fields(a):
            assert_same(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, np.ndarray):
        assert isinstance(b, np.ndarray), where
        assert a.shape == b.shape, (where, a.shape, b.shape)
        if a.dtype.kind in "OUS":
            assert b.dtype.kind in "OUS", (where, b.dtype)
            assert [str(x) for x in a.ravel()] == [str(x) for x in b.ravel()], where
        else:
            assert a.dtype == b.dtype, (where, a.dtype, b.dtype)
            assert np.array_equal(a, b, equal_nan=a.dtype.kind in "fc"), where
    elif isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), (where, set(a) ^ set(b))
        for k in a:
            assert_same(a[k], b[k], f"{where}[{k!r}]")
    elif isinstance(a, (tuple, list)):
        assert isinstance(b, (tuple, list)) and len(a) == len(b), where
        for k, (x, y) in enumerate(zip(a, b)):
            assert_same(x, y, f"{where}[{k}]")
    elif isinstance(a, float) and np.isnan(a):
        assert np.isnan(b), where
    else:
        assert a == b, (where, a, b)
        assert isinstance(b, type(a)) or isinstance(a, type(b)) or \
            (isinstance(a, (int, float)) and isinstance(b, (int, float))), (where, type(a), type(b))


def test_round_trip_is_exact(cz_fit):
    _, res, path = cz_fit
    back = gs.load_result(path)
    assert_same(res, back)
    for name in ("choi", "chi", "ptm"):
        assert np.array_equal(getattr(res, name), getattr(back, name))


def test_round_trip_with_every_column_and_bootstrap_is_exact(full_1q):
    _, res, path = full_1q
    assert res.bootstrap is not None and res.bootstrap.figures.shape[0] == 12
    assert res.figures["process_fidelity"].ci is not None
    back = gs.load_result(path)
    assert_same(res, back)


def test_saving_a_loaded_result_gives_the_same_result(cz_fit, tmp_path):
    _, res, path = cz_fit
    again = gs.load_result(path).save(tmp_path / "again.h5")
    assert_same(res, gs.load_result(again))


# --------------------------------------------------------------------------
# The CONTRACT §5 layout, read with h5py directly
# --------------------------------------------------------------------------

def text(value) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def test_root_attributes(cz_fit):
    _, _, path = cz_fit
    with h5py.File(path, "r") as f:
        assert text(f.attrs["format"]) == "gatescope.result"
        assert int(f.attrs["format_version"]) == 1
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
    # chi and PTM in the CONTRACT §2 conventions, recomputed from the stored Choi matrix:
    # |P>> = Σ_i |i> ⊗ P|i>, χ_mn = <<P_m|J|P_n>>/d², R_ij = Tr[(P_j^T ⊗ P_i) J]/d
    ops = paulis(2)
    vecs = np.array([P.T.reshape(-1) for P in ops]).T
    np.testing.assert_allclose(chi, vecs.conj().T @ J @ vecs / d**2, atol=1e-13)
    ref_ptm = np.array([[np.trace(np.kron(Pj.T, Pi) @ J).real / d for Pj in ops] for Pi in ops])
    np.testing.assert_allclose(ptm, ref_ptm, atol=1e-13)


def test_log_likelihood_and_diagnostics_follow_the_row_model(full_1q):
    # ν_k = λ_g · seconds · efficiency · Tr[(ρ^T ⊗ E) J] + background (CONTRACT §3), λ_g one
    # per preparation; ℓ = Σ [n log ν − ν − log n!] (CONTRACT §5), all from the file alone.
    _, _, path = full_1q
    with h5py.File(path, "r") as f:
        c = f["input/counts"]
        n = c["counts"][()].astype(float)
        pi, mi = c["prep_index"][()], c["meas_index"][()]
        exposure = c["seconds"][()] * c["efficiency"][()]
        bg = c["background"][()]
        rho, eff = f["model/prep_states"][()], f["model/meas_effects"][()]
        J = f["estimate/choi"][()]
        lam = f["estimate/intensities"][()]
        ll = float(f["estimate"].attrs["log_likelihood"])
        dg = f["diagnostics"]
        nu_file = dg["expected_counts"][()]
        pearson = dg["pearson_residuals"][()]
        deviance = dg["deviance_residuals"][()]
        chi2, dof = float(dg.attrs["chi2"]), int(dg.attrs["dof"])
    p = np.array([np.trace(np.kron(rho[a].T, eff[b]) @ J).real for a, b in zip(pi, mi)])
    nu = lam[pi] * exposure * p + bg
    np.testing.assert_allclose(nu_file, nu, rtol=1e-10)
    assert ll == pytest.approx(float(np.sum(n * np.log(nu) - nu - gammaln(n + 1))), rel=1e-10)
    np.testing.assert_allclose(pearson, (n - nu) / np.sqrt(nu), rtol=1e-9, atol=1e-12)
    dev = np.sign(n - nu) * np.sqrt(np.maximum(2 * (np.where(n > 0, n * np.log(np.maximum(n, 1) / nu), 0)
                                                    - (n - nu)), 0))
    np.testing.assert_allclose(deviance, dev, rtol=1e-9, atol=1e-9)
    assert chi2 == pytest.approx(float(np.sum(pearson**2)), rel=1e-12)
    # rows − free process parameters (d⁴ − d² = 12) − intensities (6 preparations)
    assert dof == 36 - 12 - 6


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


def _find(attrs, *fragments):
    keys = [k for k in attrs if all(frag in k.lower() for frag in fragments)]
    assert keys, (fragments, list(attrs))
    return attrs[keys[0]]


def test_provenance_group(cz_fit):
    _, res, path = cz_fit
    with h5py.File(path, "r") as f:
        prov = dict(f["provenance"].attrs)
    assert text(_find(prov, "gatescope")) == gs.__version__
    assert "command" in " ".join(prov) and "seed" in prov
    start = dt.datetime.fromisoformat(text(_find(prov, "start")))
    end = dt.datetime.fromisoformat(text(_find(prov, "end")))
    assert start.utcoffset() == dt.timedelta(0) and end.utcoffset() == dt.timedelta(0)
    assert start <= end
    assert float(_find(prov, "wall")) >= 0
    for key in ("host", "platform", "python"):
        assert text(_find(prov, key)), key
    for dep in ("numpy", "scipy", "numba", "h5py", "tqdm"):
        assert text(_find(prov, dep)) == metadata.version(dep), dep


def test_diagnostics_group_shapes(cz_fit):
    exp, _, path = cz_fit
    with h5py.File(path, "r") as f:
        dg = f["diagnostics"]
        for name in ("expected_counts", "pearson_residuals", "deviance_residuals"):
            assert dg[name].shape == (exp.n_rows,) and dg[name].dtype == np.float64, name
        assert "chi2" in dg.attrs and "dof" in dg.attrs
        # 1296 rows − 240 process parameters − 36 intensities
        assert int(dg.attrs["dof"]) == 1296 - 240 - 36


# --------------------------------------------------------------------------
# Atomic save
# --------------------------------------------------------------------------

def test_save_leaves_only_the_result_file(cz_fit, tmp_path):
    _, res, _ = cz_fit
    out = tmp_path / "folder" / "r.h5"
    res.save(out)
    assert sorted(p.name for p in out.parent.iterdir()) == ["r.h5"]
    assert gs.load_result(out).method == "mle"


def test_a_failing_save_leaves_no_file(cz_fit, tmp_path):
    _, res, _ = cz_fit
    bad = dataclasses.replace(res, provenance={**res.provenance, "broken": {"a dict": "h5py cannot store"}})
    out = tmp_path / "r.h5"
    with pytest.raises(Exception):
        bad.save(out)
    assert list(tmp_path.iterdir()) == []


def test_a_crash_half_way_leaves_no_file_and_keeps_the_old_one(cz_fit, tmp_path, monkeypatch):
    _, res, _ = cz_fit
    out = tmp_path / "r.h5"
    res.save(out)
    before = out.read_bytes()

    def half_then_crash(f, r):
        f.attrs["format"] = "gatescope.result"
        f.create_group("input")
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(results_module, "_write", half_then_crash)
    with pytest.raises(RuntimeError, match="simulated"):
        res.save(out)
    with pytest.raises(RuntimeError, match="simulated"):
        res.save(tmp_path / "new.h5")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.h5"]
    assert out.read_bytes() == before


# --------------------------------------------------------------------------
# What fit puts in the file for simulated data
# --------------------------------------------------------------------------

@pytest.mark.parametrize("method", ["mle", "pls"])
def test_fit_of_simulated_cz_is_cptp(cz_fit, method):
    exp, res, path = cz_fit
    if method != "mle":
        res = gs.fit(exp, method)
    matrices = [res.choi] + ([gs.load_result(path).choi] if method == "mle" else [])
    for J in matrices:
        assert np.abs(J - J.conj().T).max() <= 1e-9
        assert np.linalg.eigvalsh(J)[0] >= -1e-9
        assert np.abs(tr_out(J, 4) - np.eye(4)).max() <= 1e-9
    # a pure CZ measured with 1000 counts per basis: the estimate is close to it
    assert res.figures["process_fidelity"].value > 0.97


def _fidelities(tmp_path, spec, target, *, shots, seeds, n_qubits):
    out = []
    for seed in seeds:
        exp, true_choi = simulated_experiment(tmp_path / f"s{seed}", spec, shots=shots, seed=seed,
                                              n_qubits=n_qubits)
        out.append(gs.fit(exp, "mle").figures["process_fidelity"].value)
    v = target.T.reshape(-1)
    d = target.shape[0]
    truth = np.vdot(v, true_choi @ v).real / d**2
    return np.array(out), truth


@pytest.mark.parametrize("spec,target,shots,n_seeds,n_qubits", [
    ("H+amplitude-damping:0.1+dephasing:0.05", GATES["H"], 500, 24, 1),
    ("CZ+depolarizing:0.1+zz:0.1", GATES["CZ"], 1000, 8, 2),
])
def test_fit_recovers_the_true_process_fidelity(tmp_path, spec, target, shots, n_seeds, n_qubits):
    # The spread σ of the estimate is measured from repeated simulations of the same
    # channel; every estimate must lie within 4σ of the truth, and their mean within
    # 4σ/√N (a bias far beyond the statistical error would fail). Seeds are fixed, so
    # the test is deterministic.
    values, truth = _fidelities(tmp_path, spec, target, shots=shots, seeds=range(n_seeds),
                                n_qubits=n_qubits)
    sigma = values.std(ddof=1)
    assert 0 < sigma < 0.05
    assert np.all(np.abs(values - truth) <= 4 * sigma), (values - truth, sigma)
    assert abs(values.mean() - truth) <= 4 * sigma / np.sqrt(n_seeds), (values.mean() - truth, sigma)
