"""The main job as one function: `fit` turns an `Experiment` into a `Result`.

Data flow (one module a step): experiment → model → estimator → figures
(→ bootstrap) → result. The command line calls exactly this function.
"""

from __future__ import annotations

import datetime as _dt
import platform
import socket
import sys
import time
import warnings
from importlib import metadata

import numpy as np
from scipy.special import chdtrc

from .channels import choi_to_chi, choi_to_ptm
from .errors import GatescopeWarning
from .estimators import METHODS, Fit, estimate
from .experiment import Experiment
from .figures import compute_figures
from .model import MeasurementModel
from .results import POOR_FIT_P, Diagnostics, Figure, Result

DEPENDENCIES = ("numpy", "scipy", "numba", "h5py", "tqdm")


def _version(dist: str) -> str:
    try:
        return metadata.version(dist)
    except metadata.PackageNotFoundError:
        return "not installed"


def provenance(*, seed=None, command_line=None, started: float, wall: float) -> dict:
    """Provenance attributes of CONTRACT §5 (all plain strings and numbers)."""
    utc = _dt.timezone.utc
    prov = {
        "gatescope_version": _version("gatescope"),
        "command_line": " ".join(sys.argv) if command_line is None else command_line,
        "seed": "" if seed is None else int(seed),
        "start_utc": _dt.datetime.fromtimestamp(started, utc).isoformat(),
        "end_utc": _dt.datetime.fromtimestamp(started + wall, utc).isoformat(),
        "wall_seconds": float(wall),
        "host": socket.gethostname(),
        "platform": platform.platform(),
        "python": sys.version.split()[0],
    }
    for dep in DEPENDENCIES:
        prov[f"version_{dep}"] = _version(dep)
    return prov


#: |Pearson residual| above which a row is listed as an outlier.
OUTLIER_RESIDUAL = 4.0


def p_value(statistic: float, dof: int) -> float:
    """P(χ²_dof ≥ statistic), NaN without degrees of freedom.

    `scipy.special.chdtrc`, the function behind ``scipy.stats.chi2.sf``
    (importing scipy.stats would add a second to every start of the program).
    """
    if dof <= 0 or np.isnan(statistic):
        return float("nan")
    return float(chdtrc(dof, statistic))


def outlier_rows(pearson: np.ndarray, counts: np.ndarray, expected: np.ndarray,
                 limit: float = OUTLIER_RESIDUAL) -> np.ndarray:
    """Rows with |Pearson residual| > limit, or with counts where the model expects none."""
    bad = np.abs(np.nan_to_num(pearson, nan=0.0)) > limit
    bad |= (expected <= 0) & (counts > 0)
    return np.flatnonzero(bad).astype(np.int64)


def diagnostics(model: MeasurementModel, fit: Fit, n_determined: int) -> Diagnostics:
    """Expected counts, Pearson and deviance residuals, χ² and its degrees of freedom.

    Also the p-values of the Pearson χ² and of the deviance against the χ²
    distribution with ``dof`` degrees of freedom (a large-count
    approximation: rows with a handful of counts make it rough) and the
    rows whose |Pearson residual| exceeds `OUTLIER_RESIDUAL` (with a model
    that fits, about one row in ten thousand does).
    """
    nu = model.expected_counts(fit.choi, fit.intensities)
    n = model.counts
    ok = nu > 0
    safe = np.where(ok, nu, 1.0)
    pearson = np.where(ok, (n - nu) / np.sqrt(safe), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(n > 0, n * np.log(np.where(n > 0, n, 1.0) / safe), 0.0) - (n - nu)
    dev = np.where(ok, np.sign(n - nu) * np.sqrt(np.maximum(2.0 * term, 0.0)), np.nan)
    fitted_intensities = 0 if model.fixed_intensities is not None else model.n_groups
    dof = int(model.n_rows - n_determined - fitted_intensities)
    chi2, deviance = float(np.sum(pearson**2)), float(np.sum(dev**2))
    return Diagnostics(nu, pearson, dev, chi2, deviance, dof, p_value(chi2, dof),
                       p_value(deviance, dof), outlier_rows(pearson, n, nu))


def warn_if_poor_fit(diag: Diagnostics) -> None:
    """A `GatescopeWarning` when both goodness-of-fit p-values are below `POOR_FIT_P`.

    `fit` calls it for maximum-likelihood estimates only.
    """
    if diag.poor_fit:
        warnings.warn(
            f"the model does not describe the data (Pearson chi2 {diag.chi2:.1f}, deviance "
            f"{diag.deviance:.1f} on {diag.dof} degrees of freedom, p < {POOR_FIT_P:g}; "
            f"{len(diag.outlier_rows)} row(s) with |residual| > {OUTLIER_RESIDUAL:g}): check for "
            "miscalibrated optics, drift of the source, or a wrong background", GatescopeWarning,
            stacklevel=3)


def _counts_columns(exp: Experiment) -> dict:
    cols = {"prep": np.array(exp.prep, dtype=object), "meas": np.array(exp.meas, dtype=object),
            "counts": np.asarray(exp.counts, dtype=np.int64)}
    for name in ("seconds", "background", "efficiency"):
        if name in exp.columns:
            cols[name] = np.asarray(getattr(exp, name), dtype=np.float64)
    if exp.group is not None:
        cols["group"] = np.array(exp.group, dtype=object)
    cols["prep_index"] = np.asarray(exp.prep_index, dtype=np.int64)
    cols["meas_index"] = np.asarray(exp.meas_index, dtype=np.int64)
    return cols


def build_result(exp: Experiment, model: MeasurementModel, fit: Fit, *, n_determined: int,
                 prov: dict, diamond: bool = False, computed: tuple | None = None) -> Result:
    """Assemble a `Result` (figures, diagnostics, conversions) from a fit.

    ``diamond`` adds the diamond distance to the target (needs cvxpy).
    ``computed`` is ``(values, details)`` of `compute_figures` for this fit
    when the caller already has them.
    """
    if computed is None:
        details = {}
        computed = (compute_figures(fit.choi, exp.target, diamond=diamond, details=details),
                    details)
    values, details = computed
    figures = {k: Figure(v) for k, v in values.items()}
    return Result(
        choi=fit.choi, chi=choi_to_chi(fit.choi), ptm=choi_to_ptm(fit.choi), figures=figures,
        method=fit.method, converged=fit.converged, iterations=fit.iterations,
        log_likelihood=fit.log_likelihood, stop_reason=fit.stop_reason, seconds=fit.seconds,
        intensities=np.asarray(fit.intensities, dtype=float),
        diagnostics=diagnostics(model, fit, n_determined), provenance=prov,
        experiment_toml=exp.toml_text, toml_sha256=exp.toml_sha256, csv_sha256=exp.csv_sha256,
        counts_columns=_counts_columns(exp), prep_states=np.asarray(exp.prep_states),
        meas_effects=np.asarray(exp.meas_effects), target=exp.target, target_name=exp.target_name,
        figure_details=details,
    )


def fit(experiment: Experiment, method: str = "mle", *, bootstrap: int = 0,
        bootstrap_kind: str = "parametric", ci_level: float = 0.95, seed: int | None = None,
        workers: int | None = None, progress: bool = False, command_line: str | None = None,
        diamond: bool = False, interval: str | None = None, **options) -> Result:
    """Reconstruct the process of an experiment and compute its figures of merit.

    Parameters
    ----------
    experiment : Experiment
        From :func:`gatescope.read_experiment`.
    method : {"mle", "pls", "lin"}
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
        Show a progress bar on stderr (only when it is a terminal).
    interval : {"normal", "percentile", "basic", "bc"}, optional
        Construction of the bootstrap intervals (default
        `gatescope.bootstrap.DEFAULT_INTERVAL`, "normal"; see
        :mod:`gatescope.bootstrap` and benchmarks/README.md for why).
    diamond : bool
        Also compute the diamond distance to the target by a semidefinite
        program (needs cvxpy, the ``sdp`` extra; skipped with a warning
        without it). Off by default: it adds about 1 s to a two-qubit fit
        (mostly loading cvxpy; the fit itself takes a fraction of a
        second), about 2 s for a trace-decreasing estimate, and 2 s of
        solving from three qubits on. Not bootstrapped.
    **options
        Passed to the estimator (``tol``, ``maxiter``, ...).

    Returns
    -------
    Result
    """
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; known: {', '.join(METHODS)}")
    if bootstrap:
        # check the bootstrap's options before the fit, not after all its resamples
        from .bootstrap import DEFAULT_INTERVAL, check_options
        interval = DEFAULT_INTERVAL if interval is None else interval
        check_options(samples=bootstrap, kind=bootstrap_kind, ci_level=ci_level,
                      workers=workers, interval=interval)
    started = time.time()
    t0 = time.perf_counter()
    model = MeasurementModel(experiment)
    ident = model.warn_if_undetermined()
    point = estimate(model, method, **options)
    details = {}
    values = compute_figures(point.choi, experiment.target, diamond=diamond, details=details)
    boot = None
    if bootstrap:
        from .bootstrap import run_bootstrap
        boot, seed = run_bootstrap(model, point, experiment.target, samples=bootstrap,
                                   kind=bootstrap_kind, seed=seed, workers=workers,
                                   method=method, options=options, progress=progress,
                                   interval=interval, point_figures=values)
    prov = provenance(seed=seed, command_line=command_line, started=started,
                      wall=time.perf_counter() - t0)
    result = build_result(experiment, model, point, n_determined=ident.rank, prov=prov,
                          diamond=diamond, computed=(values, details))
    if point.method == "mle":
        # lin and pls do not maximise the likelihood, so their statistics exceed the χ²
        # reference even for a model that fits: the test is for the ML estimate only
        warn_if_poor_fit(result.diagnostics)
    if boot is not None:
        from .bootstrap import attach_intervals
        attach_intervals(result, boot, ci_level)
    return result
