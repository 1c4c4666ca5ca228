"""Fuzzing the command line with malformed experiments and damaged result files.

A seeded generator makes experiments that are wrong in one way each (a bad key, value,
label, cell, separator, encoding, path, option, or data that determine nothing) and
result files damaged in one way each (flipped bytes in the stored data, random flips
anywhere, truncation, parts removed or replaced by values of the wrong kind, with the
checksums recomputed so that the layout checks themselves are exercised). For every
case `gatescope fit` or `gatescope show` must end with exit status 2 and a message,
never a traceback, and write nothing. A flip that happens to change nothing the file
holds (free space) may be read back: then the content must be exactly the original.

The default run takes seconds; ``pytest -m slow`` runs ten times as many cases.
"""

from __future__ import annotations

import json
import random
import subprocess
import sys
import textwrap
import warnings
from pathlib import Path

import gatescope as gs
import h5py
import numpy as np
import pytest
from gatescope import checksum, cli

SEED = 20261202
FORMAT1 = Path(__file__).resolve().parent / "data" / "format1"

GOOD_TOML = 'title = "fuzz"\nqubits = 1\ntarget = "H"\ncounts = "counts.csv"\n'
LABELS = ("H", "V", "D", "A", "R", "L")


def good_csv(rng: random.Random) -> list[list[str]]:
    rows = [["prep", "meas", "counts", "seconds", "background", "efficiency"]]
    for p in LABELS:
        for m in LABELS:
            rows.append([p, m, str(rng.randint(5, 400)), "1.5", "0.5", "0.9"])
    return rows


def join(rows) -> str:
    return "\n".join(",".join(r) for r in rows) + "\n"


def _junk(rng: random.Random) -> str:
    return "".join(rng.choice("QWZ#@!?xyz%&*") for _ in range(rng.randint(1, 4)))


# Each mutation returns (toml text, csv text or bytes, extra command-line arguments)
# and makes the experiment wrong in one way.

def m_missing_key(rng, rows):
    key = rng.choice(["qubits", "counts"])
    toml = "\n".join(ln for ln in GOOD_TOML.splitlines() if not ln.startswith(key)) + "\n"
    return toml, join(rows), []


def m_unknown_key(rng, rows):
    return GOOD_TOML + f"{rng.choice(['backgrund', 'qbits', 'shots', 'Title'])} = 3\n", join(rows), []


def m_bad_qubits(rng, rows):
    value = rng.choice(["0", "7", "-1", "1.5", '"1"', "true", "[1]", "{ a = 1 }",
                        "99999999999999999999", "2"])
    return GOOD_TOML.replace("qubits = 1", f"qubits = {value}"), join(rows), []


def m_bad_target(rng, rows):
    value = rng.choice(['"h"', '"CNOT"', '"Hadamard"', "3", '{ unitary = [["1", "0"], ["0", "2"]] }',
                        '{ unitary = [["1", "0"]] }', '{ unitary = "missing.npy" }',
                        '{ unitary = [["1", "x"], ["0", "1"]] }', '{ unitary = [["nan", "0"], ["0", "1"]] }',
                        '{ matrix = "U.npy" }', "[]"])
    return GOOD_TOML.replace('target = "H"', f"target = {value}"), join(rows), []


def m_bad_setting(rng, rows):
    line = rng.choice(['normalization = "per-row"', 'normalization = 1', 'trace = "decreasing"',
                       'input_rate = 100.0', 'trace = "leaky"',
                       '[conventions]\nright_circular = "H+V"', '[conventions]\nhandedness = "left"',
                       'normalization = "global"\ntrace = "decreasing"\ninput_rate = -5.0',
                       'normalization = "global"\ntrace = "decreasing"\ninput_rate = 1e308',
                       'normalization = "per-group"'])
    return GOOD_TOML + line + "\n", join(rows), []


def m_bad_state(rng, rows):
    table = rng.choice(['[states.Q]\nbloch = [0.9, 0.0, 0.9]', '[states.Q]\nvector = ["0", "0"]',
                        '[states.Q]\nplates = [{ kind = ["half"], angle_deg = 1 }]',
                        '[states.Q]\nplates = [{ kind = "full", angle_deg = 1 }]',
                        '[states.Q]\nplates = []', '[states.Q]\nbloch = [1, 0]',
                        '[states.Q]\ncolour = "red"', '[states.H]\nbloch = [0, 0, 1]',
                        '[states.Q]\nvector = ["1e400", "0"]', '[states."a b"]\nbloch = [0, 0, 1]',
                        '[states.Q]\nplates = [{ kind = "half" }]', '[states.Q]\nbloch = "up"'])
    return GOOD_TOML + table + "\n", join(rows), []


def m_toml_syntax(rng, rows):
    lines = GOOD_TOML.splitlines()
    k = rng.randrange(len(lines))
    broken = rng.choice(["[", 'x = "unterminated', "= 3", "qubits = = 1", "a.b.c = 1\na = 2",
                         "x = [" * 3000 + "]" * 3000, "\x00"])
    lines.insert(k, broken)
    return "\n".join(lines) + "\n", join(rows), []


def m_counts_path(rng, rows):
    # (/dev/zero and a FIFO are in test_reader.py, in a child process with limits: a
    # regression there would fill the memory or hang)
    target = rng.choice(["missing.csv", "/dev/null", ".", "coun\\u0000ts.csv", "", " "])
    return GOOD_TOML.replace('counts = "counts.csv"', f'counts = "{target}"'), join(rows), []


def m_header(rng, rows):
    header = list(rows[0])
    kind = rng.randrange(4)
    if kind == 0:
        header.pop(rng.randrange(3))
    elif kind == 1:
        header[rng.randrange(len(header))] = rng.choice(["Counts", "backgrund", "row", "x"])
    elif kind == 2:
        header[3] = header[rng.randrange(3)]
    else:
        sep = rng.choice([";", "\t"])
        return GOOD_TOML, "\n".join(sep.join(r) for r in rows) + "\n", []
    return GOOD_TOML, join([header] + rows[1:]), []


def m_cell(rng, rows):
    rows = [list(r) for r in rows]
    k = rng.randrange(1, len(rows))
    column = rng.randrange(2, 6)
    bad = {2: ["-1", "12.5", "x", "\u0661\u0662", "\uff11\uff12", "1,044", "nan", "inf", "1e400",
               "1_000", "0x10", "99999999999999999999999", ""],
           3: ["0", "-2", "nan", "inf", "x", "1e300", "1e-300"],
           4: ["-1", "nan", "inf", "x", "1e300"],
           5: ["0", "-0.5", "nan", "x", "1e300"]}[column]
    rows[k][column] = rng.choice(bad)
    return GOOD_TOML, join(rows), []


def m_label(rng, rows):
    rows = [list(r) for r in rows]
    k = rng.randrange(1, len(rows))
    rows[k][rng.randrange(2)] = rng.choice(["h", "HH", "Q", "H V", "+i0", "", "R L", "hv", "Ж"])
    return GOOD_TOML, join(rows), []


def m_shape(rng, rows):
    rows = [list(r) for r in rows]
    k = rng.randrange(1, len(rows))
    if rng.random() < 0.5:
        rows[k].append("7")
    else:
        rows[k].pop()
    return GOOD_TOML, join(rows), []


def m_quote(rng, rows):
    rows = [list(r) for r in rows]
    k = rng.randrange(1, len(rows) - 2)
    rows[k][0] = '"' + rows[k][0]
    return GOOD_TOML, join(rows), []


def m_bytes(rng, rows):
    text = join(rows).encode("utf-8")
    kind = rng.randrange(4)
    if kind == 0:
        k = rng.randrange(len(text))
        return GOOD_TOML, text[:k] + bytes([rng.choice([0xff, 0xfe, 0xc3, 0x80])]) + text[k:], []
    if kind == 1:
        return GOOD_TOML, b"", []
    if kind == 2:
        return GOOD_TOML, join(rows[:1]).encode(), []
    return GOOD_TOML, join(rows).replace("0.9\n", "1" * 140_000 + "\n", 1).encode(), []


def m_no_information(rng, rows):
    rows = [list(r) for r in rows]
    kind = rng.randrange(3)
    for r in rows[1:]:
        if kind == 0:
            r[2] = "0"
        elif kind == 1:
            r[4] = r[2]                       # background = counts on every row
    if kind == 2:
        rows[0].append("group")
        for k, r in enumerate(rows[1:]):
            r.append(f"g{k}")
        return GOOD_TOML + 'normalization = "per-group"\n', join(rows), []
    return GOOD_TOML, join(rows), []


def m_group_column(rng, rows):
    rows = [list(r) for r in rows]
    rows[0].append("group")
    for r in rows[1:]:
        r.append("a")
    return GOOD_TOML, join(rows), []


def m_option(rng, rows):
    option = rng.choice([["--bootstrap", "-1"], ["--bootstrap", "1"], ["--ci-level", "1.5"],
                         ["--ci-level", "0"], ["--seed", "-1"], ["--seed", str(2 ** 64)],
                         ["--workers", "0"], ["--method", "magic"], ["--interval", "wide"],
                         ["--bootstrap", "x"], ["--bootstrap-kind", "both"]])
    return GOOD_TOML, join(rows), option


MUTATIONS = [m_missing_key, m_unknown_key, m_bad_qubits, m_bad_target, m_bad_setting, m_bad_state,
             m_toml_syntax, m_counts_path, m_header, m_cell, m_label, m_shape, m_quote, m_bytes,
             m_no_information, m_group_column, m_option]


def _run_cli(args, capsys) -> tuple[int, str]:
    try:
        status = cli.main(args)
    except SystemExit as exc:                 # argparse's own usage errors
        status = exc.code
    captured = capsys.readouterr()
    return status, captured.err


def fuzz_experiments(tmp_path, capsys, n_cases: int, seed: int) -> None:
    rng = random.Random(seed)
    for case in range(n_cases):
        mutation = MUTATIONS[case % len(MUTATIONS)]
        toml, counts, options = mutation(rng, good_csv(rng))
        folder = tmp_path / f"case{case}"
        folder.mkdir()
        (folder / "experiment.toml").write_text(toml, encoding="utf-8")
        if isinstance(counts, bytes):
            (folder / "counts.csv").write_bytes(counts)
        else:
            (folder / "counts.csv").write_text(counts, encoding="utf-8")
        out = folder / "result.h5"
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            status, err = _run_cli(["fit", str(folder / "experiment.toml"), "-o", str(out),
                                    "--quiet", "--workers", "1"] + options, capsys)
        where = f"case {case} ({mutation.__name__}): {toml!r} {str(counts)[:200]!r} {options}"
        assert status == 2, f"{where}: exit {status}\n{err}"
        assert "Traceback" not in err and err.strip(), where
        assert not out.exists(), where


def test_malformed_experiments_end_with_exit_2(tmp_path, capsys):
    fuzz_experiments(tmp_path, capsys, n_cases=4 * len(MUTATIONS), seed=SEED)


@pytest.mark.slow
def test_malformed_experiments_end_with_exit_2_many(tmp_path, capsys):
    fuzz_experiments(tmp_path, capsys, n_cases=40 * len(MUTATIONS), seed=SEED + 1)


# -- damaged result files -------------------------------------------------------------------

@pytest.fixture(scope="module")
def good_file(tmp_path_factory):
    from support import simulated_experiment

    folder = tmp_path_factory.mktemp("fuzz-result")
    exp, _ = simulated_experiment(folder / "data", "H+depolarizing:0.05", shots=300, seed=4,
                                  n_qubits=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = gs.fit(exp, bootstrap=5, seed=3, workers=1)
    return res.save(folder / "result.h5")


def _data_regions(path) -> list[tuple[int, int]]:
    """(offset, size) of every contiguous dataset's stored data."""
    regions = []
    with h5py.File(path, "r") as f:
        def visit(name, obj):
            if isinstance(obj, h5py.Dataset) and obj.chunks is None:
                offset = obj.id.get_offset()
                size = obj.id.get_storage_size()
                if offset is not None and size:
                    regions.append((offset, size))
        f.visititems(visit)
    return regions


def _resign(f: h5py.File) -> None:
    """Recompute the checksums after a change, so that the layout checks are what finds it."""
    if checksum.TABLE in f:
        del f[checksum.TABLE]
    if checksum.TABLE_ATTRIBUTE in f.attrs:
        del f.attrs[checksum.TABLE_ATTRIBUTE]
    checksum.write(f)


#: Parts every result file needs, and values of the wrong kind to put there.
REQUIRED = ["/estimate/choi", "/estimate/chi", "/estimate/ptm", "/estimate/intensities",
            "/input/counts/counts", "/input/counts/prep_index", "/model/prep_states",
            "/model/meas_effects", "/input/experiment_toml", "/figures/process_fidelity"]
WRONG_VALUES = [np.zeros((3, 5)), np.array(["a", "b"], dtype=object), np.float64(np.nan),
                np.zeros(0), np.full(4, -7), np.array([[1 + 1j]]), np.zeros((2, 2, 2, 2))]
#: Attributes every result file needs, and values that are wrong for each.
WRONG_ATTRIBUTES = {
    ("/", "format"): [3.5, "", "nonsense", np.array([1, 2])],
    ("/", "format_version"): ["1", 3.5, 99, np.array([1, 2]), ""],
    ("/estimate", "method"): [3.5, "", "nonsense", np.array([1, 2])],
    ("/estimate", "converged"): ["1", "yes", 3.5, np.array([1, 2])],
    ("/estimate", "iterations"): ["1", 3.5, -1, np.array([1, 2])],
    ("/estimate", "log_likelihood"): ["1", "", np.array([1.0, 2.0])],
    ("/input/counts", "sha256"): [3.5, "", "nonsense", np.array([1, 2])],
    ("/figures/process_fidelity", "ci_method"): [3.5, "", "nonsense", np.array([1, 2])],
    ("/figures/process_fidelity", "lower_bound"): ["1", "", np.array([1.0, 2.0])],
    ("/figures/process_fidelity", "touches_boundary"): ["yes", 3.5, np.array([1, 2])],
}


def structural_damage(rng: random.Random, path: Path, *, resign: bool) -> str:
    with h5py.File(path, "r+") as f:
        kind = rng.randrange(3)
        if kind == 0:
            part = rng.choice(REQUIRED)
            del f[part]
            what = f"removed {part}"
        elif kind == 1:
            part = rng.choice(REQUIRED)
            value = WRONG_VALUES[rng.randrange(len(WRONG_VALUES))]
            del f[part]
            if value.dtype == object:
                f.create_dataset(part, data=value, dtype=h5py.string_dtype("utf-8"))
            else:
                f.create_dataset(part, data=value)
            what = f"replaced {part} by {value.dtype} {value.shape}"
        else:
            obj, key = rng.choice(sorted(WRONG_ATTRIBUTES))
            choices = WRONG_ATTRIBUTES[(obj, key)]
            value = choices[rng.randrange(len(choices))]
            f[obj].attrs[key] = value
            what = f"set {obj}@{key} = {value!r}"
        if resign:
            _resign(f)
    return what


def damaged_files(base: Path, folder: Path, n_cases: int, seed: int):
    """(path, description, must_fail) of damaged copies of ``base``. A flipped bit may leave
    the content unchanged (a bit of a stored boolean beyond the first, free space): those
    copies may be read, the others must not."""
    rng = random.Random(seed)
    data = base.read_bytes()
    regions = _data_regions(base)
    out = []
    for case in range(n_cases):
        path = folder / f"damaged{case}.h5"
        kind = case % 5
        raw = bytearray(data)
        if kind == 0:                                   # a flip inside stored data
            offset, size = regions[rng.randrange(len(regions))]
            k = offset + rng.randrange(size)
            raw[k] ^= 1 << rng.randrange(8)
            path.write_bytes(bytes(raw))
            out.append((path, f"flip at {k} in data", False))
        elif kind == 1:                                 # flips anywhere
            flips = [rng.randrange(len(raw)) for _ in range(rng.randint(1, 8))]
            for k in flips:
                raw[k] ^= 1 << rng.randrange(8)
            path.write_bytes(bytes(raw))
            out.append((path, f"flips at {flips}", False))
        elif kind == 2:                                 # truncated
            k = rng.randrange(len(raw))
            path.write_bytes(bytes(raw[:k]))
            out.append((path, f"truncated to {k} bytes", True))
        else:                                           # parts removed or of the wrong kind
            path.write_bytes(data)
            what = structural_damage(rng, path, resign=kind == 4)
            out.append((path, what + (" (checksums recomputed)" if kind == 4 else ""), True))
    return out


SHOW_ALL = textwrap.dedent("""
    import contextlib, io, json, sys
    from gatescope import cli
    results = []
    for path in sys.argv[1:]:
        err = io.StringIO()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            try:
                status = cli.main(["show", path])
            except BaseException as exc:      # a crash is reported, not hidden
                status = f"{type(exc).__name__}: {exc}"
        results.append([path, status, err.getvalue()])
    print(json.dumps(results))
""")


def _content(path) -> dict:
    with h5py.File(path, "r") as f:
        return checksum.digests(f)


def fuzz_result_files(good: Path, tmp_path: Path, n_cases: int, seed: int) -> None:
    cases = damaged_files(good, tmp_path, n_cases, seed)
    cases += [(p, d + " (format 1)", must) for p, d, must in
              damaged_files(FORMAT1 / "fit_1q_bootstrap.h5", tmp_path / "v1", n_cases // 5, seed + 7)
              if "checksums recomputed" not in d]
    # one process for every case: a crash of the HDF5 library would show as a failed run
    run = subprocess.run([sys.executable, "-c", SHOW_ALL] + [str(p) for p, _, _ in cases],
                         capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stderr[-3000:]
    results = {path: (status, err) for path, status, err in json.loads(run.stdout)}
    original = _content(good)
    for path, description, must_fail in cases:
        status, err = results[str(path)]
        assert "Traceback" not in err, (description, err)
        if status == 0:
            # read back: only when the damage changed nothing the file holds (a format-1
            # file has no checksums: a flip in its data can go unnoticed)
            assert not must_fail, (description, "was shown as if intact")
            assert "format 1" in description or _content(path) == original, description
        else:
            assert status == 2, (description, status, err)
            assert err.startswith("gatescope: error: "), (description, err)


def test_damaged_result_files_end_with_exit_2(good_file, tmp_path):
    (tmp_path / "v1").mkdir()
    fuzz_result_files(good_file, tmp_path, n_cases=50, seed=SEED)


@pytest.mark.slow
def test_damaged_result_files_end_with_exit_2_many(good_file, tmp_path):
    (tmp_path / "v1").mkdir()
    fuzz_result_files(good_file, tmp_path, n_cases=500, seed=SEED + 1)
