"""The run sheet (`gatescope plan`): every listed state comes back from its
plate angles through a Jones model written here from the README's Conventions, independently of
`gatescope.conventions`.
"""

from __future__ import annotations

import csv
import itertools

import numpy as np
import pytest
from gatescope import InputError
from gatescope.cli import main
from gatescope.conventions import wave_plate
from gatescope.synth.plan import plate_angles, run_sheet, sheet_text, write_run_sheet


def plate(theta_deg, delta_deg):
    """W(θ, δ) = Rot(−θ)·diag(e^{−iδ/2}, e^{iδ/2})·Rot(θ), Rot(θ) = [[c, s], [−s, c]]
    (the README's Conventions; the Jones matrix of a linear retarder, common practice, e.g. Hecht, Optics)."""
    t, dl = np.radians(theta_deg), np.radians(delta_deg)
    c, s = np.cos(t), np.sin(t)
    rot = lambda c, s: np.array([[c, s], [-s, c]], dtype=complex)   # noqa: E731
    return rot(c, -s) @ np.diag([np.exp(-0.5j * dl), np.exp(0.5j * dl)]) @ rot(c, s)


SQ = 1 / np.sqrt(2)


H = np.array([1, 0], dtype=complex)


V = np.array([0, 1], dtype=complex)


# the README's states; R and L under each handedness option, +i and -i under both
KETS = {
    "H-iV": {"H": H, "V": V, "D": SQ * (H + V), "A": SQ * (H - V), "R": SQ * (H - 1j * V),
             "L": SQ * (H + 1j * V), "+i": SQ * (H + 1j * V), "-i": SQ * (H - 1j * V)},
    "H+iV": {"H": H, "V": V, "D": SQ * (H + V), "A": SQ * (H - V), "R": SQ * (H + 1j * V),
             "L": SQ * (H - 1j * V), "+i": SQ * (H + 1j * V), "-i": SQ * (H - 1j * V)},
}


def prepared(hwp, qwp):
    """Source H, then the half-wave plate, then the quarter-wave plate (the README's Conventions)."""
    return plate(qwp, 90) @ plate(hwp, 180) @ H


def effect(qwp, hwp):
    """Quarter-wave plate, then half-wave plate, then a polariser passing H: W†|H><H|W."""
    w = plate(hwp, 180) @ plate(qwp, 90)
    return w.conj().T @ np.outer(H, H) @ w


def read_sheet(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def test_the_independent_jones_model_matches_the_package():
    for theta, delta in [(0, 180), (22.5, 180), (45, 90), (-13.1, 93.7)]:
        np.testing.assert_allclose(plate(theta, delta),
                                   wave_plate(np.radians(theta), np.radians(delta)), atol=1e-15)


@pytest.mark.parametrize("handedness", ["H-iV", "H+iV"])
def test_plan_angles_reproduce_every_state(tmp_path, handedness):
    labels = "H,V,D,A,R,L,+i,-i"
    sheet = run_sheet(1, labels, labels, right_circular=handedness)
    path = write_run_sheet(tmp_path / "sheet.csv", sheet)
    rows = read_sheet(path)
    assert len(rows) == 64
    kets = KETS[handedness]
    for row in rows:
        angles = {k: float(row[k]) for k in ("prep_hwp_1", "prep_qwp_1", "meas_qwp_1", "meas_hwp_1")}
        for a in angles.values():
            assert 0.0 <= a < 180.0                              # the stated range
        psi = kets[row["prep"]]
        out = prepared(angles["prep_hwp_1"], angles["prep_qwp_1"])
        # the state up to a global phase
        assert abs(abs(np.vdot(psi, out)) - 1.0) < 1e-12, row
        phi = kets[row["meas"]]
        np.testing.assert_allclose(effect(angles["meas_qwp_1"], angles["meas_hwp_1"]),
                                   np.outer(phi, phi.conj()), atol=1e-12)


def test_trade_angles_are_the_simple_ones():
    # Common practice for the six trade states: half-wave plate at 0, 45, 22.5, 67.5
    # (rotating H by twice the angle); circular light from a quarter-wave plate at ±45°.
    sheet = run_sheet(1, "pauli6", "pauli6")
    prep = {row[0]: row[2:4] for row in sheet.rows}
    assert prep == {"H": (0, 0), "V": (45, 0), "D": (22.5, 45), "A": (67.5, 45), "R": (0, 45),
                    "L": (0, 135)}
    meas = {row[1]: (row[5], row[4]) for row in sheet.rows}       # (hwp, qwp)
    assert meas == {"H": (0, 0), "V": (45, 0), "D": (22.5, 45), "A": (67.5, 45), "R": (0, 135),
                    "L": (0, 45)}


def test_off_grid_states_are_found_too():
    rng = np.random.default_rng(5)
    for _ in range(5):
        psi = rng.normal(size=2) + 1j * rng.normal(size=2)
        psi /= np.linalg.norm(psi)
        h, q = plate_angles(psi, "prep")
        assert abs(np.vdot(psi, prepared(h, q))) ** 2 == pytest.approx(1.0, abs=1e-9)
        h, q = plate_angles(psi, "meas")
        assert np.vdot(psi, effect(q, h) @ psi).real == pytest.approx(1.0, abs=1e-9)
        assert 0 <= h < 180 and 0 <= q < 180


def test_quarter_wave_plate_with_retardance_error():
    # Common practice: a retarder rotates the Stokes vector by its retardance, so a
    # quarter-wave plate at 45° with retardance 90° + ε makes from H a state whose
    # fidelity with the circular state is cos²(ε/2).
    for eps_deg in (0.0, 1.5, -4.0, 10.0):
        out = plate(45, 90 + eps_deg) @ H
        circ = KETS["H-iV"]["R"]
        assert abs(np.vdot(circ, out)) ** 2 == pytest.approx(np.cos(np.radians(eps_deg) / 2) ** 2,
                                                            abs=1e-14)


def test_two_qubit_sheet_layout_and_product_of_settings(tmp_path):
    sheet = run_sheet(2, "pauli4", "pauli6", seconds=12.5)
    path = write_run_sheet(tmp_path / "s.csv", sheet)
    rows = read_sheet(path)
    header = list(rows[0])
    assert header == ["prep", "meas",
                      "prep_hwp_1", "prep_qwp_1", "meas_qwp_1", "meas_hwp_1",
                      "prep_hwp_2", "prep_qwp_2", "meas_qwp_2", "meas_hwp_2", "seconds"]
    assert len(rows) == 16 * 36
    want = {(p1 + p2, m1 + m2) for p1, p2 in itertools.product("HVDR", repeat=2)
            for m1, m2 in itertools.product("HVDARL", repeat=2)}
    assert {(r["prep"], r["meas"]) for r in rows} == want
    kets = KETS["H-iV"]
    for r in rows:
        assert float(r["seconds"]) == 12.5
        for k, (p, m) in enumerate(zip(r["prep"], r["meas"]), start=1):
            out = prepared(float(r[f"prep_hwp_{k}"]), float(r[f"prep_qwp_{k}"]))
            assert abs(abs(np.vdot(kets[p], out)) - 1) < 1e-12
            np.testing.assert_allclose(effect(float(r[f"meas_qwp_{k}"]), float(r[f"meas_hwp_{k}"])),
                                       np.outer(kets[m], kets[m].conj()), atol=1e-12)
    assert sheet.total_seconds == 16 * 36 * 12.5


def test_multi_character_labels_are_separated_by_spaces():
    sheet = run_sheet(2, "+i,H", "H")
    assert [row[0] for row in sheet.rows] == ["+i +i", "+i H", "H +i", "H H"]
    assert "seconds" not in sheet.header
    assert sheet.total_seconds is None
    assert sheet_text(sheet).splitlines()[1].startswith("+i +i,HH,")


def test_cli_writes_the_sheet_and_prints_the_duration(tmp_path, capsys):
    out = tmp_path / "sub" / "sheet.csv"
    assert main(["plan", "--qubits", "2", "--seconds", "10", "-o", str(out)]) == 0
    printed = capsys.readouterr().out
    assert printed.splitlines()[0] == str(out)
    assert "12960 s (3 h 36 min 0 s)" in printed          # 1296 rows × 10 s
    assert "laser-safety" in printed
    rows = read_sheet(out)
    assert len(rows) == 1296 and rows[0]["prep"] == "HH" and rows[0]["seconds"] == "10"
    assert [p.name for p in out.parent.iterdir()] == ["sheet.csv"]    # no temporary left


def test_cli_handedness_swaps_r_and_l(tmp_path):
    for hand in ("H-iV", "H+iV"):
        assert main(["plan", "--qubits", "1", "--prep", "R,L", "--meas", "H",
                     "--right-circular", hand, "-o", str(tmp_path / f"{hand}.csv")]) == 0
    a, b = read_sheet(tmp_path / "H-iV.csv"), read_sheet(tmp_path / "H+iV.csv")
    assert (a[0]["prep_qwp_1"], a[1]["prep_qwp_1"]) == (b[1]["prep_qwp_1"], b[0]["prep_qwp_1"])
    assert a[0]["prep_qwp_1"] != a[1]["prep_qwp_1"]


@pytest.mark.parametrize("args, option", [
    (["--qubits", "0"], "--qubits"),
    (["--qubits", "7"], "--qubits"),
    (["--qubits", "5"], "--qubits"),                          # 60 million rows
    (["--qubits", "1", "--prep", "H,Q"], "--prep"),
    (["--qubits", "1", "--meas", "pauli5"], "--meas"),
    (["--qubits", "1", "--meas", "H,V,H"], "--meas"),
    (["--qubits", "1", "--right-circular", "left"], "--right-circular"),
    (["--qubits", "1", "--seconds", "-2"], "--seconds"),
    (["--qubits", "1", "--seconds", "nan"], "--seconds"),
])
def test_bad_options_exit_2_naming_the_option(tmp_path, capsys, args, option):
    out = tmp_path / "sheet.csv"
    assert main(["plan", *args, "-o", str(out)]) == 2
    assert option in capsys.readouterr().err
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_bad_options_raise_input_error_from_the_api():
    with pytest.raises(InputError, match="--prep"):
        run_sheet(1, "H,X")
    with pytest.raises(InputError, match="--qubits"):
        run_sheet(True)


def test_state_sheet_lists_the_analysers_only(tmp_path):
    # a state experiment has no preparations: one row per analyser projector, the
    # analyser plates of every qubit (docs/file-formats.md, "Run sheet")
    sheet = run_sheet(2, meas="pauli6", seconds=5.0, state=True)
    rows = read_sheet(write_run_sheet(tmp_path / "s.csv", sheet))
    assert list(rows[0]) == ["meas", "meas_qwp_1", "meas_hwp_1", "meas_qwp_2", "meas_hwp_2",
                             "seconds"]
    assert [r["meas"] for r in rows] == ["".join(p) for p in itertools.product("HVDARL", repeat=2)]
    kets = KETS["H-iV"]
    for r in rows:
        for k, m in enumerate(r["meas"], start=1):
            np.testing.assert_allclose(effect(float(r[f"meas_qwp_{k}"]), float(r[f"meas_hwp_{k}"])),
                                       np.outer(kets[m], kets[m].conj()), atol=1e-12)
    assert sheet.total_seconds == 36 * 5.0


def test_state_sheet_from_the_command_line(tmp_path, capsys):
    out = tmp_path / "pairs.csv"
    assert main(["plan", "--state", "--qubits", "2", "--meas", "pauli4", "-o", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "16 rows (analysers only)" in printed and "laser-safety" in printed
    assert len(read_sheet(out)) == 16 and "prep" not in read_sheet(out)[0]
    assert main(["plan", "--state", "--qubits", "2", "--prep", "pauli6",
                 "-o", str(tmp_path / "x.csv")]) == 2
    assert "option --prep" in capsys.readouterr().err
    assert not (tmp_path / "x.csv").exists()
