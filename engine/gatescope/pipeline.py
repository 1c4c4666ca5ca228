"""The main job as one function: `fit` turns an `Experiment` into a `Result`, for a
process or a state experiment alike.

Data flow, one module a step: the experiment (`reader`) → its measurement
model (`model`) → the estimate (`estimators`) → figures of merit (`merit`)
→ error bars (`bootstrap`) → goodness of fit (`diagnostics`) → the
`Result` (`result`). The command line calls exactly this function.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from .bootstrap import check_options as check_bootstrap_options
from .bootstrap import run_bootstrap
from .diagnostics import diagnostics, warn_if_poor_fit
from .errors import GatescopeWarning
from .estimators import MAXIMUM_LIKELIHOOD, estimate
from .estimators import check_options as check_estimator_options
from .intervals import DEFAULT_INTERVAL
from .merit import chsh_gap_warning, compute_figures
from .model import build_model
from .options import flag, fraction, whole
from .provenance import provenance
from .reader import Experiment
from .result import Result, build_result


def check_fit_options(*, method: str = "mle", bootstrap: int = 0,
                      bootstrap_kind: str = "parametric", ci_level: float = 0.95,
                      interval: str | None = None, seed=None, workers=None,
                      options: dict | None = None, command_line: bool = False) -> None:
    """Check every option of `fit` before any computation (InputError naming the option).

    With ``command_line`` the options are named by their flags (``--ci-level``).
    """
    name = flag if command_line else (lambda key: key)
    check_estimator_options(method, options or {}, key=name("method"))
    bootstrap = whole(bootstrap, name("bootstrap"), 0)
    fraction(ci_level, name("ci_level"))
    if bootstrap:
        check_bootstrap_options(
            samples=bootstrap, kind=bootstrap_kind, workers=workers,
            interval=DEFAULT_INTERVAL if interval is None else interval, seed=seed,
            names={key: name(key) for key in ("bootstrap", "bootstrap_kind", "interval", "seed",
                                              "workers")})


def fit(experiment: Experiment, method: str = "mle", *, bootstrap: int = 0,
        bootstrap_kind: str = "parametric", ci_level: float = 0.95, seed: int | None = None,
        workers: int | None = None, progress: bool = False, command_line: str | None = None,
        diamond: bool = False, interval: str | None = None, **options) -> Result:
    """Reconstruct the process (or the state) of an experiment and compute its figures of
    merit.

    Parameters
    ----------
    experiment : Experiment
        From :func:`gatescope.read_experiment`; a process or a state experiment
        (``experiment.kind``).
    method : {"mle", "mle-pg", "pls", "lin"}
        The estimator (see :mod:`gatescope.estimators`).
    bootstrap : int
        Number of resamples for error bars (0: none).
    bootstrap_kind : {"parametric", "nonparametric"}
    ci_level : float
        Confidence level of the intervals, a fraction.
    seed : int, optional
        Seed of the bootstrap; drawn at random and recorded when not given.
    workers : int, optional
        Processes for the bootstrap (default: the machine's cores).
    progress : bool
        Report the bootstrap's progress on stderr.
    interval : {"normal", "percentile", "basic", "bc"}, optional
        Construction of the bootstrap intervals (default
        `gatescope.intervals.DEFAULT_INTERVAL`, "normal"; see
        :mod:`gatescope.intervals` and benchmarks/README.md for why).
    diamond : bool
        Also compute the diamond distance to the target by a semidefinite
        program (needs cvxpy, the ``sdp`` extra; skipped with a warning
        without it). Off by default: it adds about 1 s to a two-qubit fit
        (mostly loading cvxpy; the fit itself takes a fraction of a
        second), about 2 s for a trace-decreasing estimate, and 2 s of
        solving from three qubits on. Not bootstrapped. A state has no
        diamond distance: for a state experiment a `GatescopeWarning` says so.
    **options
        Passed to the estimator (``tol``, ``maxiter``, ...).

    Returns
    -------
    Result

    Raises
    ------
    InputError
        For an unknown method, an option the estimator does not take, or a
        bad bootstrap option — before any computation.
    """
    interval = DEFAULT_INTERVAL if interval is None else interval
    check_fit_options(method=method, bootstrap=bootstrap, bootstrap_kind=bootstrap_kind,
                      ci_level=ci_level, interval=interval, seed=seed, workers=workers,
                      options=options)
    started = time.time()
    t0 = time.perf_counter()
    model = build_model(experiment)
    ident = model.warn_if_undetermined()
    point = estimate(model, method, **options)
    details = {}
    target = experiment.target_state if model.kind == "state" else experiment.target
    if diamond and model.kind == "state":
        warnings.warn("diamond distance skipped: it is a figure of processes, and this is a "
                      "state experiment", GatescopeWarning, stacklevel=2)
    values = compute_figures(point.choi, target, diamond=diamond, details=details,
                             kind=model.kind)
    boot = None
    if bootstrap:
        boot, seed = run_bootstrap(model, point, target, samples=bootstrap,
                                   kind=bootstrap_kind, seed=seed, workers=workers,
                                   method=method, options=options, progress=progress,
                                   interval=interval, point_figures=values)
    diag = diagnostics(model, point, ident.rank)
    if point.method in MAXIMUM_LIKELIHOOD:
        # lin and pls do not maximise the likelihood, so their statistics exceed the χ²
        # reference even for a model that fits: the test is for the ML estimate only
        warn_if_poor_fit(diag)
    prov = provenance(seed=seed, command_line=command_line, started=started,
                      wall=time.perf_counter() - t0)
    result = build_result(experiment, point.choi, values, details, method=point.method,
                          converged=point.converged, iterations=point.iterations,
                          log_likelihood=point.log_likelihood, stop_reason=point.stop_reason,
                          seconds=point.seconds, intensities=point.intensities,
                          diagnostics=diag, provenance=prov)
    if boot is not None:
        result.attach_bootstrap(boot, ci_level)
        if "chsh_max" in boot.names:
            values = boot.figures[:, boot.names.index("chsh_max")]
            text = chsh_gap_warning(details, float(np.nanstd(values, ddof=1)))
            if text:
                warnings.warn(text, GatescopeWarning, stacklevel=2)
    return result
