"""Figures of merit of an estimate: one module per kind of figure.

* `process` — fidelities to the target and figures without one;
* `entanglement` — the concurrence of the output for an entangling input;
* `diamond` — the diamond distance by semidefinite program (optional);
* `state` — the figures of a state: fidelity, purity, entropies, and the
  entanglement figures and the largest CHSH value (`compute_state_figures`,
  the state figures in `STATE_FIGURE_NAMES`; `compute_figures` with
  ``kind="state"`` calls it).

`compute_figures` computes every figure of a process in `FIGURE_NAMES` order:
``process_fidelity``, ``average_gate_fidelity``, ``purity``, ``trace``,
``min_eigenvalue``, ``unitarity``, ``nearest_unitary_fidelity``,
``process_fidelity_local_phases`` and ``truth_table_fidelity`` are defined
in `process`, ``concurrence`` in `entanglement`, ``diamond_distance`` (only
on request: it needs cvxpy) in `diamond`; each definition, with its source,
is in the docstring of the function that computes it and in the README.
Target figures are absent when the experiment names no target.
"""

from __future__ import annotations

import numpy as np

from ..channels import apply_channel
from ..errors import warn
from .diamond import cvxpy_available, diamond_distance
from .entanglement import concurrence, entangling_input
from .process import (average_gate_fidelity, local_phase_fidelity, min_eigenvalue,
                      nearest_unitary, process_fidelity, purity, trace, truth_table_fidelity,
                      unitarity)
from .state import (CHSH_DETAIL_KEYS, STATE_FIGURE_NAMES, STATE_FIGURE_ORDER, chsh_gap_warning,
                    compute_state_figures, state_figure_names)

FIGURE_NAMES = ("process_fidelity", "average_gate_fidelity", "purity", "trace", "min_eigenvalue",
                "unitarity", "nearest_unitary_fidelity", "process_fidelity_local_phases",
                "truth_table_fidelity", "concurrence", "diamond_distance")
TARGET_FIGURES = ("process_fidelity", "average_gate_fidelity", "process_fidelity_local_phases",
                  "truth_table_fidelity", "concurrence", "diamond_distance")


def compute_figures(choi: np.ndarray, target: np.ndarray | None, *, diamond: bool = False,
                    details: dict | None = None, kind: str = "process") -> dict[str, float]:
    """All figures of merit, in `FIGURE_NAMES` order (target ones only with a target).

    With ``kind="state"``, ``choi`` is a density matrix and ``target`` a target
    state (a ket or a density matrix, or None): the figures are those of
    `compute_state_figures` (``diamond`` does not apply and is ignored).

    Parameters
    ----------
    choi : (d², d²) array
    target : (d, d) unitary or None
    diamond : bool
        Also compute ``diamond_distance`` (needs cvxpy; without it a
        `GatescopeWarning` says it was skipped).
    details : dict, optional
        Filled with what is not a single number: ``nearest_unitary``
        (d × d complex), ``local_phases_before`` and ``local_phases_after``
        (radians, one per qubit), ``concurrence_input`` (label of the
        product input, e.g. "D H") and ``concurrence_ideal`` (its ideal
        output's concurrence), ``diamond_status``, ``diamond_solver``,
        ``diamond_program``.
    """
    if kind == "state":
        return compute_state_figures(choi, target, details)
    out = {}
    extra = {} if details is None else details
    if target is not None:
        out["process_fidelity"] = process_fidelity(choi, target)
        out["average_gate_fidelity"] = average_gate_fidelity(choi, target)
    out["purity"] = purity(choi)
    out["trace"] = trace(choi)
    out["min_eigenvalue"] = min_eigenvalue(choi)
    out["unitarity"] = unitarity(choi)
    u_near, f_near = nearest_unitary(choi, target)
    out["nearest_unitary_fidelity"] = f_near
    extra["nearest_unitary"] = u_near
    if target is None:
        return out
    f_loc, before, after = local_phase_fidelity(choi, target)
    out["process_fidelity_local_phases"] = f_loc
    extra["local_phases_before"] = before
    extra["local_phases_after"] = after
    tt = truth_table_fidelity(choi, target)
    if tt is not None:
        out["truth_table_fidelity"] = tt
    ent = entangling_input(target)
    if ent is not None:
        label, psi, ideal = ent
        out["concurrence"] = concurrence(apply_channel(choi, np.outer(psi, psi.conj())))
        extra["concurrence_input"] = label
        extra["concurrence_ideal"] = float(ideal)
    if diamond:
        if not cvxpy_available():
            warn("diamond", "diamond distance skipped: it needs cvxpy, the 'sdp' extra "
                            "(pip install 'gatescope[sdp]')", stacklevel=2)
        else:
            dn = diamond_distance(choi, target)
            if dn["status"] not in ("optimal", "optimal_inaccurate"):
                warn("diamond", f"diamond distance skipped: the solver ended with status "
                                f"{dn['status']!r}", stacklevel=2)
            else:
                if dn["status"] != "optimal":
                    warn("diamond", f"diamond distance: the solver reports {dn['status']!r}",
                         stacklevel=2)
                out["diamond_distance"] = dn["value"]
                extra["diamond_status"] = dn["status"]
                extra["diamond_solver"] = dn["solver"]
                extra["diamond_program"] = dn["program"]
    return out


__all__ = ["FIGURE_NAMES", "TARGET_FIGURES", "STATE_FIGURE_NAMES", "STATE_FIGURE_ORDER",
           "CHSH_DETAIL_KEYS", "compute_state_figures", "state_figure_names", "chsh_gap_warning",
           "compute_figures", "process_fidelity",
           "average_gate_fidelity", "purity", "trace", "min_eigenvalue", "unitarity",
           "nearest_unitary", "local_phase_fidelity", "truth_table_fidelity", "concurrence",
           "entangling_input", "diamond_distance"]
