"""The run sheet of an experiment (the `plan` command).

One row per (preparation, analyser projector) pair of a complete product
set, with the wave-plate angles that set it on every qubit; for a state
experiment (``state=True``) one row per analyser projector, with the
analyser plates only. The optics are
those of the README's Conventions: the preparation of each qubit is the source's H light
through a half-wave plate, then a quarter-wave plate; the analysis is a
quarter-wave plate, then a half-wave plate, then a polariser passing H. A
plate with fast axis at θ from H is W(θ, δ) = Rot(−θ)·diag(e^{−iδ/2},
e^{iδ/2})·Rot(θ) (`gatescope.conventions.wave_plate`).

Angles are in degrees, in the range [0°, 180°): a plate turned by 180° is
the same plate (W(θ + π, δ) = W(θ, δ) exactly). Among the settings that
make a state exactly, the sheet prefers multiples of 45° to multiples of
22.5°, then fewer plates away from 0°, then the smallest sum of the two
angles, then the smaller quarter-wave angle: with the default handedness (R = (H−iV)/√2) that gives

======  ====================  ====================
state   preparation HWP, QWP  analysis QWP, HWP
======  ====================  ====================
H       0, 0                  0, 0
V       45, 0                 0, 45
D       22.5, 45              45, 22.5
A       67.5, 45              45, 67.5
R       0, 45                 135, 0
L       0, 135                45, 0
======  ====================  ====================

(with ``right_circular = "H+iV"`` the R and L rows swap). States off that
grid (not used by the built-in sets) are found by a numerical search.

The sheet is a list of optical settings; it is not a procedure for working
on the bench: the local laser-safety rules and risk assessment apply
whatever it says.
"""

from __future__ import annotations

import csv
import io
import itertools
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.optimize import minimize

from ..conventions import RIGHT_CIRCULAR_CHOICES, builtin_states, wave_plate
from ..errors import InputError
from ..fileio import atomic_write_text

ROLES = ("prep", "meas")
GRID_STEP_DEG = 22.5
EXACT = 1e-12                  # 1 − fidelity below which a grid setting counts as exact
MAX_ROWS = 5_000_000           # a sheet longer than this is not something a lab can follow
MAX_QUBITS = 6

_H = np.array([1.0, 0.0], dtype=complex)


def prepared_state(hwp_deg: float, qwp_deg: float, hwp_retardance_deg: float = 180.0,
                   qwp_retardance_deg: float = 90.0) -> np.ndarray:
    """The state QWP·HWP|H> (a unit vector) that the preparation optics make.

    Angles and retardances in degrees; the default retardances are those of
    ideal half- and quarter-wave plates, other values describe imperfect
    plates (`gatescope.synth.lab`).
    """
    w = (wave_plate(math.radians(qwp_deg), math.radians(qwp_retardance_deg))
         @ wave_plate(math.radians(hwp_deg), math.radians(hwp_retardance_deg)))
    return w @ _H


def analysed_effect(qwp_deg: float, hwp_deg: float, qwp_retardance_deg: float = 90.0,
                    hwp_retardance_deg: float = 180.0) -> np.ndarray:
    """The effect W†|H><H|W of the analysis optics, W = HWP·QWP (light meets the QWP first).

    Angles and retardances in degrees, as for :func:`prepared_state`.
    """
    w = (wave_plate(math.radians(hwp_deg), math.radians(hwp_retardance_deg))
         @ wave_plate(math.radians(qwp_deg), math.radians(qwp_retardance_deg)))
    return w.conj().T @ np.outer(_H, _H) @ w


def _fidelity(vector: np.ndarray, role: str, hwp_deg: float, qwp_deg: float) -> float:
    """|<ψ|prepared>|² for a preparation, <ψ|E|ψ> for an analysis; ψ normalised."""
    if role == "prep":
        return float(abs(np.vdot(vector, prepared_state(hwp_deg, qwp_deg))) ** 2)
    return float(np.vdot(vector, analysed_effect(qwp_deg, hwp_deg) @ vector).real)


def _wrap(angle_deg: float) -> float:
    a = math.fmod(float(angle_deg), 180.0)
    if a < 0:
        a += 180.0
    if a >= 180.0 - 5e-10:          # so that rounding never prints 180
        a = 0.0
    return a + 0.0                  # no −0


def _simplicity(hwp: float, qwp: float):
    def level(a):
        return 0 if a % 45.0 == 0 else 1
    return (level(hwp) + level(qwp), (hwp != 0) + (qwp != 0), hwp + qwp, qwp, hwp)


def plate_angles(vector, role: str) -> tuple[float, float]:
    """Half- and quarter-wave plate angles (degrees, in [0, 180)) that set a state.

    Parameters
    ----------
    vector : array of 2 complex
        The polarisation state (H and V amplitudes), normalised here.
    role : {"prep", "meas"}
        ``"prep"``: the preparation optics (H, then the half-wave, then the
        quarter-wave plate) make the state, up to a global phase.
        ``"meas"``: the analysis optics (quarter-wave, then half-wave plate,
        then the H polariser) have the effect |ψ><ψ|.

    Returns
    -------
    (hwp_deg, qwp_deg)
        For ``"prep"`` in the order light meets them is HWP first; for
        ``"meas"`` it is QWP first — the tuple is (half-wave, quarter-wave)
        in both cases.
    """
    if role not in ROLES:
        raise ValueError(f"role must be one of {ROLES}, got {role!r}")
    v = np.asarray(vector, dtype=complex).reshape(2)
    v = v / np.linalg.norm(v)
    grid = [GRID_STEP_DEG * k for k in range(int(180 / GRID_STEP_DEG))]
    exact = [(h, q) for h in grid for q in grid if 1.0 - _fidelity(v, role, h, q) < EXACT]
    if exact:
        return min(exact, key=lambda hq: _simplicity(*hq))
    # Off the grid: start from the best grid point and polish. Every polarisation state is
    # reachable with one half- and one quarter-wave plate, so the optimum has fidelity 1.
    start = max(((h, q) for h in grid for q in grid), key=lambda hq: _fidelity(v, role, *hq))
    res = minimize(lambda x: 1.0 - _fidelity(v, role, x[0], x[1]), np.array(start, dtype=float),
                   method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-15, "maxiter": 4000})
    return _wrap(res.x[0]), _wrap(res.x[1])


@dataclass(frozen=True)
class RunSheet:
    """Rows of a run sheet: labels, then per qubit (prep HWP, prep QWP, meas QWP, meas HWP);
    for a state (``state`` True) the meas label, then per qubit (meas QWP, meas HWP)."""

    n_qubits: int
    header: tuple[str, ...]
    rows: tuple[tuple, ...]
    seconds: float | None
    right_circular: str
    state: bool = False

    @property
    def n_labels(self) -> int:
        """Label cells at the start of every row (prep and meas, or meas alone)."""
        return 1 if self.state else 2

    @property
    def n_angles(self) -> int:
        """Angle cells of every row after the labels."""
        return (2 if self.state else 4) * self.n_qubits

    @property
    def total_seconds(self) -> float | None:
        return None if self.seconds is None else self.seconds * len(self.rows)


def _labels(single, n_qubits):
    joiner = "" if all(len(s) == 1 for s in single) else " "
    parts = list(itertools.product(single, repeat=n_qubits))
    return [joiner.join(p) for p in parts], parts


def _check_set(text, option: str) -> tuple[str, ...]:
    from .simulate import label_set

    try:
        labels = label_set(text)
    except ValueError as exc:
        raise InputError(str(exc), key=option) from None
    seen = set()
    for lab in labels:
        if lab in seen:
            raise InputError(f"label {lab!r} is listed twice", key=option)
        seen.add(lab)
    return labels


def run_sheet(n_qubits: int, prep: str | None = None, meas: str = "pauli6", *,
              right_circular: str = "H-iV", seconds: float | None = None,
              state: bool = False) -> RunSheet:
    """The run sheet of a complete product experiment (docs/file-formats.md, "Run sheet").

    Parameters
    ----------
    n_qubits : int
    prep, meas : str
        ``pauli6`` (H V D A R L per qubit), ``pauli4`` (H V D R) or a comma
        list of built-in single-qubit labels, applied to every qubit. ``prep``
        None means ``pauli6`` for a process; a state has no preparations.
    state : bool
        The analyser-only sheet of a state experiment: one row per analyser
        projector, columns ``meas`` and ``meas_qwp_k``, ``meas_hwp_k``.
    right_circular : {"H-iV", "H+iV"}
        Which state ``R`` means (the README's Conventions).
    seconds : float, optional
        Integration time of every row; adds the column ``seconds``.

    Raises
    ------
    InputError
        Naming the option (``--qubits``, ``--prep``, ``--meas``,
        ``--right-circular``, ``--seconds``) and what is wrong; ``--prep``
        with ``state`` is one.
    """
    if isinstance(n_qubits, bool) or not isinstance(n_qubits, (int, np.integer)) \
            or not 1 <= n_qubits <= MAX_QUBITS:
        raise InputError(f"must be a whole number from 1 to {MAX_QUBITS}, got {n_qubits!r}",
                         key="--qubits")
    n_qubits = int(n_qubits)
    if right_circular not in RIGHT_CIRCULAR_CHOICES:
        raise InputError(f"must be one of {', '.join(RIGHT_CIRCULAR_CHOICES)}, got {right_circular!r}",
                         key="--right-circular")
    if seconds is not None:
        seconds = float(seconds)
        if not (math.isfinite(seconds) and seconds > 0):
            raise InputError(f"must be a positive number of seconds, got {seconds:g}", key="--seconds")
    if state and prep is not None:
        raise InputError("a state experiment has no preparations: the sheet of --state lists "
                         "the analysers only", key="--prep")
    prep_set = () if state else _check_set("pauli6" if prep is None else prep, "--prep")
    meas_set = _check_set(meas, "--meas")
    n_rows = (max(len(prep_set), 1) * len(meas_set)) ** n_qubits
    if n_rows > MAX_ROWS:
        raise InputError(f"{n_qubits} qubits with these sets make {n_rows:,} rows "
                         f"(more than {MAX_ROWS:,})", key="--qubits")

    states = builtin_states(right_circular)
    prep_angles = {s: plate_angles(states[s], "prep") for s in prep_set}      # (hwp, qwp)
    meas_angles = {s: plate_angles(states[s], "meas") for s in meas_set}      # (hwp, qwp)
    if state:
        return _analyser_sheet(n_qubits, meas_set, meas_angles, seconds, right_circular)
    header = ["prep", "meas"]
    for k in range(1, n_qubits + 1):
        header += [f"prep_hwp_{k}", f"prep_qwp_{k}", f"meas_qwp_{k}", f"meas_hwp_{k}"]
    if seconds is not None:
        header.append("seconds")
    prep_labels, prep_parts = _labels(prep_set, n_qubits)
    meas_labels, meas_parts = _labels(meas_set, n_qubits)
    rows = []
    for plab, pparts in zip(prep_labels, prep_parts):
        for mlab, mparts in zip(meas_labels, meas_parts):
            row = [plab, mlab]
            for ps, ms in zip(pparts, mparts):
                ph, pq = prep_angles[ps]
                mh, mq = meas_angles[ms]
                row += [ph, pq, mq, mh]
            if seconds is not None:
                row.append(seconds)
            rows.append(tuple(row))
    return RunSheet(n_qubits, tuple(header), tuple(rows), seconds, right_circular)


def _analyser_sheet(n_qubits, meas_set, meas_angles, seconds, right_circular) -> RunSheet:
    """The run sheet of a state experiment: one row per analyser projector."""
    header = ["meas"]
    for k in range(1, n_qubits + 1):
        header += [f"meas_qwp_{k}", f"meas_hwp_{k}"]
    if seconds is not None:
        header.append("seconds")
    rows = []
    for mlab, mparts in zip(*_labels(meas_set, n_qubits)):
        row = [mlab]
        for ms in mparts:
            mh, mq = meas_angles[ms]
            row += [mq, mh]
        if seconds is not None:
            row.append(seconds)
        rows.append(tuple(row))
    return RunSheet(n_qubits, tuple(header), tuple(rows), seconds, right_circular, state=True)


def format_angle(angle_deg: float) -> str:
    """Degrees with up to six decimals and no trailing zeros (``22.5``, ``0``)."""
    text = f"{angle_deg:.6f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def sheet_text(sheet: RunSheet) -> str:
    """The CSV text of a run sheet."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(sheet.header)
    first, end = sheet.n_labels, sheet.n_labels + sheet.n_angles
    for row in sheet.rows:
        cells = list(row[:first]) + [format_angle(a) for a in row[first:end]]
        if sheet.seconds is not None:
            cells.append(f"{row[-1]:g}")
        writer.writerow(cells)
    return buf.getvalue()


def write_run_sheet(path, sheet: RunSheet) -> Path:
    """Write the sheet as CSV, atomically (a reader never sees half a file)."""
    path = Path(path)
    atomic_write_text(path, sheet_text(sheet))
    return path


def format_duration(seconds: float) -> str:
    """``12960 s (3 h 36 min 0 s)``."""
    whole = int(round(seconds))
    h, rest = divmod(whole, 3600)
    m, s = divmod(rest, 60)
    parts = ([f"{h} h"] if h else []) + ([f"{m} min"] if h or m else []) + [f"{s} s"]
    return f"{seconds:g} s ({' '.join(parts)})"


__all__ = ["RunSheet", "run_sheet", "plate_angles", "prepared_state", "analysed_effect",
           "sheet_text", "write_run_sheet", "format_angle", "format_duration"]
