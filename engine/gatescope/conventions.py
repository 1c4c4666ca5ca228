"""Conventions of gatescope: states, labels, Pauli order, gates, wave plates.

Everything here is stated in the README's Conventions:

* Qubit 1 is the leftmost tensor factor and the most significant bit.
* ``H`` = |0>, ``V`` = |1>, ``D`` = (H+V)/√2, ``A`` = (H−V)/√2,
  ``R`` = (H−iV)/√2 and ``L`` = (H+iV)/√2 by default; the option
  ``right_circular = "H+iV"`` swaps R and L. The generic aliases ``0 1 + -
  +i -i`` are the Pauli eigenstates whatever that option says.
* Bloch vectors are (<X>, <Y>, <Z>); (0, 0, 1) is H.
* Named states (targets of state experiments): the Bell states ``phi+`` =
  (HH + VV)/√2, ``phi-`` = (HH − VV)/√2, ``psi+`` = (HV + VH)/√2, ``psi-`` =
  (HV − VH)/√2 (qubit 1 first); for n ≥ 3 qubits ``GHZ`` =
  (|0…0> + |1…1>)/√2 and ``W`` = (|10…0> + |01…0> + … + |0…01>)/√n.
* Pauli strings are ordered lexicographically with I < X < Y < Z and qubit 1
  most significant (so for two qubits: II, IX, IY, IZ, XI, ...).
* A wave plate with retardance δ and fast axis at θ from H is
  W(θ, δ) = Rot(−θ) · diag(e^{−iδ/2}, e^{iδ/2}) · Rot(θ) with
  Rot(θ) = [[cos θ, sin θ], [−sin θ, cos θ]].
"""

from __future__ import annotations

import itertools
import re
from functools import lru_cache

import numpy as np


SQRT_HALF = 1.0 / np.sqrt(2.0)

RIGHT_CIRCULAR_CHOICES = ("H-iV", "H+iV")

PAULI_LETTERS = "IXYZ"
_PAULI_1Q = {
    "I": np.array([[1, 0], [0, 1]], dtype=complex),
    "X": np.array([[0, 1], [1, 0]], dtype=complex),
    "Y": np.array([[0, -1j], [1j, 0]], dtype=complex),
    "Z": np.array([[1, 0], [0, -1]], dtype=complex),
}


# --------------------------------------------------------------------------
# Single-qubit states and multi-qubit labels
# --------------------------------------------------------------------------

def builtin_states(right_circular: str = "H-iV") -> dict[str, np.ndarray]:
    """Return the built-in single-qubit state vectors, keyed by label.

    Parameters
    ----------
    right_circular : {"H-iV", "H+iV"}
        Which superposition the label ``R`` means; ``L`` is the other one.
        The aliases ``+i`` = (|0>+i|1>)/√2 and ``-i`` = (|0>−i|1>)/√2 do not
        depend on it.
    """
    if right_circular not in RIGHT_CIRCULAR_CHOICES:
        raise ValueError(f"right_circular must be one of {RIGHT_CIRCULAR_CHOICES}")
    h = np.array([1, 0], dtype=complex)
    v = np.array([0, 1], dtype=complex)
    minus_i = (h - 1j * v) * SQRT_HALF
    plus_i = (h + 1j * v) * SQRT_HALF
    right, left = (minus_i, plus_i) if right_circular == "H-iV" else (plus_i, minus_i)
    return {
        "H": h, "V": v,
        "D": (h + v) * SQRT_HALF, "A": (h - v) * SQRT_HALF,
        "R": right, "L": left,
        "0": h, "1": v, "+": (h + v) * SQRT_HALF, "-": (h - v) * SQRT_HALF,
        "+i": plus_i, "-i": minus_i,
    }


BUILTIN_LABELS = tuple(builtin_states().keys())

#: Named single-qubit label sets usable as SET in `plan` and `simulate`.
LABEL_SETS = {
    "pauli6": ("H", "V", "D", "A", "R", "L"),
    "pauli4": ("H", "V", "D", "R"),
}

_SEPARATORS = re.compile(r"[\s,]+")


def split_label(label: str, n_qubits: int, known: "set[str] | dict") -> list[str]:
    """Split a multi-qubit label into its per-qubit parts (qubit 1 first).

    A label is either the per-qubit labels separated by spaces or commas
    (``"+i 0"``, ``"+i,0"``), or, when every part is one character, their
    concatenation (``"HD"``). A one-qubit label may be any known name.

    Raises
    ------
    ValueError
        With a message saying what is wrong (unknown part, wrong count).
        The reader turns it into an `InputError` naming the file and line.
    """
    text = label.strip()
    if not text:
        raise ValueError("empty label")
    if _SEPARATORS.search(text):
        parts = [p for p in _SEPARATORS.split(text) if p]
    elif n_qubits == 1 or text in known:
        parts = [text]
    else:
        parts = list(text)
    unknown = [p for p in parts if p not in known]
    if unknown:
        raise ValueError(f"unknown state label {unknown[0]!r} in {label!r}")
    if len(parts) != n_qubits:
        raise ValueError(
            f"label {label!r} names {len(parts)} qubit(s) but the experiment has {n_qubits}")
    return parts


def density(vector: np.ndarray) -> np.ndarray:
    """|ψ><ψ| of a (not necessarily normalised) state vector."""
    v = np.asarray(vector, dtype=complex)
    v = v / np.max(np.abs(v))            # first to order one: the norm of 1e300 overflows
    v = v / np.linalg.norm(v)
    return np.outer(v, v.conj())


def bloch_density(bloch) -> np.ndarray:
    """ρ = (I + xX + yY + zZ)/2 for a Bloch vector (x, y, z), |r| ≤ 1."""
    x, y, z = (float(c) for c in bloch)
    return 0.5 * (_PAULI_1Q["I"] + x * _PAULI_1Q["X"] + y * _PAULI_1Q["Y"] + z * _PAULI_1Q["Z"])


def kron_all(matrices) -> np.ndarray:
    """Tensor product of a sequence of matrices, first factor leftmost."""
    out = np.array([[1.0 + 0j]])
    for m in matrices:
        out = np.kron(out, m)
    return out


# --------------------------------------------------------------------------
# Named multi-qubit states
# --------------------------------------------------------------------------

BELL_STATES = ("phi+", "phi-", "psi+", "psi-")
MANY_QUBIT_STATES = ("GHZ", "W")
NAMED_STATES = BELL_STATES + MANY_QUBIT_STATES

_STATE_HELP = ("a target state is a product label with one built-in single-qubit label per "
               f"qubit (from {' '.join(BUILTIN_LABELS)}, e.g. \"HV\" or \"+i 0\"), a Bell "
               f"state ({', '.join(BELL_STATES)}; two qubits) or GHZ or W (three qubits or more)")


def bell_state(name: str) -> np.ndarray:
    """The Bell state ``phi+``, ``phi-``, ``psi+`` or ``psi-`` as a 4-vector (HH, HV, VH, VV):
    phi± = (HH ± VV)/√2, psi± = (HV ± VH)/√2, qubit 1 first."""
    s = SQRT_HALF
    vectors = {"phi+": [s, 0, 0, s], "phi-": [s, 0, 0, -s],
               "psi+": [0, s, s, 0], "psi-": [0, s, -s, 0]}
    try:
        return np.array(vectors[name], dtype=complex)
    except KeyError:
        raise ValueError(f"unknown Bell state {name!r}; the Bell states are "
                         f"{', '.join(BELL_STATES)}") from None


def ghz_state(n_qubits: int) -> np.ndarray:
    """(|0…0> + |1…1>)/√2 on n qubits."""
    v = np.zeros(2 ** n_qubits, dtype=complex)
    v[0] = v[-1] = SQRT_HALF
    return v


def w_state(n_qubits: int) -> np.ndarray:
    """(|10…0> + |01…0> + … + |0…01>)/√n: one excitation shared by n qubits."""
    v = np.zeros(2 ** n_qubits, dtype=complex)
    v[[2 ** k for k in range(n_qubits)]] = 1.0 / np.sqrt(n_qubits)
    return v


def named_state(name: str, n_qubits: int, right_circular: str = "H-iV") -> np.ndarray:
    """The state a target name means on ``n_qubits`` qubits, as a normalised vector.

    Parameters
    ----------
    name : str
        A product label of built-in single-qubit labels (``"HV"``, ``"+i 0"``;
        `split_label`), ``phi+``, ``phi-``, ``psi+``, ``psi-`` (two qubits),
        ``GHZ`` or ``W`` (three qubits or more). Names are case-sensitive.
    n_qubits : int
    right_circular : {"H-iV", "H+iV"}
        Meaning of the labels R and L.

    Raises
    ------
    ValueError
        For an unknown name, a name that does not fit the number of qubits, or
        a product label with the wrong number of parts; the message says what
        to write instead (the reader adds the file and key).
    """
    if not isinstance(name, str):
        raise ValueError(f"a target state name must be text, got {type(name).__name__}; "
                         + _STATE_HELP)
    if name in BELL_STATES:
        if n_qubits != 2:
            raise ValueError(f"{name!r} is a two-qubit Bell state but the experiment has "
                             f"{n_qubits} qubit(s)"
                             + ("; use GHZ or W, or a product label" if n_qubits >= 3
                                else "; use a single-qubit label such as H or D"))
        return bell_state(name)
    if name in MANY_QUBIT_STATES:
        if n_qubits < 3:
            raise ValueError(f"{name!r} is defined here for three qubits or more but the "
                             f"experiment has {n_qubits}"
                             + ("; for two qubits use a Bell state (phi+ is (HH + VV)/√2)"
                                if n_qubits == 2 else ""))
        return ghz_state(n_qubits) if name == "GHZ" else w_state(n_qubits)
    states = builtin_states(right_circular)
    lowered = {s.lower(): s for s in NAMED_STATES}
    try:
        parts = split_label(name, n_qubits, states)
    except ValueError as exc:
        near = lowered.get(name.strip().lower())
        hint = f" (names are case-sensitive: did you mean {near!r}?)" if near else ""
        raise ValueError(f"target state {name!r}: {exc}{hint}; {_STATE_HELP}") from None
    return kron_all([states[p][:, None] for p in parts])[:, 0]


# --------------------------------------------------------------------------
# Pauli basis
# --------------------------------------------------------------------------

def pauli_labels(n_qubits: int) -> list[str]:
    """Pauli strings in the documented order: I<X<Y<Z, qubit 1 most significant."""
    return ["".join(p) for p in itertools.product(PAULI_LETTERS, repeat=n_qubits)]


@lru_cache(maxsize=8)
def _pauli_basis_cached(n_qubits: int) -> np.ndarray:
    ops = [kron_all(_PAULI_1Q[c] for c in lab) for lab in pauli_labels(n_qubits)]
    basis = np.array(ops)
    basis.setflags(write=False)
    return basis


def pauli_basis(n_qubits: int) -> np.ndarray:
    """The d² Pauli operators as an array of shape (d², d, d), in `pauli_labels` order.

    The array is shared and read-only.
    """
    return _pauli_basis_cached(n_qubits)


def n_qubits_of(dim: int) -> int:
    """Number of qubits of a Hilbert-space dimension d = 2^n."""
    n = int(round(np.log2(dim)))
    if 2 ** n != dim:
        raise ValueError(f"dimension {dim} is not a power of two")
    return n


# --------------------------------------------------------------------------
# Gates
# --------------------------------------------------------------------------

def _gates() -> dict[str, np.ndarray]:
    s = SQRT_HALF
    c = (1 + 1j) / 2
    cc = (1 - 1j) / 2
    g = {
        "I": np.eye(2),
        "X": _PAULI_1Q["X"], "Y": _PAULI_1Q["Y"], "Z": _PAULI_1Q["Z"],
        "H": s * np.array([[1, 1], [1, -1]]),
        "S": np.diag([1, 1j]),
        "T": np.diag([1, np.exp(1j * np.pi / 4)]),
        "CNOT": np.array([[1, 0, 0, 0], [0, 1, 0, 0], [0, 0, 0, 1], [0, 0, 1, 0]]),
        "CZ": np.diag([1, 1, 1, -1]),
        "SWAP": np.array([[1, 0, 0, 0], [0, 0, 1, 0], [0, 1, 0, 0], [0, 0, 0, 1]]),
        "iSWAP": np.array([[1, 0, 0, 0], [0, 0, 1j, 0], [0, 1j, 0, 0], [0, 0, 0, 1]]),
        "sqrtSWAP": np.array([[1, 0, 0, 0], [0, c, cc, 0], [0, cc, c, 0], [0, 0, 0, 1]]),
    }
    out = {}
    for name, u in g.items():
        u = np.asarray(u, dtype=complex)
        u.setflags(write=False)
        out[name] = u
    return out


GATES = _gates()
GATE_NAMES = tuple(GATES)


def named_gate(name: str) -> np.ndarray:
    """The unitary of a named gate (the README's Conventions); a copy the caller may edit."""
    try:
        return GATES[name].copy()
    except KeyError:
        raise ValueError(f"unknown gate {name!r}; known gates: {', '.join(GATE_NAMES)}") from None


def check_unitary(u: np.ndarray, tol: float = 1e-6) -> None:
    """Raise ValueError unless u is square, of size 2^n, and ‖U†U − I‖ ≤ tol."""
    u = np.asarray(u)
    if u.ndim != 2 or u.shape[0] != u.shape[1]:
        raise ValueError(f"a unitary must be a square matrix, got shape {u.shape}")
    n_qubits_of(u.shape[0])
    err = np.linalg.norm(u.conj().T @ u - np.eye(u.shape[0]), 2)
    if not err <= tol:
        raise ValueError(f"matrix is not unitary: ‖U†U − I‖ = {err:.3g} > {tol:g}")


def rz(theta: float) -> np.ndarray:
    """exp(−iθZ/2) = diag(e^{−iθ/2}, e^{iθ/2})."""
    return np.diag([np.exp(-0.5j * theta), np.exp(0.5j * theta)])


# --------------------------------------------------------------------------
# Jones calculus for wave plates
# --------------------------------------------------------------------------

def rotation(theta: float) -> np.ndarray:
    """Rot(θ) = [[cos θ, sin θ], [−sin θ, cos θ]] (θ in radians)."""
    c, s = np.cos(theta), np.sin(theta)
    return np.array([[c, s], [-s, c]], dtype=complex)


def wave_plate(theta: float, retardance: float) -> np.ndarray:
    """Jones matrix W(θ, δ) = Rot(−θ) diag(e^{−iδ/2}, e^{iδ/2}) Rot(θ).

    θ is the fast-axis angle from H and δ the retardance, both in radians.
    """
    core = np.diag([np.exp(-0.5j * retardance), np.exp(0.5j * retardance)])
    return rotation(-theta) @ core @ rotation(theta)


def half_wave(theta: float) -> np.ndarray:
    """Half-wave plate (δ = π) with fast axis at θ radians."""
    return wave_plate(theta, np.pi)


def quarter_wave(theta: float) -> np.ndarray:
    """Quarter-wave plate (δ = π/2) with fast axis at θ radians."""
    return wave_plate(theta, np.pi / 2)
