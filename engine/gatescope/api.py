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
from importlib import metadata

import numpy as np

from .channels import choi_to_chi, choi_to_ptm
from .estimators import METHODS, Fit, estimate
from .experiment import Experiment
from .figures import compute_figures
from .model import MeasurementModel
from .results import Diagnostics, Figure, Result

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


def diagnostics(model: MeasurementModel, fit: Fit, n_determined: int) -> Diagnostics:
    """Expected counts, Pearson and deviance residuals, χ² and its degrees of freedom."""
    nu = model.expected_counts(fit.choi, fit.intensities)
    n = model.counts
    ok = nu > 0
    safe = np.where(ok, nu, 1.0)
    pearson = np.where(ok, (n - nu) / np.sqrt(safe), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(n > 0, n * np.log(np.where(n > 0, n, 1.0) / safe), 0.0) - (n - nu)
    dev = np.where(ok, np.sign(n - nu) * np.sqrt(np.maximum(2.0 * term, 0.0)), np.nan)
    fitted_intensities = 0 if model.fixed_intensities is not None else model.n_groups
    dof = model.n_rows - n_determined - fitted_intensities
    return Diagnostics(nu, pearson, dev, float(np.sum(pearson**2)), float(np.sum(dev**2)), int(dof))


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
                 prov: dict) -> Result:
    """Assemble a `Result` (figures, diagnostics, conversions) from a fit."""
    figures = {k: Figure(v) for k, v in compute_figures(fit.choi, exp.target).items()}
    return Result(
        choi=fit.choi, chi=choi_to_chi(fit.choi), ptm=choi_to_ptm(fit.choi), figures=figures,
        method=fit.method, converged=fit.converged, iterations=fit.iterations,
        log_likelihood=fit.log_likelihood, stop_reason=fit.stop_reason, seconds=fit.seconds,
        intensities=np.asarray(fit.intensities, dtype=float),
        diagnostics=diagnostics(model, fit, n_determined), provenance=prov,
        experiment_toml=exp.toml_text, toml_sha256=exp.toml_sha256, csv_sha256=exp.csv_sha256,
        counts_columns=_counts_columns(exp), prep_states=np.asarray(exp.prep_states),
        meas_effects=np.asarray(exp.meas_effects), target=exp.target, target_name=exp.target_name,
    )


def fit(experiment: Experiment, method: str = "mle", *, bootstrap: int = 0,
        bootstrap_kind: str = "parametric", ci_level: float = 0.95, seed: int | None = None,
        workers: int | None = None, progress: bool = False, command_line: str | None = None,
        **options) -> Result:
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
    **options
        Passed to the estimator (``tol``, ``maxiter``, ...).

    Returns
    -------
    Result
    """
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; known: {', '.join(METHODS)}")
    started = time.time()
    t0 = time.perf_counter()
    model = MeasurementModel(experiment)
    ident = model.warn_if_undetermined()
    point = estimate(model, method, **options)
    boot = None
    if bootstrap:
        from .bootstrap import run_bootstrap
        boot, seed = run_bootstrap(model, point, experiment.target, samples=bootstrap,
                                   kind=bootstrap_kind, seed=seed, workers=workers,
                                   method=method, options=options, progress=progress)
    prov = provenance(seed=seed, command_line=command_line, started=started,
                      wall=time.perf_counter() - t0)
    result = build_result(experiment, model, point, n_determined=ident.rank, prov=prov)
    if boot is not None:
        from .bootstrap import attach_intervals
        attach_intervals(result, boot, ci_level)
    return result
