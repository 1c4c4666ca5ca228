"""Estimators of processes and states behind one interface and one result type.

Every estimator is a function ``(model, *, counts=None, start=None, tol,
maxiter) -> Fit`` registered in `ESTIMATORS`, one module per family. The
model is a process model (`gatescope.model.MeasurementModel`) or a state
model (`gatescope.model.StateModel`); every estimator serves both, and
``Fit.choi`` then holds the Choi matrix or the density matrix:

* `linear` — ``lin`` (linear inversion) and ``pls`` (projected least squares);
* `factored` — ``mle``, Poisson maximum likelihood by Riemannian L-BFGS over
  the Kraus operators (the fastest exact path, measured in
  benchmarks/README.md);
* `mle` — ``mle-pg``, the same maximum by accelerated projected gradient in
  the Choi matrix, kept for comparison.

Options share their names across estimators: ``tol`` (relative change of
the log-likelihood) and ``maxiter``. ``counts`` replaces the experiment's
counts (the bootstrap uses it); ``start`` is a warm start an estimator may
ignore. An estimator that cannot produce an estimate for numerical reasons
raises `gatescope.errors.NumericalError`.
"""

from __future__ import annotations

import inspect

from ..errors import InputError
from ..model import MeasurementModel, StateModel
from ..options import choice
from .base import Fit
from .factored import fit_mle_factored
from .linear import fit_lin, fit_pls
from .mle import fit_mle

ESTIMATORS = {"lin": fit_lin, "pls": fit_pls, "mle": fit_mle_factored, "mle-pg": fit_mle}
METHODS = tuple(ESTIMATORS)
#: The estimators that maximise the likelihood (their goodness of fit is a test of the model).
MAXIMUM_LIKELIHOOD = ("mle", "mle-pg")


def check_options(method: str, options: dict, *, key: str = "method") -> None:
    """InputError unless ``method`` is registered and takes every option in ``options``.

    ``counts`` and ``start`` are set by the callers (the bootstrap), not by users, and
    ``tilt`` by the profile likelihood (`gatescope.profile`).
    """
    choice(method, METHODS, key, "method")
    accepted = inspect.signature(ESTIMATORS[method]).parameters
    for name in options:
        if name in ("counts", "start", "tilt") or name not in accepted or name == "model":
            raise InputError(f"the {method} estimator has no option {name!r}; its options: "
                             + ", ".join(p for p in accepted if p not in ("model", "counts",
                                                                          "start", "tilt")),
                             key=name)


def estimate(model: MeasurementModel | StateModel, method: str = "mle", *, counts=None,
             start=None, **options) -> Fit:
    """Run the estimator named ``method`` (one of `METHODS`) on ``model`` (a process or a
    state model).

    ``counts`` and ``start`` are passed on (a bootstrap refit); an unknown
    method or an option the estimator does not take is an `InputError`.
    """
    check_options(method, options)
    return ESTIMATORS[method](model, counts=counts, start=start, **options)


__all__ = ["Fit", "ESTIMATORS", "METHODS", "MAXIMUM_LIKELIHOOD", "estimate", "check_options",
           "fit_lin", "fit_pls", "fit_mle", "fit_mle_factored"]
