"""The experiment reader (gatescope.reader; docs/file-formats.md, "Input") and how the
command line reports bad input.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import gatescope as gs
import numpy as np
import pytest
from gatescope import cli
from gatescope.model import MeasurementModel
from gatescope.reader import input_files, read_conditions


def write_case(folder: Path, toml: str, csv: str | None, csv_name: str = "counts.csv") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "experiment.toml"
    path.write_text(toml, encoding="utf-8")
    if csv is not None:
        (folder / csv_name).write_text(csv, encoding="utf-8")
    return path


def toml_1q(extra: str = "") -> str:
    return 'title = "bench A"\nqubits = 1\ncounts = "counts.csv"\n' + extra


def toml_2q(extra: str = "") -> str:
    return 'title = "bench A"\nqubits = 2\ncounts = "counts.csv"\n' + extra


GOOD_1Q = "prep,meas,counts\nH,H,90\nH,V,10\nD,D,80\n"


def toml_state(extra: str = "", qubits: int = 2) -> str:
    return f'title = "pair source"\nkind = "state"\nqubits = {qubits}\ncounts = "counts.csv"\n' + extra


GOOD_STATE = "meas,counts\nHH,90\nHV,4\nVV,88\nDD,80\nRL,77\n"
SQ_RHO = 0.5 * np.outer([1, 0, 0, 1], [1, 0, 0, 1])            # |phi+><phi+|


def case(id, toml, csv, *, file, line=None, key=None, words=()):
    return pytest.param(dict(toml=toml, csv=csv, file=file, line=line, key=key, words=words), id=id)


# Every bad input: which file the message must name, and the line (CSV, TOML) or key (TOML).
BAD_INPUTS = [
    # -- TOML keys
    case("unknown-toml-key", 'title = "x"\nqubits = 1\nbackground = 3\ncounts = "counts.csv"\n', GOOD_1Q,
         file="toml", line=3, key="background", words=("background",)),
    case("unknown-key-in-table", toml_1q('[conventions]\nright_circular = "H-iV"\nhandedness = "left"\n'),
         GOOD_1Q, file="toml", line=6, key="conventions.handedness", words=("handedness",)),
    case("unknown-key-in-state", toml_1q('[states.Dtilt]\nbloch = [0.99, 0.0, 0.14]\ncolour = "red"\n'),
         GOOD_1Q, file="toml", line=6, key="states.Dtilt.colour", words=("colour",)),
    case("missing-qubits", 'title = "x"\ncounts = "counts.csv"\n', GOOD_1Q,
         file="toml", key="qubits", words=("qubits",)),
    case("missing-counts", 'title = "x"\nqubits = 1\n', GOOD_1Q,
         file="toml", key="counts", words=("counts",)),
    # -- CSV structure
    case("missing-csv-column", toml_1q(), "prep,counts\nH,5\n",
         file="csv", line=1, words=("meas",)),
    case("unknown-csv-column", toml_1q(), "prep,meas,counts,backgrund\nH,H,5,0.1\n",
         file="csv", line=1, words=("backgrund",)),
    case("empty-csv", toml_1q(), "", file="csv", line=1, words=("empty",)),
    case("header-only", toml_1q(), "prep,meas,counts\n", file="csv", line=1),
    # -- CSV values (the header is line 1; physical lines, blank ones included)
    case("negative-counts", toml_1q(), "prep,meas,counts\nH,H,5\nH,V,-1\n",
         file="csv", line=3, words=("-1",)),
    case("fractional-counts", toml_1q(), "prep,meas,counts\nH,H,12.5\n",
         file="csv", line=2, words=("12.5",)),
    case("nan-counts", toml_1q(), "prep,meas,counts\nH,H,5\nH,V,5\nV,V,nan\n",
         file="csv", line=4, words=("nan",)),
    case("bad-row-after-blank-lines", toml_1q(), "prep,meas,counts\nH,H,5\n\n\nH,V,-3\n",
         file="csv", line=5, words=("-3",)),
    case("unknown-label", toml_1q(), "prep,meas,counts\nH,H,5\nQ,H,5\n",
         file="csv", line=3, words=("Q",)),
    case("lower-case-label", toml_1q(), "prep,meas,counts\nh,H,5\n",
         file="csv", line=2, words=("h",)),
    case("label-wrong-qubit-count", toml_2q(), "prep,meas,counts\nHH,HH,5\nHH,H,5\n",
         file="csv", line=3, words=("H",)),
    case("label-too-many-qubits", toml_2q(), "prep,meas,counts\nHDV,HH,5\n",
         file="csv", line=2, words=("HDV",)),
    case("zero-seconds", toml_1q(), "prep,meas,counts,seconds\nH,H,5,1\nH,V,5,0\n",
         file="csv", line=3, words=("seconds",)),
    case("negative-seconds", toml_1q(), "prep,meas,counts,seconds\nH,H,5,-2\n",
         file="csv", line=2, words=("seconds",)),
    case("zero-efficiency", toml_1q(), "prep,meas,counts,efficiency\nH,H,5,0\n",
         file="csv", line=2, words=("efficiency",)),
    case("negative-efficiency", toml_1q(), "prep,meas,counts,efficiency\nH,H,5,1\nV,V,5,-0.5\n",
         file="csv", line=3, words=("efficiency",)),
    # -- target
    case("target-not-unitary", toml_1q('target = { unitary = [["1", "0"], ["0", "2"]] }\n'), GOOD_1Q,
         file="toml", line=4, key="target", words=("unitary",)),
    case("target-wrong-size", toml_1q('target = "CNOT"\n'), GOOD_1Q,
         file="toml", line=4, key="target"),
    case("target-unknown-gate", toml_1q('target = "CNOTT"\n'), GOOD_1Q,
         file="toml", line=4, key="target", words=("CNOTT",)),
    # -- custom states
    case("state-name-is-builtin", toml_1q('[states.H]\nbloch = [0, 0, 1]\n'), GOOD_1Q,
         file="toml", line=4, key="states.H", words=("H",)),
    case("bloch-too-long", toml_1q('[states.Dtilt]\nbloch = [0.9, 0.0, 0.5]\n'), GOOD_1Q,
         file="toml", line=5, key="states.Dtilt.bloch", words=("Bloch",)),
    case("zero-vector", toml_1q('[states.Nothing]\nvector = ["0", "0j"]\n'), GOOD_1Q,
         file="toml", line=5, key="states.Nothing.vector", words=("zero",)),
    case("unknown-plate-kind", toml_1q('[states.Hmis]\nplates = [ { kind = "full", angle_deg = 0.4 } ]\n'),
         GOOD_1Q, file="toml", line=5, key="states.Hmis.plates", words=("full",)),
    # -- common lab mistakes: the message says how to fix them
    case("semicolon-separated", toml_1q(), "prep;meas;counts\nH;H;5\n",
         file="csv", line=1, words=("semicolons", "comma")),
    case("tab-separated", toml_1q(), "prep\tmeas\tcounts\nH\tH\t5\n",
         file="csv", line=1, words=("tabs", "comma")),
    case("thousands-separator", toml_1q(), "prep,meas,counts\nH,H,5\nH,V,1,044\n",
         file="csv", line=3, words=("thousands separator", "1044")),
    case("quoted-thousands-separator", toml_1q(), 'prep,meas,counts\nH,H,5\nH,V,"1,044"\n',
         file="csv", line=3, words=("thousands separator", "1044")),
    case("arabic-indic-digits", toml_1q(), "prep,meas,counts\nH,H,5\nH,V,\u0661\u0662\n",
         file="csv", line=3, words=("ASCII",)),
    case("fullwidth-digits", toml_1q(), "prep,meas,counts\nH,H,5\nH,V,\uff11\uff12\n",
         file="csv", line=3, words=("ASCII",)),
    case("lower-case-label-suggests", toml_1q(), "prep,meas,counts\nH,H,5\nh,V,3\n",
         file="csv", line=3, words=("case-sensitive", "did you mean 'H'?")),
    case("two-qubit-label-in-one-qubit-file", toml_1q(), "prep,meas,counts\nH,H,5\nHH,V,3\n",
         file="csv", line=3, words=("names 2 qubits", "has 1 qubit", "'qubits'")),
    case("three-qubit-label-in-two-qubit-file", toml_2q(), "prep,meas,counts\nHHH,HH,5\n",
         file="csv", line=2, words=("names 3", "has 2 qubits", "'qubits'")),
    case("group-column-without-per-group", toml_1q(), "prep,meas,counts,group\nH,H,5,a\n",
         file="csv", line=1, words=("group", "per-group")),
    case("input-rate-of-trace-preserving-fit", toml_1q("input_rate = 100.0\n"), GOOD_1Q,
         file="toml", line=4, key="input_rate", words=("decreasing",)),
    case("unbalanced-quote", toml_1q(), 'prep,meas,counts\nH,H,5\n"H,V,3\nD,D,4\nA,A,5\n',
         file="csv", line=3, words=("quote",)),
    case("cell-over-field-limit", toml_1q(), "prep,meas,counts\nH,H,5\nH,V," + "1" * 140_000 + "\n",
         file="csv", line=3, words=("longer than",)),
    case("toml-nested-5000-deep", toml_1q("x = " + "[" * 5000 + "]" * 5000 + "\n"), GOOD_1Q,
         file="toml", words=("nested",)),
    case("plate-kind-is-a-list", toml_1q('[states.Q]\nplates = [{ kind = ["half"], angle_deg = 1 }]\n'),
         GOOD_1Q, file="toml", line=5, key="states.Q.plates", words=("plate kind",)),
    case("plate-kind-is-a-table", toml_1q('[states.Q]\nplates = [{ kind = { a = 1 }, angle_deg = 1 }]\n'),
         GOOD_1Q, file="toml", line=5, key="states.Q.plates", words=("plate kind",)),
    case("nul-byte-in-counts-path", 'qubits = 1\ncounts = "coun\\u0000ts.csv"\n', GOOD_1Q,
         file="toml", line=2, key="counts", words=("NUL",)),
    case("target-gate-in-lower-case", toml_2q('target = "cnot"\n'), "prep,meas,counts\nHH,HH,5\n",
         file="toml", line=4, key="target", words=("did you mean 'CNOT'?",)),
    case("efficiency-1e300", toml_1q(), "prep,meas,counts,efficiency\nH,H,5,1\nH,V,5,1e300\n",
         file="csv", line=3, words=("efficiency", "unit mistake")),
    case("input-rate-1e308", 'qubits = 1\ncounts = "counts.csv"\nnormalization = "global"\n'
         'trace = "decreasing"\ninput_rate = 1e308\n', GOOD_1Q,
         file="toml", line=5, key="input_rate", words=("unit mistake",)),
    # -- state experiments (kind = "state"; README, "State tomography")
    case("prep-column-in-a-state", toml_state(), "prep,meas,counts\nHH,HH,5\n",
         file="csv", line=1, words=("'prep'", "state")),
    case("no-prep-column-in-a-process", toml_2q(), "meas,counts\nHH,5\n",
         file="csv", line=1, words=("'prep'", 'kind = "state"')),
    case("target-in-a-state", toml_state('target = "CZ"\n'), GOOD_STATE,
         file="toml", line=5, key="target", words=("target_state",)),
    case("target-state-in-a-process", toml_2q('target_state = "phi+"\n'), GOOD_1Q.replace("H,", "HH,"),
         file="toml", line=4, key="target_state", words=("kind",)),
    case("unknown-kind", 'kind = "channel"\nqubits = 1\ncounts = "counts.csv"\n', GOOD_1Q,
         file="toml", line=1, key="kind", words=("channel", "'state'")),
    case("per-preparation-state", toml_state('normalization = "per-preparation"\n'), GOOD_STATE,
         file="toml", line=5, key="normalization", words=("global",)),
    case("trace-in-a-state", toml_state('trace = "decreasing"\n'), GOOD_STATE,
         file="toml", line=5, key="trace", words=("state",)),
    case("bell-state-on-three-qubits", toml_state('target_state = "phi+"\n', qubits=3),
         "meas,counts\nHHH,5\n", file="toml", line=5, key="target_state", words=("two-qubit",)),
    case("misspelt-bell-state", toml_state('target_state = "Psi-"\n'), GOOD_STATE,
         file="toml", line=5, key="target_state", words=("'psi-'",)),
    case("vector-of-wrong-length", toml_state('target_state = { vector = [1, 0, 0] }\n'),
         GOOD_STATE, file="toml", line=5, key="target_state.vector", words=("3 entries",)),
    case("zero-vector-target", toml_state('target_state = { vector = [0, 0, 0, 0] }\n'),
         GOOD_STATE, file="toml", line=5, key="target_state.vector", words=("zero",)),
    case("unknown-target-table-key", toml_state('target_state = { ket = [1, 0, 0, 0] }\n'),
         GOOD_STATE, file="toml", line=5, key="target_state.ket", words=("vector",)),
    case("missing-density-file", toml_state('target_state = { density = "rho.npy" }\n'),
         GOOD_STATE, file="toml", line=5, key="target_state.density", words=("not found",)),
    case("state-label-wrong-qubits", toml_state(), "meas,counts\nHH,5\nHVH,3\n",
         file="csv", line=3, words=("HVH",)),
]


def expected_file(folder: Path, which: str) -> Path:
    return folder / ("experiment.toml" if which == "toml" else "counts.csv")


def check_message(err: gs.InputError, folder: Path, spec: dict) -> None:
    text = str(err)
    target = expected_file(folder, spec["file"])
    assert err.file is not None and Path(err.file).resolve() == target.resolve(), text
    assert str(err.file) in text and target.name in text
    if spec["line"] is not None:
        assert err.line == spec["line"], text
        assert f"line {spec['line']}" in text
    if spec["key"] is not None:
        assert err.key == spec["key"], text
        assert spec["key"] in text
    for word in spec["words"]:
        assert word in text, (word, text)


def read(tmp_path, toml, csv):
    return gs.read_experiment(write_case(tmp_path, toml, csv))


SQ = 1 / np.sqrt(2)


KET = {
    "H": np.array([1, 0], dtype=complex), "V": np.array([0, 1], dtype=complex),
    "D": np.array([SQ, SQ], dtype=complex), "A": np.array([SQ, -SQ], dtype=complex),
    "H-iV": np.array([SQ, -1j * SQ]), "H+iV": np.array([SQ, 1j * SQ]),
}


def proj(v):
    return np.outer(v, np.conj(v))


def folder_listing(folder: Path) -> set[str]:
    return {p.name for p in folder.rglob("*")}


def run_fit_command(folder: Path, path: Path):
    out = folder / "result.h5"
    return subprocess.Popen([sys.executable, "-m", "gatescope", "fit", str(path), "-o", str(out), "--quiet"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=folder), out


# One bad input of each family through a real process (about 1 s each); all of them
# in the slow set below.
SUBPROCESS_IDS = ("unknown-toml-key", "missing-qubits", "unknown-csv-column", "fractional-counts",
                  "label-wrong-qubit-count", "target-not-unitary", "bloch-too-long")


def _run_all(tmp_path, specs):
    runs = []
    for k, spec in enumerate(specs):
        folder = tmp_path / f"case{k}"
        path = write_case(folder, spec["toml"], spec["csv"])
        before = folder_listing(folder)
        proc, out = run_fit_command(folder, path)
        runs.append((spec, folder, before, proc, out))
    for spec, folder, before, proc, out in runs:
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 2, (spec, err)
        assert expected_file(folder, spec["file"]).name in err, err
        if spec["line"] is not None:
            assert f"line {spec['line']}" in err
        if spec["key"] is not None:
            assert spec["key"] in err
        assert "Traceback" not in err
        assert not out.exists()
        assert folder_listing(folder) == before


@pytest.mark.parametrize("spec", BAD_INPUTS)
def test_bad_input_is_an_input_error_naming_file_and_place(tmp_path, spec):
    path = write_case(tmp_path, spec["toml"], spec["csv"])
    with pytest.raises(gs.InputError) as info:
        gs.read_experiment(path)
    check_message(info.value, tmp_path, spec)


def test_missing_counts_file_names_it(tmp_path):
    path = write_case(tmp_path, toml_1q(), None)
    with pytest.raises(gs.InputError) as info:
        gs.read_experiment(path)
    assert "counts.csv" in str(info.value)


def test_csv_of_only_separators_is_an_input_error(tmp_path):
    path = write_case(tmp_path, toml_1q(), ",,\n,,\n")
    with pytest.raises(gs.InputError) as info:
        gs.read_experiment(path)
    assert "counts.csv" in str(info.value)


@pytest.mark.parametrize("toml,line,key", [
    (toml_1q('[state.Dtilt]\nbloch = [0.99, 0.0, 0.14]\n'), 4, "state"),
    (toml_1q('target = { unitary = [["1", "0"], ["0", "1"]], name = "id" }\n'), 4, "target.name"),
    (toml_1q('conventions = { right_circular = "H-iV", hand = "left" }\n'), 4, "conventions.hand"),
], ids=["misspelt-table-header", "inline-target-table", "inline-conventions-table"])
def test_unknown_keys_everywhere_name_their_line(tmp_path, toml, line, key):
    path = write_case(tmp_path, toml, GOOD_1Q)
    with pytest.raises(gs.InputError) as info:
        gs.read_experiment(path)
    assert info.value.key == key
    assert info.value.line == line, str(info.value)


def test_twelve_point_zero_is_twelve(tmp_path):
    exp = read(tmp_path, toml_1q(), "prep,meas,counts\nH,H,12.0\nH,V,3\n")
    assert exp.counts.dtype == np.int64
    assert exp.counts.tolist() == [12, 3]


def test_optional_columns_default_and_parse(tmp_path):
    exp = read(tmp_path, toml_1q(), "prep,meas,counts\nH,H,7\n")
    assert exp.seconds.tolist() == [1.0] and exp.efficiency.tolist() == [1.0]
    assert exp.background.tolist() == [0.0]
    exp = read(tmp_path, toml_1q(), "prep,meas,counts,seconds,background,efficiency\nH,H,7,2.5,0.3,0.9\n")
    assert exp.seconds.tolist() == [2.5] and exp.background.tolist() == [0.3]
    assert exp.efficiency.tolist() == [0.9]


def test_repeated_rows_are_separate_rows(tmp_path):
    exp = read(tmp_path, toml_1q(), "prep,meas,counts\nH,H,5\nH,V,1\nH,H,7\n")
    assert exp.n_rows == 3
    assert exp.counts.tolist() == [5, 1, 7]
    assert exp.prep_index[0] == exp.prep_index[2] and exp.meas_index[0] == exp.meas_index[2]
    assert MeasurementModel(exp).pairs_present()[exp.prep_index[0], exp.meas_index[0]] == 2


@pytest.mark.parametrize("label", ["HD", "H D", '"H,D"', "  H   D ", '"H, D"', '" H,D "'])
def test_all_spellings_of_a_label_are_the_same_setting(tmp_path, label):
    exp = read(tmp_path, toml_2q(), f"prep,meas,counts\nHD,HH,4\n{label},HH,5\n")
    assert exp.prep_index.tolist() == [0, 0]
    assert len(exp.prep_labels) == 1
    # qubit 1 is the leftmost factor: H on qubit 1, D on qubit 2
    np.testing.assert_allclose(exp.prep_states[0], np.kron(proj(KET["H"]), proj(KET["D"])), atol=1e-15)


def test_multi_character_parts_need_separators(tmp_path):
    exp = read(tmp_path, toml_2q(), 'prep,meas,counts\n+i 0,HH,4\n"+i,0",HH,5\n')
    assert exp.prep_index.tolist() == [0, 0]
    np.testing.assert_allclose(exp.prep_states[0], np.kron(proj(KET["H+iV"]), proj(KET["H"])), atol=1e-15)
    with pytest.raises(gs.InputError):
        read(tmp_path / "b", toml_2q(), "prep,meas,counts\n+i0,HH,4\n")


def test_whitespace_around_cells_is_ignored(tmp_path):
    plain = read(tmp_path / "a", toml_2q(), "prep,meas,counts,seconds\nHD,VA,12,2\nRL,+-,3,1\n")
    spaced = read(tmp_path / "b", toml_2q(),
                  " prep , meas ,counts,  seconds \n  HD ,  VA  , 12 , 2 \n\tRL\t,+-,  3,1\n")
    for attr in ("prep_index", "meas_index", "counts", "seconds"):
        assert np.array_equal(getattr(plain, attr), getattr(spaced, attr)), attr
    np.testing.assert_array_equal(plain.prep_states, spaced.prep_states)
    np.testing.assert_array_equal(plain.meas_effects, spaced.meas_effects)


def test_whitespace_before_a_quoted_cell_is_ignored(tmp_path):
    exp = read(tmp_path, toml_2q(), 'prep,meas,counts\nHD, "H,D", 5\n')
    assert exp.meas_labels == ("H D",)


def test_utf8_byte_order_mark_is_accepted(tmp_path):
    exp = read(tmp_path, toml_1q(), "\ufeffprep,meas,counts\nH,H,5\n")
    assert exp.columns == ("prep", "meas", "counts")


@pytest.mark.parametrize("option", [None, "H-iV", "H+iV"])
def test_handedness_option_swaps_r_and_l_but_not_the_aliases(tmp_path, option):
    extra = "" if option is None else f'[conventions]\nright_circular = "{option}"\n'
    exp = read(tmp_path, toml_1q(extra), "prep,meas,counts\nR,R,1\nL,L,1\n+i,+i,1\n-i,-i,1\n")
    states = dict(zip(exp.prep_labels, exp.prep_states))
    right = KET["H-iV"] if option in (None, "H-iV") else KET["H+iV"]
    left = KET["H+iV"] if option in (None, "H-iV") else KET["H-iV"]
    np.testing.assert_allclose(states["R"], proj(right), atol=1e-15)
    np.testing.assert_allclose(states["L"], proj(left), atol=1e-15)
    # the generic aliases are the Pauli-Y eigenstates whatever the option
    np.testing.assert_allclose(states["+i"], proj(KET["H+iV"]), atol=1e-15)
    np.testing.assert_allclose(states["-i"], proj(KET["H-iV"]), atol=1e-15)
    effects = dict(zip(exp.meas_labels, exp.meas_effects))
    np.testing.assert_allclose(effects["R"], proj(right), atol=1e-15)


def test_custom_states_are_usable_as_labels(tmp_path):
    extra = ('[states.Dtilt]\nbloch = [0.99, 0.0, 0.14]\n'
             '[states.Vec]\nvector = ["0.6", "0.8j"]\n'
             '[states.Dmade]\nplates = [ { kind = "half", angle_deg = 22.5 } ]\n')
    exp = read(tmp_path, toml_2q(extra), "prep,meas,counts\nDtilt Vec,Dmade H,3\n")
    x, z = np.array([[0, 1], [1, 0]]), np.diag([1.0, -1.0])
    dtilt = 0.5 * (np.eye(2) + 0.99 * x + 0.14 * z)
    vec = proj(np.array([0.6, 0.8j]))
    np.testing.assert_allclose(exp.prep_states[0], np.kron(dtilt, vec), atol=1e-15)
    np.testing.assert_allclose(exp.meas_effects[0], np.kron(proj(KET["D"]), proj(KET["H"])), atol=1e-15)


@pytest.mark.parametrize("spec", BAD_INPUTS)
def test_fit_command_in_process_on_bad_input(tmp_path, capsys, spec):
    # cli.main is what `python -m gatescope` runs; this sweeps every bad input fast.
    path = write_case(tmp_path, spec["toml"], spec["csv"])
    before = folder_listing(tmp_path)
    out = tmp_path / "result.h5"
    status = cli.main(["fit", str(path), "-o", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert status == 2
    assert expected_file(tmp_path, spec["file"]).name in err
    assert not out.exists()
    assert folder_listing(tmp_path) == before


def test_fit_command_subprocess_on_bad_input(tmp_path):
    specs = [p.values[0] for p in BAD_INPUTS if p.id in SUBPROCESS_IDS]
    assert len(specs) == len(SUBPROCESS_IDS)
    _run_all(tmp_path, specs)


@pytest.mark.slow
def test_fit_command_subprocess_on_every_bad_input(tmp_path):
    _run_all(tmp_path, [p.values[0] for p in BAD_INPUTS])


def test_fit_command_subprocess_on_good_input_writes_the_result(tmp_path, make_experiment):
    # the counterpart: the same command on good data exits 0 and writes the file
    exp, _ = make_experiment("H", shots=300, seed=1)
    proc, out = run_fit_command(exp.path.parent, exp.path)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err
    assert out.exists()


def test_underscored_numbers_are_rejected(tmp_path):
    # Python's float() takes "1_000"; a CSV cell of counts must be a plain decimal number
    path = write_case(tmp_path, toml_1q(), "prep,meas,counts\nH,H,1_000\n")
    with pytest.raises(gs.InputError, match="line 2"):
        gs.read_experiment(path)


# -- files that are not what they should be ------------------------------------------

@pytest.mark.parametrize("content, words", [
    (np.array(1.0), "0-dimensional"),
    (np.array([["a", "b"], ["c", "d"]]), "not numbers"),
    (np.zeros((2, 2), dtype=[("a", "f8"), ("b", "i4")]), "not numbers"),
    ("npz", ".npz archive"),
], ids=["0-d", "strings", "structured", "npz"])
def test_a_target_file_that_is_not_a_numeric_matrix_is_an_input_error(tmp_path, content, words):
    upath = tmp_path / "u.npy"
    if isinstance(content, str):
        with open(upath, "wb") as fh:                     # an archive under a .npy name
            np.savez(fh, u=np.eye(2))
    else:
        np.save(upath, content)
    path = write_case(tmp_path, toml_1q('target = { unitary = "u.npy" }\n'), GOOD_1Q)
    with pytest.raises(gs.InputError) as info:
        gs.read_experiment(path)
    assert info.value.key == "target.unitary" and words in str(info.value)


@pytest.mark.parametrize("kind", ["fifo", "device", "folder"])
def test_data_paths_that_are_not_regular_files_are_refused_without_reading(tmp_path, kind):
    # reproducers: a FIFO as counts file hung for ever, /dev/zero filled the memory. The
    # read runs in a child process with a memory limit and a time limit, so that a
    # regression fails this test instead of hanging the suite or the machine.
    import os

    if kind == "fifo":
        os.mkfifo(tmp_path / "counts.csv")
        name = "counts.csv"
    elif kind == "device":
        name = "/dev/zero"
    else:
        (tmp_path / "counts.csv").mkdir()
        name = "counts.csv"
    path = write_case(tmp_path, f'qubits = 1\ncounts = "{name}"\n', None)
    script = ("import resource, sys\n"
              "resource.setrlimit(resource.RLIMIT_AS, (2 << 30, 2 << 30))\n"
              "import gatescope as gs\n"
              "try:\n    gs.read_experiment(sys.argv[1])\n"
              "except gs.InputError as exc:\n    print(exc)\n")
    try:
        out = subprocess.run([sys.executable, "-c", script, str(path)], capture_output=True,
                             text=True, timeout=60)
    except subprocess.TimeoutExpired:
        pytest.fail("reading the counts file did not end")
    assert out.returncode == 0, out.stderr
    words = "is a folder" if kind == "folder" else "not a regular file"
    assert words in out.stdout


def test_an_experiment_folder_is_read_as_its_experiment_file(tmp_path):
    path = write_case(tmp_path / "bench", toml_1q(), GOOD_1Q)
    exp = gs.read_experiment(tmp_path / "bench")
    assert exp.path == path and exp.n_rows == 3
    with pytest.raises(gs.InputError, match="without an experiment.toml"):
        gs.read_experiment(tmp_path)


def test_huge_state_vector_is_normalised_not_zeroed(tmp_path):
    # |1e300|^2 overflows: the state must still be H, not a zero matrix
    extra = '[states.Big]\nvector = ["1e300", "0"]\n'
    exp = read(tmp_path, toml_1q(extra), "prep,meas,counts\nBig,H,5\n")
    np.testing.assert_allclose(exp.prep_states[0], proj(KET["H"]), atol=0)


def test_every_row_knows_its_physical_line(tmp_path):
    # header = line 1; blank lines and a quoted cell with a comma do not shift the numbers
    exp = read(tmp_path, toml_2q(), 'prep,meas,counts\nHH,HH,5\n\n\n"H,V",HH,1\nVV,VV,3\n')
    assert exp.lines.tolist() == [2, 5, 6]
def test_conditions_are_free_names_of_numbers_and_short_strings(tmp_path):
    exp = read(tmp_path, toml_1q('[conditions]\ndelay_ps = 120\npump_mW = 40.5\nrun = "night 3"\n'
                                 '"beam splitter" = "BS-2"\nqubits = 7\n'), GOOD_1Q)
    assert exp.conditions == {"delay_ps": 120, "pump_mW": 40.5, "run": "night 3",
                              "beam splitter": "BS-2", "qubits": 7}
    assert list(exp.conditions) == ["delay_ps", "pump_mW", "run", "beam splitter", "qubits"]
    assert gs.read_experiment(write_case(tmp_path / "none", toml_1q(), GOOD_1Q)).conditions == {}


@pytest.mark.parametrize("table, key, words", [
    ("aligned = true\n", "conditions.aligned", "got bool"),
    ("angles = [1, 2]\n", "conditions.angles", "got list"),
    ("power.pump = 3\n", "conditions.power", "got a table"),
    (f"note = \"{'x' * 201}\"\n", "conditions.note", "201 characters"),
    ("gain = nan\n", "conditions.gain", "not finite"),
    ("big = 99999999999999999999\n", "conditions.big", "64-bit"),
    ('"" = 1\n', "conditions.", "printable"),
], ids=["bool", "list", "nested-table", "long-text", "nan", "huge-int", "empty-name"])
def test_bad_conditions_name_their_key(tmp_path, table, key, words):
    path = write_case(tmp_path, toml_1q("[conditions]\n" + table), GOOD_1Q)
    for reader in (gs.read_experiment, read_conditions):
        with pytest.raises(gs.InputError, match=words) as info:
            reader(path)
        assert info.value.key == key and info.value.file == str(path)


def test_conditions_read_alone_and_the_input_files(tmp_path):
    path = write_case(tmp_path, toml_1q('target = { unitary = "u.npy" }\n[conditions]\nrun = 3\n'),
                      None)
    # the conditions are read even when the counts file is missing
    assert read_conditions(path) == {"run": 3}
    assert input_files(path) == {"experiment": path, "counts": tmp_path / "counts.csv",
                                 "target": tmp_path / "u.npy"}
    (tmp_path / "experiment.toml").write_text("qubits = [")
    assert input_files(path) == {"experiment": path}
    with pytest.raises(gs.InputError, match="not valid TOML"):
        read_conditions(path)
# --------------------------------------------------------------------------
# State experiments (kind = "state"): README, "State tomography"
# --------------------------------------------------------------------------

def test_state_experiment_is_read(tmp_path):
    exp = read(tmp_path, toml_state('target_state = "phi+"\n'), GOOD_STATE)
    assert exp.kind == "state" and exp.normalization == "global" and exp.n_groups == 1
    assert exp.prep == () and exp.prep_labels == () and exp.prep_index is None
    assert exp.prep_states is None and exp.meas_effects is None and exp.target is None
    assert exp.meas_labels == ("H H", "H V", "V V", "D D", "R L")
    assert exp.target_state_name == "phi+"
    np.testing.assert_allclose(exp.target_state, [SQ, 0, 0, SQ], atol=1e-15)
    # the effect of a setting is the product of its single-qubit effects, qubit 1 first
    m = exp.meas_labels.index("R L")
    r, l_ = (exp.single_meas_effects[i] for i in exp.meas_parts[m])
    np.testing.assert_allclose(np.kron(r, l_), np.kron(proj(KET["H-iV"]), proj(KET["H+iV"])),
                               atol=1e-15)


def test_state_targets_from_a_vector_and_a_density_file(tmp_path):
    exp = read(tmp_path / "v", toml_state('target_state = { vector = ["1", "0", "0", "1j"] }\n'),
               GOOD_STATE)
    np.testing.assert_allclose(exp.target_state, [SQ, 0, 0, 1j * SQ], atol=1e-15)
    folder = tmp_path / "d"
    folder.mkdir()
    np.save(folder / "rho.npy", 0.9 * SQ_RHO + 0.1 * np.eye(4) / 4)
    exp = read(folder, toml_state('target_state = { density = "rho.npy" }\n'), GOOD_STATE)
    np.testing.assert_allclose(exp.target_state, 0.9 * SQ_RHO + 0.1 * np.eye(4) / 4, atol=1e-15)
    assert exp.target_state_name == "density matrix from rho.npy"


@pytest.mark.parametrize("matrix, words", [
    (2 * SQ_RHO, "trace 2"), (np.diag([1.2, -0.2, 0, 0]), "negative eigenvalue"),
    (SQ_RHO + np.triu(np.ones((4, 4)), 1) * 0.1, "not Hermitian"), (np.eye(2) / 2, "4 × 4"),
])
def test_bad_target_density_matrices_are_refused(tmp_path, matrix, words):
    np.save(tmp_path / "rho.npy", matrix)
    path = write_case(tmp_path, toml_state('target_state = { density = "rho.npy" }\n'),
                      GOOD_STATE)
    with pytest.raises(gs.InputError) as info:
        gs.read_experiment(path)
    assert info.value.key == "target_state.density" and words in str(info.value)


def test_state_per_group_normalization_needs_its_column(tmp_path):
    path = write_case(tmp_path, toml_state('normalization = "per-group"\n'), GOOD_STATE)
    with pytest.raises(gs.InputError, match="group"):
        gs.read_experiment(path)
    exp = read(tmp_path / "g", toml_state('normalization = "per-group"\n'),
               "meas,counts,group\nHH,5,z\nHV,1,z\nDD,4,x\n")
    assert exp.group_names == ("z", "x") and exp.group_index.tolist() == [0, 0, 1]
