"""Entanglement that a two-qubit gate creates: Wootters' concurrence of the output
for the product input the target entangles most."""

from __future__ import annotations

import itertools
from functools import lru_cache

import numpy as np

from ..conventions import builtin_states, kron_all
from .state import concurrence as state_concurrence


def concurrence(rho: np.ndarray) -> float:
    """Wootters' concurrence of a two-qubit density matrix, normalised here (the output of
    a trace-decreasing estimate has trace below one): `gatescope.merit.state.concurrence`
    of ρ/Tr ρ (Wootters, Phys. Rev. Lett. 80, 2245 (1998))."""
    rho = np.asarray(rho, dtype=complex)
    return state_concurrence(rho / np.trace(rho).real)


#: Single-qubit inputs searched by `entangling_input`; the circular ones by their
#: handedness-free names, so the stored label means the same state in every experiment.
ENTANGLING_SEARCH = ("H", "V", "D", "A", "+i", "-i")


@lru_cache(maxsize=32)
def _entangling_input_cached(key: bytes, d: int):
    target = np.frombuffer(key, dtype=complex).reshape(d, d)
    states = builtin_states()
    best = None
    for parts in itertools.product(ENTANGLING_SEARCH, repeat=2):
        psi = kron_all([states[p][:, None] for p in parts])[:, 0]
        out = target @ psi
        c = 2.0 * abs(out[0] * out[3] - out[1] * out[2])   # pure two-qubit state (Wootters 1998)
        if best is None or c > best[2] + 1e-9:
            best = (" ".join(parts), psi, c)
    return best


def entangling_input(target: np.ndarray):
    """The product six-state input whose ideal output U|ψ> has the largest concurrence.

    Searches the 36 inputs ``A ⊗ B``, A and B in `ENTANGLING_SEARCH` (qubit 1
    first, in that order; ties go to the first). Returns (label, ket,
    ideal concurrence), or None for a target that is not two-qubit or
    entangles none of them (ideal concurrence below 1e−6).
    """
    target = np.ascontiguousarray(target, dtype=complex)
    if target.shape != (4, 4):
        return None
    best = _entangling_input_cached(target.tobytes(), 4)
    return best if best[2] > 1e-6 else None
