"""How far one estimate lands from the truth, and the work of one repetition.

For an estimate Ĵ and the true process J (Choi matrices in the README's
convention, Tr J = d for a trace-preserving process; a trace non-increasing
one keeps its own trace, Tr J = d × mean success probability):

* ``hs_error`` = ‖Ĵ − J‖²_F, the squared Hilbert–Schmidt (Frobenius)
  distance, whose mean over repetitions is ``hs_mse`` and is bounded below
  by `gatescope.bench.crb.hs_crb` for unbiased estimators;
* ``infidelity`` = 1 − F(ρ̂, ρ) between the normalised Choi states ρ̂ = Ĵ/Tr Ĵ
  and ρ = J/Tr J, with Uhlmann's fidelity in the squared convention,
  F(ρ̂, ρ) = (Tr √(√ρ ρ̂ √ρ))² (Uhlmann, Rep. Math. Phys. 9, 273 (1976);
  Jozsa, J. Mod. Opt. 41, 2315 (1994)), computed as the squared trace norm
  of √ρ̂ √ρ, whose singular values are the square roots of the eigenvalues
  of √ρ ρ̂ √ρ (so no square root of a rounding-level eigenvalue of that
  product enters). For an estimate that is not positive semidefinite (a
  ``lin`` estimate may not be) its positive part is used, not renormalised,
  so the infidelity can then be negative;
* ``trace_distance`` = ‖Ĵ − J‖₁/(2d), the trace norm (sum of the absolute
  eigenvalues of the Hermitian difference), which is the trace distance
  between the normalised Choi states when both processes are trace
  preserving;
* ``fidelity_error`` = F_pro(Ĵ) − F_pro(J), the error of the estimated
  process fidelity to the target (`gatescope.merit.process_fidelity`);
  its mean is ``fidelity_bias``.

For a state (``kind = "state"``: an estimate ρ̂ and the true density
matrix ρ, both of trace 1) the same measures read ``hs_error`` = ‖ρ̂ − ρ‖²_F,
``infidelity`` = 1 − F(ρ̂, ρ) (the same Uhlmann fidelity, squared
convention), ``trace_distance`` = ‖ρ̂ − ρ‖₁/2, and ``fidelity_error`` =
F(ρ̂, σ) − F(ρ, σ), the error of the estimated ``state_fidelity`` to the
target state σ (`gatescope.merit.state.state_fidelity`). One formula serves
both: the trace norm is divided by 2·d_in, d_in = d for a process and 1 for
a state (a state is a process from a one-dimensional input).

`repetition` is the whole work of one repetition on one simulated
experiment: estimate, errors, and with a bootstrap the figures' intervals.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from ..bootstrap import run_bootstrap
from ..errors import GatescopeWarning, NumericalError
from ..estimators import estimate
from ..merit import compute_figures, process_fidelity
from ..merit.state import state_fidelity
from ..model import MeasurementModel
from ..synth.simulate import Acquisition


def positive_sqrt(matrix: np.ndarray) -> np.ndarray:
    """√M₊ of the positive part of the Hermitian part of M.

    Eigenvalues below the rounding level (size · ε · max |eigenvalue|, the
    rank tolerance of numpy.linalg.matrix_rank) count as zero, so that a
    rank-deficient matrix keeps its rank instead of gaining square roots of
    rounding errors (√ε ≈ 1e−8).
    """
    w, v = np.linalg.eigh(0.5 * (matrix + matrix.conj().T))
    floor = w.size * np.finfo(float).eps * max(np.abs(w).max(), 0.0)
    return (v * np.sqrt(np.where(w > floor, w, 0.0))) @ v.conj().T


def uhlmann_fidelity(estimate_state: np.ndarray, sqrt_truth: np.ndarray) -> float:
    """(Tr √(√ρ ρ̂ √ρ))² = ‖√ρ̂₊ √ρ‖²_tr for a normalised estimate ρ̂ and √ρ of the
    normalised truth (module docstring)."""
    s = np.linalg.svd(positive_sqrt(estimate_state) @ sqrt_truth, compute_uv=False)
    return float(np.sum(s) ** 2)


def target_fidelity(choi: np.ndarray, target, kind: str = "process") -> float:
    """F_pro(J) to a target unitary, or, with ``kind="state"``, the state fidelity of ρ
    to a target state (a ket or a density matrix)."""
    return state_fidelity(choi, target) if kind == "state" else process_fidelity(choi, target)


@dataclass(frozen=True)
class Truth:
    """The true process (or state) of a bench case and what its errors are measured against.

    ``sqrt_state`` is √(J/Tr J); ``process_fidelity`` F_pro(J) to the target
    (None without a target) — for a state (``kind = "state"``, ``choi`` the
    density matrix ρ, ``target`` the target state) it holds the state fidelity
    F(ρ, σ) instead, also available as `target_fidelity`; ``figures`` the true
    channel's (or state's) figures of merit (`gatescope.merit.compute_figures`),
    against which the bootstrap intervals are checked.
    """

    choi: np.ndarray
    target: np.ndarray | None
    sqrt_state: np.ndarray
    process_fidelity: float | None
    figures: dict
    kind: str = "process"

    @property
    def target_fidelity(self) -> float | None:
        """The true figure whose estimate's error is ``fidelity_error``."""
        return self.process_fidelity

    @property
    def input_dim(self) -> int:
        """d_in: d for a process on d dimensions, 1 for a state."""
        return 1 if self.kind == "state" else int(round(np.sqrt(self.choi.shape[0])))

    @classmethod
    def of(cls, choi: np.ndarray, target: np.ndarray | None, kind: str = "process") -> "Truth":
        choi = np.asarray(choi, dtype=complex)
        state = choi / np.trace(choi).real
        return cls(choi, target, positive_sqrt(state),
                   None if target is None else target_fidelity(choi, target, kind),
                   compute_figures(choi, target, kind=kind), kind)


def errors(choi: np.ndarray, truth: Truth) -> dict:
    """``hs_error``, ``infidelity``, ``trace_distance`` and ``fidelity_error`` (NaN
    without a target) of the estimate ``choi`` (a density matrix for a state truth;
    module docstring)."""
    d = truth.input_dim
    diff = choi - truth.choi
    herm = 0.5 * (diff + diff.conj().T)
    state = choi / np.trace(choi).real
    return {
        "hs_error": float(np.vdot(diff, diff).real),
        "infidelity": 1.0 - uhlmann_fidelity(state, truth.sqrt_state),
        "trace_distance": float(np.sum(np.abs(np.linalg.eigvalsh(herm))) / (2 * d)),
        "fidelity_error": (float("nan") if truth.target is None
                           else target_fidelity(choi, truth.target, truth.kind)
                           - truth.process_fidelity),
    }


@dataclass(frozen=True)
class Case:
    """One simulated experiment of the bench: a known process, the design that measures
    it (``model``, as a fit sees the experiment file) and how its counts arise
    (``acquisition``, `gatescope.synth.simulate.Acquisition`).

    ``kind`` is the kind of experiment: ``"process"``, or ``"state"`` (``channel``
    the state SPEC, ``model`` a `gatescope.model.StateModel`, ``truth`` of kind
    ``"state"``); `repetition` measures both.
    """

    channel: str
    qubits: int
    shots: float
    model: MeasurementModel
    acquisition: Acquisition
    truth: Truth
    kind: str = "process"


def repetition(case: Case, counts: np.ndarray, method: str, *, bootstrap: int = 0,
               bootstrap_seed: int | None = None) -> dict:
    """Estimate the process from ``counts`` (one run of ``case``) and measure the estimate.

    Returns the record of the repetition: the `errors`, the estimator's
    ``seconds``, ``iterations`` and ``converged``, and, with ``bootstrap``
    B > 0, the figures of the estimate (``point_figures``, in the order of
    ``figure_names``), the B parametric-bootstrap values of each
    (``bootstrap_values``, B × K, NaN where a refit raised) and the number
    of refits that failed. A fit that raises a numerical error gives a
    record with ``error`` set and no numbers (it counts in ``errors`` of the
    table); anything else is a bug and propagates.
    """
    if case.kind not in ("process", "state") or case.truth.kind != case.kind:
        raise ValueError(f"no bench measures for experiments of kind {case.kind!r} "
                         f"(truth of kind {case.truth.kind!r})")
    try:
        fit = estimate(case.model, method, counts=np.asarray(counts, dtype=float))
    except (NumericalError, np.linalg.LinAlgError) as exc:
        return {"error": f"{type(exc).__name__}: {exc}"}
    record = {"error": None, **errors(fit.choi, case.truth), "seconds": float(fit.seconds),
              "iterations": int(fit.iterations), "converged": bool(fit.converged)}
    if bootstrap:
        point = compute_figures(fit.choi, case.truth.target, kind=case.kind)
        with warnings.catch_warnings():
            # the failures are recorded; warnings about them would repeat for every repetition
            warnings.simplefilter("ignore", GatescopeWarning)
            boot, _ = run_bootstrap(case.model, fit, case.truth.target, samples=bootstrap,
                                    seed=bootstrap_seed, workers=1, point_figures=point)
        record.update({"figure_names": list(boot.names),
                       "point_figures": [float(point[n]) for n in boot.names],
                       "bootstrap_values": boot.figures.tolist(),
                       "bootstrap_failures": int(boot.failures)})
    return record


__all__ = ["Truth", "Case", "errors", "repetition", "uhlmann_fidelity", "positive_sqrt",
           "target_fidelity"]
