"""`Fit`, the one result type of every estimator."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class Fit:
    """What every estimator returns (the same fields for all of them).

    Attributes
    ----------
    method : str
    choi : (d², d²) complex array, Choi matrix (the README's Conventions); for a
        state model the (d, d) density matrix (the Choi matrix of the process
        from a one-dimensional input that prepares it)
    intensities : (G,) array, fitted λ_g of every normalisation group
    log_likelihood : float
        Poisson log-likelihood Σ [n log ν − ν − log n!] at ``choi`` and
        ``intensities`` (−inf for an unphysical estimate that predicts a
        non-positive rate where counts were seen).
    converged : bool
    iterations : int
    stop_reason : str
    seconds : float, wall time of the estimator
    info : dict, estimator-specific extras (for example ``min_eigenvalue``
        of the linear-inversion estimate, or the optimality residual)
    """

    method: str
    choi: np.ndarray
    intensities: np.ndarray
    log_likelihood: float
    converged: bool
    iterations: int
    stop_reason: str
    seconds: float
    info: dict = field(default_factory=dict)
