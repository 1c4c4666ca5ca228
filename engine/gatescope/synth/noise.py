"""Known channels for simulation: noise channels, random channels, SPEC strings.

A channel SPEC (README, "Commands" and "Noise that labs have") is one
grammar for `simulate --channel`, `bench --channel` and the demo recipe:

    GATE[+TERM]...   or   random:RANK[:SEED][+TERM]...

``random:RANK[:SEED]`` is a random CPTP channel of that Choi rank. A TERM
is ``KIND:V[:V...]``. Process noise acts after the gate (or the random
channel), in the order given:

* ``depolarizing:p`` — Φ ↦ (1−p)·Φ + p·(ρ ↦ Tr ρ · I/d) on the whole process;
* ``dephasing:p`` — ρ ↦ (1−p)·ρ + p·ZρZ on every qubit;
* ``amplitude-damping:g`` — the Kraus pair [[1,0],[0,√(1−g)]],
  [[0,√g],[0,0]] on every qubit;
* ``zz:phi`` — exp(−i·phi·Z⊗Z/2) on each neighbouring pair of qubits
  (phi in radians).

The bench kinds of `gatescope.synth.lab` (each at most once):

* ``distinguishability:X`` — the postselected linear-optics CZ or CNOT with
  a fraction X of distinguishable photon pairs; it replaces the gate, so it
  must directly follow CZ or CNOT (trace decreasing);
* ``plates:ANGLE:RETARD[:SEED]`` — every wave plate has a fixed angle
  offset ~ N(0, ANGLE²) and retardance error ~ N(0, RETARD²), degrees,
  drawn from SEED (default 0);
* ``accidentals:SINGLES:WINDOW_NS`` — accidental coincidences from singles
  rates SINGLES (per second, every detector) and a coincidence window
  WINDOW_NS (nanoseconds);
* ``drift:CHANGE`` — the source intensity changes linearly over the rows by
  CHANGE (relative, |CHANGE| < 2), mean 1; ``drift-walk:SIGMA[:SEED]`` — a
  random walk of the log-intensity whose total change has standard
  deviation SIGMA (without SEED a new walk for every simulation seed).

Errors are `ValueError` with a message for the user; the callers that take
a SPEC from the user turn them into an `InputError` naming the option.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np

from ..channels import choi_from_kraus, choi_from_unitary, compose
from ..conventions import GATE_NAMES, kron_all, n_qubits_of, named_gate
from .lab import LAB_FORMS, LAB_KINDS, LabNoise, distinguishability_gate, lab_noise, parse_lab_term


def depolarizing(p: float, d: int) -> np.ndarray:
    """Choi matrix of ρ ↦ (1−p)ρ + p Tr(ρ) I/d."""
    return (1 - p) * choi_from_unitary(np.eye(d)) + p * np.eye(d * d) / d


def _each_qubit(kraus_1q, n_qubits: int) -> np.ndarray:
    """Choi matrix of a single-qubit channel applied to every qubit."""
    ops = [kron_all(combo) for combo in itertools.product(kraus_1q, repeat=n_qubits)]
    return choi_from_kraus(ops)


def dephasing_kraus(p: float) -> list[np.ndarray]:
    """Single-qubit Kraus pair of ρ ↦ (1−p)ρ + p ZρZ: √(1−p)·I, √p·Z."""
    z = np.diag([1.0, -1.0]).astype(complex)
    return [np.sqrt(1 - p) * np.eye(2), np.sqrt(p) * z]


def amplitude_damping_kraus(g: float) -> list[np.ndarray]:
    """Single-qubit Kraus pair [[1,0],[0,√(1−g)]], [[0,√g],[0,0]]."""
    k0 = np.array([[1, 0], [0, np.sqrt(1 - g)]], dtype=complex)
    k1 = np.array([[0, np.sqrt(g)], [0, 0]], dtype=complex)
    return [k0, k1]


def dephasing(p: float, n_qubits: int) -> np.ndarray:
    """ρ ↦ (1−p)ρ + p ZρZ on every qubit."""
    return _each_qubit(dephasing_kraus(p), n_qubits)


def amplitude_damping(g: float, n_qubits: int) -> np.ndarray:
    """Kraus pair [[1,0],[0,√(1−g)]], [[0,√g],[0,0]] on every qubit."""
    return _each_qubit(amplitude_damping_kraus(g), n_qubits)


def zz_diagonal(phi: float, n_qubits: int) -> np.ndarray:
    """The diagonal of exp(−i φ Σ_k Z_k Z_{k+1}/2), neighbouring pairs (k, k+1)."""
    d = 2 ** n_qubits
    bits = (np.arange(d)[:, None] >> (n_qubits - 1 - np.arange(n_qubits))[None, :]) & 1
    z = 1 - 2 * bits                                  # ±1 eigenvalue of Z_k
    exponent = np.zeros(d)
    for k in range(n_qubits - 1):
        exponent += z[:, k] * z[:, k + 1]
    return np.exp(-0.5j * phi * exponent)


def zz_phase(phi: float, n_qubits: int) -> np.ndarray:
    """exp(−i φ Z⊗Z/2) on each neighbouring pair (k, k+1), as a Choi matrix."""
    return choi_from_unitary(np.diag(zz_diagonal(phi, n_qubits)))


NOISE_KINDS = ("depolarizing", "dephasing", "amplitude-damping", "zz")


def check_noise_parameter(kind: str, value: float) -> None:
    """ValueError unless the parameter of a noise kind other than ``zz`` lies in [0, 1]."""
    if kind != "zz" and not 0.0 <= value <= 1.0:
        raise ValueError(f"{kind} parameter must lie in [0, 1], got {value}")


def noise_channel(kind: str, value: float, n_qubits: int) -> np.ndarray:
    """Choi matrix of one noise term (README, Commands: noise kinds)."""
    if kind == "zz":
        return zz_phase(value, n_qubits)
    check_noise_parameter(kind, value)
    if kind == "depolarizing":
        return depolarizing(value, 2 ** n_qubits)
    if kind == "dephasing":
        return dephasing(value, n_qubits)
    if kind == "amplitude-damping":
        return amplitude_damping(value, n_qubits)
    raise ValueError(f"unknown noise kind {kind!r}; known: {', '.join(NOISE_KINDS)}")


def random_channel(n_qubits: int, rank: int, seed: int | None = None) -> np.ndarray:
    """A random CPTP channel whose Choi matrix has the given rank.

    Built from a Haar-like random isometry V: C^d → C^d ⊗ C^rank (QR of a
    complex Gaussian matrix), whose blocks are the Kraus operators.
    """
    d = 2 ** n_qubits
    if not 1 <= rank <= d * d:
        raise ValueError(f"rank must lie in 1..{d * d}, got {rank}")
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(d * rank, d)) + 1j * rng.normal(size=(d * rank, d))
    q, r = np.linalg.qr(g)
    q = q * (np.diag(r) / np.abs(np.diag(r)))[None, :]
    kraus = q.reshape(rank, d, d)
    return choi_from_kraus(kraus)


@dataclass(frozen=True)
class ChannelSpec:
    """A parsed channel SPEC.

    Attributes
    ----------
    text : str
        The SPEC as given.
    gate : str or None
        The gate name (the target of the simulated experiment), None for a
        random channel.
    noise : list of (kind, value)
        The process-noise terms, in order.
    random : (rank, seed or None) or None
        ``random:RANK[:SEED]``.
    lab : LabNoise
        The bench kinds (`gatescope.synth.lab`).
    """

    text: str
    gate: str | None
    noise: list
    random: tuple | None = None
    lab: LabNoise = field(default_factory=LabNoise)


def parse_channel_spec(spec: str) -> ChannelSpec:
    """Parse a channel SPEC, ``GATE[+TERM]...`` or ``random:RANK[:SEED][+TERM]...``
    (the grammar of the module docstring); ValueError naming what is wrong."""
    text = spec.strip()
    pieces = text.split("+")
    head = pieces[0]
    gate, rnd = None, None
    if head.startswith("random:") or head == "random":
        rnd = parse_random(head, f"channel {spec!r}")
    elif head in GATE_NAMES:
        gate = head
    else:
        raise ValueError(f"channel {spec!r}: unknown gate {head!r}; known gates: "
                         f"{', '.join(GATE_NAMES)}")
    noise, bench = [], []
    for position, piece in enumerate(pieces[1:]):
        kind, term = parse_term(piece)
        if kind in LAB_KINDS:
            if kind == "distinguishability" and (gate not in ("CZ", "CNOT") or position != 0):
                raise ValueError(f"channel {spec!r}: distinguishability replaces the gate by its "
                                 "postselected linear-optics version, so it must directly "
                                 "follow CZ or CNOT")
            bench.append((kind, term))
        else:
            noise.append((kind, term))
    return ChannelSpec(text, gate, noise, rnd, lab_noise(bench, spec))


def parse_term(text: str) -> tuple[str, object]:
    """Parse one TERM of a channel SPEC: (kind, value) for process noise, (kind, values)
    for a bench kind (`gatescope.synth.lab.parse_lab_term`)."""
    kind, sep, _ = text.partition(":")
    if kind in LAB_KINDS:
        return parse_lab_term(text)
    if sep and kind not in NOISE_KINDS:
        raise ValueError(f"noise {text!r}: unknown kind {kind!r}; known: "
                         f"{', '.join(NOISE_KINDS + LAB_KINDS)}")
    return parse_noise(text)


def parse_random(text: str, what: str) -> tuple[int, int | None]:
    """(rank, seed) of ``random:RANK[:SEED]``; ``what`` starts the error messages."""
    parts = text.split(":")
    if len(parts) not in (2, 3):
        raise ValueError(f"{what}: expected random:RANK[:SEED]")
    try:
        return int(parts[1]), (int(parts[2]) if len(parts) == 3 else None)
    except ValueError:
        raise ValueError(f"{what}: RANK and SEED must be whole numbers") from None


def parse_noise(text: str) -> tuple[str, float]:
    """Parse one ``KIND:P`` noise term."""
    kind, sep, value = text.partition(":")
    if not sep:
        raise ValueError(f"noise {text!r}: expected KIND:P, e.g. depolarizing:0.02")
    if kind not in NOISE_KINDS:
        raise ValueError(f"noise {text!r}: unknown kind {kind!r}; known: {', '.join(NOISE_KINDS)}")
    try:
        p = float(value)
    except ValueError:
        raise ValueError(f"noise {text!r}: {value!r} is not a number") from None
    if not np.isfinite(p):
        raise ValueError(f"noise {text!r}: parameter must be finite")
    return kind, p


def build_channel(gate: str, noise, n_qubits: int | None = None) -> np.ndarray:
    """Choi matrix of a named gate followed by the noise terms, in order."""
    u = named_gate(gate)
    n = n_qubits_of(u.shape[0])
    if n_qubits is not None and n != n_qubits:
        raise ValueError(f"gate {gate} acts on {n} qubit(s), not {n_qubits}")
    choi = choi_from_unitary(u)
    for kind, value in noise:
        choi = compose(choi, noise_channel(kind, value, n))
    return choi


def spec_channel(spec: ChannelSpec, n_qubits: int = 2) -> np.ndarray:
    """Choi matrix of a parsed SPEC's process: the gate (its postselected version with
    ``distinguishability``) or the random channel, then the process noise in order.

    ``n_qubits`` is used only by ``random:RANK[:SEED]``, which names no gate.
    The other bench kinds do not change the process.
    """
    if spec.random is not None:
        rank, seed = spec.random
        choi = random_channel(n_qubits, rank, seed)
    elif spec.lab.distinguishability is not None:
        choi = distinguishability_gate(spec.gate, spec.lab.distinguishability)
    else:
        return build_channel(spec.gate, spec.noise)
    n = n_qubits_of(int(round(np.sqrt(choi.shape[0]))))
    for kind, value in spec.noise:
        choi = compose(choi, noise_channel(kind, value, n))
    return choi


def spec_forms() -> str:
    """Every TERM form, for help texts: ``depolarizing:P, ..., drift-walk:SIGMA[:SEED]``."""
    return ", ".join([f"{k}:P" for k in NOISE_KINDS] + list(LAB_FORMS.values()))
