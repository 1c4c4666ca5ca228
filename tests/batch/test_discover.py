"""Finding a batch's experiments (gatescope.batch.discover): names that are unique and
stable, result paths, input hashes as the result file records them, and the rule that
lets an experiment still being written wait."""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import gatescope as gs
import pytest
from gatescope.batch.discover import InputScanner, find_experiments, result_path

TOML = 'qubits = 1\ncounts = "counts.csv"\n'
CSV = "prep,meas,counts\nH,H,9\nH,V,1\n"


def put(folder: Path, toml: str = TOML, csv: str | None = CSV, name: str = "experiment.toml"):
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_text(toml)
    if csv is not None:
        (folder / "counts.csv").write_text(csv)
    return folder / name


def test_names_are_folders_relative_to_the_path(tmp_path):
    root = tmp_path / "night3"
    for rel in ("delay_120", "delay_080", "pump/40mW", "pump/40mW/repeat"):
        put(root / rel)
    put(root / ".hidden")                                   # left out
    (root / "notes").mkdir()                                # no experiment: nothing
    found = find_experiments([root])
    assert [f.name for f in found] == ["delay_080", "delay_120", "pump/40mW", "pump/40mW/repeat"]
    assert all(f.path.is_absolute() and f.path.name == "experiment.toml" for f in found)
    # the same tree found again, or from another working directory, gives the same names
    cwd = os.getcwd()
    try:
        os.chdir(tmp_path)
        assert [f.name for f in find_experiments(["night3"])] == [f.name for f in found]
        assert [f.path for f in find_experiments(["night3"])] == [f.path for f in found]
    finally:
        os.chdir(cwd)


def test_an_experiment_at_the_path_itself_is_named_by_its_folder(tmp_path):
    put(tmp_path / "cz_bench")
    other = put(tmp_path / "scan", name="delay_100.toml")
    assert [f.name for f in find_experiments([tmp_path / "cz_bench"])] == ["cz_bench"]
    assert [f.name for f in find_experiments([tmp_path / "cz_bench" / "experiment.toml"])] \
        == ["cz_bench"]
    assert [f.name for f in find_experiments([other])] == ["delay_100"]


def test_two_paths_that_give_one_name_are_refused(tmp_path):
    put(tmp_path / "night1" / "run01")
    put(tmp_path / "night2" / "run01")
    with pytest.raises(gs.InputError, match="two experiments get the name 'run01'"):
        find_experiments([tmp_path / "night1", tmp_path / "night2"])
    # the same experiment given twice is one experiment
    assert len(find_experiments([tmp_path / "night1", tmp_path / "night1" / "run01"])) == 1


def test_a_missing_path_is_an_input_error(tmp_path):
    with pytest.raises(gs.InputError, match="no such file or folder") as err:
        find_experiments([tmp_path / "nowhere"])
    assert err.value.file == str(tmp_path / "nowhere")


def test_result_paths_follow_the_names(tmp_path):
    assert result_path(tmp_path, "delay_120") == tmp_path / "delay_120.h5"
    assert result_path(tmp_path, "pump/40mW") == tmp_path / "pump" / "40mW.h5"
    # an experiment and one inside its folder do not share a file
    assert result_path(tmp_path, "pump") != result_path(tmp_path, "pump/40mW")


def test_hashes_are_those_the_reader_records(tmp_path):
    path = put(tmp_path / "a")
    inputs = InputScanner().inspect(path)
    exp = gs.read_experiment(path)
    assert inputs.toml_sha256 == exp.toml_sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert inputs.csv_sha256 == exp.csv_sha256


def test_a_changed_file_changes_the_key_and_an_unchanged_one_does_not(tmp_path):
    path = put(tmp_path / "a")
    scanner = InputScanner()
    first = scanner.inspect(path)
    assert scanner.inspect(path).key == first.key
    (tmp_path / "a" / "counts.csv").write_text(CSV.replace("9", "8"))
    assert scanner.inspect(path).key != first.key
    (tmp_path / "a" / "counts.csv").unlink()
    missing = scanner.inspect(path)
    assert missing.csv_sha256 is None and missing.key != first.key


def test_a_target_file_counts_as_input(tmp_path):
    import numpy as np

    path = put(tmp_path / "a", TOML + 'target = { unitary = "u.npy" }\n')
    np.save(tmp_path / "a" / "u.npy", np.eye(2))
    scanner = InputScanner()
    before = scanner.inspect(path)
    assert before.sha256["target"] is not None
    np.save(tmp_path / "a" / "u.npy", np.diag([1, -1]))
    assert scanner.inspect(path).key != before.key


def test_recently_changed_inputs_wait_one_look(tmp_path):
    path = put(tmp_path / "a")
    scanner = InputScanner()
    now = os.stat(path).st_mtime
    inputs = scanner.inspect(path)
    # just written: not settled at the first look, settled at the next if nothing changed
    assert not scanner.settled(path, inputs, now + 1.0, 30.0)
    assert scanner.settled(path, scanner.inspect(path), now + 2.0, 30.0)
    # written again between two looks: waits again
    (tmp_path / "a" / "counts.csv").write_text(CSV + "V,V,3\n")
    assert not scanner.settled(path, scanner.inspect(path), now + 3.0, 30.0)
    # old enough: settled at once, even for a scanner that never saw it
    assert InputScanner().settled(path, scanner.inspect(path), now + 60.0, 30.0)
