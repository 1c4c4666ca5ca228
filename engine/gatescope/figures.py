"""Figures of merit of a process estimate (CONTRACT §2 and §5).

For a Choi matrix J on d dimensions and a unitary target U:

* ``process_fidelity`` F_pro = <<U|J|U>>/d² (squared, Choi-state
  convention; 1 for a perfect gate, equal to Tr(χ χ_U));
* ``average_gate_fidelity`` F_avg = (d·F_pro + Tr J/d)/(d + 1), which is
  (d·F_pro + 1)/(d + 1) for a trace-preserving J (Horodecki, Horodecki &
  Horodecki, Phys. Rev. A 60, 1888 (1999); Nielsen, Phys. Lett. A 303, 249
  (2002));
* ``purity`` Tr ρ_J² of the normalised Choi state ρ_J = J/Tr J, which is
  Tr J²/d² for a trace-preserving J (1 for a unitary);
* ``trace`` Tr J/d (1 for trace preserving);
* ``min_eigenvalue`` the smallest eigenvalue of J itself (negative for an
  unphysical linear-inversion estimate).

Target figures are absent when the experiment names no target.
"""

from __future__ import annotations

import numpy as np

from .channels import choi_from_unitary, dim_of_choi

FIGURE_NAMES = ("process_fidelity", "average_gate_fidelity", "purity", "trace", "min_eigenvalue")
TARGET_FIGURES = ("process_fidelity", "average_gate_fidelity")


def process_fidelity(choi: np.ndarray, unitary: np.ndarray) -> float:
    """<<U|J|U>>/d²."""
    d = dim_of_choi(choi)
    v = unitary.T.reshape(-1)
    return float(np.vdot(v, choi @ v).real / d**2)


def average_gate_fidelity(choi: np.ndarray, unitary: np.ndarray) -> float:
    """(d·F_pro + Tr J/d)/(d + 1)."""
    d = dim_of_choi(choi)
    return (d * process_fidelity(choi, unitary) + np.trace(choi).real / d) / (d + 1)


def purity(choi: np.ndarray) -> float:
    """Tr(J²)/(Tr J)², the purity of the normalised Choi state."""
    tr = np.trace(choi).real
    return float(np.vdot(choi, choi).real / tr**2)


def trace(choi: np.ndarray) -> float:
    """Tr J / d."""
    return float(np.trace(choi).real / dim_of_choi(choi))


def min_eigenvalue(choi: np.ndarray) -> float:
    """Smallest eigenvalue of the Hermitian part of J."""
    return float(np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0])


def compute_figures(choi: np.ndarray, target: np.ndarray | None) -> dict[str, float]:
    """All figures of merit, in `FIGURE_NAMES` order (target ones only with a target)."""
    out = {}
    if target is not None:
        out["process_fidelity"] = process_fidelity(choi, target)
        out["average_gate_fidelity"] = average_gate_fidelity(choi, target)
    out["purity"] = purity(choi)
    out["trace"] = trace(choi)
    out["min_eigenvalue"] = min_eigenvalue(choi)
    return out


__all__ = ["FIGURE_NAMES", "compute_figures", "process_fidelity", "average_gate_fidelity",
           "purity", "trace", "min_eigenvalue", "choi_from_unitary"]
