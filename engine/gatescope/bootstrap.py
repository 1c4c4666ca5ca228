"""Bootstrap error bars: Poisson resampling of the rows, refits, intervals.

Each resample draws new counts for every row, independently from a Poisson
law, and is refitted with the estimator of the point fit:

* ``parametric`` — around the point fit's expected counts
  ν_k = λ_g·seconds·efficiency·p_k(Ĵ) + background (README, "Input");
* ``nonparametric`` — around the observed counts n_k (the Poisson
  bootstrap of count data; rows with no counts stay at zero).

Every refit is warm-started from the point estimate (``start=``; the
closed-form ``lin`` and ``pls`` ignore it). The figures of merit of every
resample are kept (``Bootstrap.figures``, one row per resample); the Choi,
chi and Pauli-transfer matrices of a process, or the density matrix of a
state, are summarised by their element-wise standard deviations.

Reproducibility. Resample i draws its counts from
``numpy.random.default_rng(SeedSequence(seed).spawn(B)[i])``, whatever the
process that runs it, so the same seed gives bit-identical figures for any
number of workers. Without a seed one is drawn from the operating system's
entropy (63 bits) and returned, so it can be recorded.

Parallel runs go through `gatescope.parallel.Runner` (one worker process
per core by default, each single-threaded, and the same numbers for any
number of workers): every worker receives the model once, then chunks of
resample seeds.

Failures. A refit that reports ``converged = False`` is a failure; it is
counted (``Bootstrap.failures``, and per resample in
``Bootstrap.converged``) and a `GatescopeWarning` is raised when more than
1% of the resamples fail. Its estimate is *kept* in the intervals: ``pls``
and ``mle`` return an exactly CPTP matrix (a density matrix, for a state)
at every iteration, so a non-converged refit is still physical, only not
the exact optimum, and dropping it would bias the spread towards the
resamples that are easy to fit. A refit that raises a numerical error has no estimate:
its row of figures is NaN, it is counted in ``Bootstrap.errors`` (and as a
failure) and necessarily left out of the intervals and standard deviations.

The interval constructions are those of `gatescope.intervals` (the
default, ``normal``, and why).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from .channels import choi_to_chi, choi_to_ptm
from .errors import InputError, NumericalError, warn
from .estimators import MAXIMUM_LIKELIHOOD, Fit, estimate
from .estimators import check_options as check_estimator_options
from .intervals import DEFAULT_INTERVAL, INTERVALS
from .likelihood import deviance
from .merit import compute_figures
from .model import MeasurementModel, StateModel
from .options import choice, seed as check_seed, whole, workers as check_workers
from .parallel import Runner
from .progress import Progress

KINDS = ("parametric", "nonparametric")
#: More failed refits than this fraction of the resamples gives a warning.
FAILURE_WARNING_FRACTION = 0.01
#: A bootstrap spread below this is rounding (a figure fixed by the constraints, such
#: as the trace of a trace-preserving estimate): no bias warning for it.
SPREAD_FLOOR = 1e-12


@dataclass
class Bootstrap:
    """Resampled figures and the spread of the estimate (`gatescope.bootstrap`).

    Attributes
    ----------
    figures : (B, K) float array, one row per resample, one column per name
        (NaN in a row whose refit raised a numerical error)
    names : the K figure names
    kind : "parametric" or "nonparametric"
    seed : the seed of ``numpy.random.SeedSequence`` the resamples were spawned from
    samples : B
    failures : refits that did not converge (including those that raised)
    interval : construction of the ``ci`` of the figures (`gatescope.bootstrap.INTERVALS`)
    converged : (B,) bool, per resample
    errors : refits that raised a numerical error (left out of intervals and stds)
    choi_std, chi_std : complex arrays, element-wise standard deviations over
        the resamples: std of the real parts + 1j × std of the imaginary parts
    ptm_std : float array, element-wise standard deviation of the PTM
    rho_std : complex array, for a state (whose choi_std, chi_std and ptm_std are
        None): the element-wise standard deviation of the density matrix
    method : estimator of the refits
    workers : processes used (the figures do not depend on it)
    seconds : wall time of the bootstrap
    deviances : (B,) float array or None, for a parametric bootstrap of a
        maximum-likelihood fit: the deviance of every resample against its own
        refit (NaN where the refit failed), the reference distribution of the
        goodness-of-fit test (`fit_p_value`); None otherwise
    """

    figures: np.ndarray
    names: tuple[str, ...]
    kind: str
    seed: int
    samples: int
    failures: int = 0
    interval: str = "percentile"
    converged: np.ndarray | None = None
    errors: int = 0
    choi_std: np.ndarray | None = None
    chi_std: np.ndarray | None = None
    ptm_std: np.ndarray | None = None
    method: str = ""
    workers: int = 1
    seconds: float = 0.0
    rho_std: np.ndarray | None = None
    deviances: np.ndarray | None = None


# --------------------------------------------------------------------------
# Resampling
# --------------------------------------------------------------------------

def resample_means(model: MeasurementModel | StateModel, point: Fit, kind: str) -> np.ndarray:
    """Poisson means of every row for a bootstrap of ``kind``.

    Parametric: the point fit's expected counts (clipped at 0, which only
    matters for an unphysical ``lin`` estimate); nonparametric: the
    observed counts.
    """
    choice(kind, KINDS, "bootstrap_kind", "bootstrap kind")
    if kind == "parametric":
        nu = model.expected_counts(point.choi, np.asarray(point.intensities, dtype=float))
        return np.maximum(np.asarray(nu, dtype=float), 0.0)
    return np.asarray(model.counts, dtype=float).copy()


def resample_counts(means: np.ndarray, seed_sequence: np.random.SeedSequence) -> np.ndarray:
    """One resample: independent Poisson counts of mean ``means`` (as float)."""
    rng = np.random.default_rng(seed_sequence)
    return rng.poisson(means).astype(float)


# --------------------------------------------------------------------------
# Refits (the same code in the calling process and in the workers)
# --------------------------------------------------------------------------

@dataclass
class Refitter:
    """Everything a resample needs, sent once to every worker."""

    model: MeasurementModel | StateModel
    means: np.ndarray
    start: np.ndarray
    target: np.ndarray | None
    method: str
    options: dict
    names: tuple
    test_fit: bool = False

    def refit(self, seed_sequence: np.random.SeedSequence) -> dict:
        """Draw one resample and refit it: its figures, matrices and convergence.

        Only a failure that the estimator signals as numerical (`NumericalError`,
        `numpy.linalg.LinAlgError`) is recorded as an error; anything else is a
        bug and propagates.
        """
        counts = resample_counts(self.means, seed_sequence)
        try:
            fit = estimate(self.model, self.method, counts=counts, start=self.start,
                           **self.options)
        except (NumericalError, np.linalg.LinAlgError) as exc:
            return {"ok": False, "error": f"{type(exc).__name__}: {exc}"}
        if not np.all(np.isfinite(fit.choi)):
            return {"ok": False, "error": "the refit's estimate is not finite"}
        figs = compute_figures(fit.choi, self.target, kind=self.model.kind)
        out = {"ok": True, "converged": bool(fit.converged),
               "figures": np.array([figs[name] for name in self.names], dtype=float)}
        if self.test_fit:
            nu = self.model.expected_counts(fit.choi, np.asarray(fit.intensities, dtype=float))
            out["deviance"] = deviance(counts, nu) if np.all(nu > 0) else np.nan
        return out | _matrices(self.model.kind, fit.choi)


def _matrices(kind: str, estimate: np.ndarray) -> dict:
    """The matrices whose element-wise spread the bootstrap keeps: Choi, chi and Pauli
    transfer matrix of a process, the density matrix of a state."""
    if kind == "state":
        return {"rho": estimate}
    return {"choi": estimate, "chi": choi_to_chi(estimate), "ptm": choi_to_ptm(estimate)}


def _refit_task(refitter: Refitter, seed_sequence) -> dict:
    return refitter.refit(seed_sequence)


class _Accumulator:
    """Element-wise standard deviations, summed in resample order.

    Resamples may finish in any order; they are folded in by index so that
    the sums (and so the standard deviations) do not depend on the number of
    workers. The sums are shifted by the point estimate for accuracy.
    """

    def __init__(self, shifts: dict):
        self.shifts = shifts
        self.n = 0
        self.s1 = {k: np.zeros_like(v) for k, v in shifts.items()}
        self.s2 = {k: np.zeros(v.shape, dtype=complex) for k, v in shifts.items()}
        self.pending = {}
        self.next_index = 0

    def add(self, index: int, out: dict) -> None:
        """Fold in resample ``index`` (once every earlier one has been folded in)."""
        self.pending[index] = out
        while self.next_index in self.pending:
            done = self.pending.pop(self.next_index)
            self.next_index += 1
            if not done["ok"]:
                continue
            self.n += 1
            for key, shift in self.shifts.items():
                x = done[key] - shift
                self.s1[key] += x
                self.s2[key] += x.real ** 2 + 1j * x.imag ** 2

    def std(self, key: str) -> np.ndarray:
        """Std of the real parts (+ 1j × std of the imaginary parts for complex arrays)."""
        if self.n < 2:
            nan = np.full(self.shifts[key].shape, np.nan)
            return nan if self.shifts[key].dtype.kind == "f" else nan + 1j * nan
        s1, s2, n = self.s1[key], self.s2[key], self.n
        var_re = np.maximum(s2.real - s1.real ** 2 / n, 0.0) / (n - 1)
        if self.shifts[key].dtype.kind == "f":
            return np.sqrt(var_re)
        var_im = np.maximum(s2.imag - s1.imag ** 2 / n, 0.0) / (n - 1)
        return np.sqrt(var_re) + 1j * np.sqrt(var_im)


# --------------------------------------------------------------------------
# The bootstrap
# --------------------------------------------------------------------------

def draw_seed() -> int:
    """A fresh seed from the operating system's entropy, reduced to 63 bits."""
    return int(np.random.SeedSequence().entropy % (2 ** 63))


def failure_message(failures: int, errors: int, samples: int) -> str | None:
    """The warning text when more than 1% of the resamples failed, else None."""
    if failures <= FAILURE_WARNING_FRACTION * samples:
        return None
    text = (f"{failures} of {samples} bootstrap refits ({100 * failures / samples:.1f}%) "
            f"did not converge")
    if errors:
        text += (f"; {errors} of them raised a numerical error and are left out of the "
                 f"intervals")
    return text + ("; non-converged estimates that exist are kept in the intervals "
                   "(see Bootstrap.converged)")


def biased_figures(names, figures: np.ndarray, point_values) -> list[tuple[str, float, float]]:
    """(name, bootstrap bias, spread) of every figure whose bias exceeds its spread.

    Bias is mean(θ*) − θ̂ and spread the standard deviation s* over the
    resamples that produced an estimate; spreads at rounding level (figures
    fixed by the constraints, such as the trace) are ignored.
    """
    out = []
    for k, name in enumerate(names):
        v = figures[:, k]
        v = v[np.isfinite(v)]
        if v.size < 2:
            continue
        spread = float(np.std(v, ddof=1))
        bias = float(np.mean(v) - point_values[k])
        if spread > SPREAD_FLOOR and abs(bias) > spread:
            out.append((name, bias, spread))
    return out


def check_options(*, samples, kind: str = "parametric", workers=None,
                  interval: str = DEFAULT_INTERVAL, seed=None, names=None) -> tuple[int, int]:
    """Validate the bootstrap's options (InputError naming the option); returns
    (samples, workers) with the default worker count filled in.

    ``names`` maps an option to the name the caller knows it by (the command
    line passes its flags); by default the Python argument names are used.
    """
    names = names or {}
    samples = whole(samples, names.get("bootstrap", "bootstrap"), 2)
    choice(kind, KINDS, names.get("bootstrap_kind", "bootstrap_kind"), "bootstrap kind")
    choice(interval, INTERVALS, names.get("interval", "interval"), "interval")
    check_seed(seed, names.get("seed", "seed"))
    workers = check_workers(workers, names.get("workers", "workers"))
    return samples, workers


def run_bootstrap(model: MeasurementModel | StateModel, point: Fit, target, *, samples: int,
                  kind: str = "parametric", seed: int | None = None, workers: int | None = None,
                  method: str | None = None, options: dict | None = None,
                  progress: bool = False, interval: str = DEFAULT_INTERVAL,
                  point_figures: dict | None = None):
    """Resample the rows, refit every resample, and summarise the spread.

    Parameters
    ----------
    model : MeasurementModel or StateModel
    point : Fit
        The point estimate (centre of the parametric resampling, warm start).
    target : (d, d) array or None
        Target unitary of the target figures (``compute_figures``); for a state
        model the target state (a ket or a density matrix).
    samples : int
        Number of resamples B (at least 2).
    kind : {"parametric", "nonparametric"}
    seed : int, optional
        Non-negative seed of ``numpy.random.SeedSequence``; drawn when None.
    workers : int, optional
        Processes (default ``os.cpu_count()``); 1 runs in the calling process.
    method : str, optional
        Estimator of the refits (default: the point fit's).
    options : dict, optional
        Estimator options (``tol``, ``maxiter``, ...), as for the point fit.
    progress : bool
        Report progress on stderr (`gatescope.progress.Progress`).
    interval : {"normal", "percentile", "basic", "bc"}
        The construction the intervals will use (stored in the result).
    point_figures : dict, optional
        ``compute_figures(point.choi, target, kind=model.kind)`` when the caller has it; every
        figure in it but the diamond distance (not bootstrapped) is resampled.

    Returns
    -------
    (Bootstrap, int)
        The resampled figures and summaries, and the seed used.
    """
    samples, workers = check_options(samples=samples, kind=kind, workers=workers,
                                     interval=interval, seed=seed)
    method = point.method if method is None else method
    options = dict(options or {})
    for reserved in ("counts", "start"):
        if reserved in options:
            raise InputError("is set by the bootstrap for every resample", key=reserved)
    check_estimator_options(method, options)
    seed = draw_seed() if seed is None else int(seed)

    t0 = time.perf_counter()
    if point_figures is None:
        point_figures = compute_figures(point.choi, target, kind=model.kind)
    names = tuple(name for name in point_figures if name != "diamond_distance")
    point_choi = np.asarray(point.choi, dtype=complex)
    refitter = Refitter(model=model, means=resample_means(model, point, kind), start=point_choi,
                        target=target, method=method, options=options, names=names,
                        test_fit=kind == "parametric" and method in MAXIMUM_LIKELIHOOD)
    seeds = np.random.SeedSequence(seed).spawn(samples)

    figures = np.full((samples, len(names)), np.nan)
    converged = np.zeros(samples, dtype=bool)
    deviances = np.full(samples, np.nan) if refitter.test_fit else None
    errors: list[tuple[int, str]] = []
    acc = _Accumulator(_matrices(model.kind, point_choi))
    with Runner(workers, shared=refitter) as runner, \
            Progress(samples, "bootstrap", "fit", enabled=progress) as bar:
        for index, out in runner.map(_refit_task, seeds):
            if out["ok"]:
                figures[index] = out["figures"]
                converged[index] = out["converged"]
                if deviances is not None:
                    deviances[index] = out["deviance"]
            else:
                errors.append((index, out["error"]))
            acc.add(index, out)
            bar.update(1)
        used_workers = runner.workers

    errors.sort()
    n_errors = len(errors)
    failures = int(np.count_nonzero(~converged))
    message = failure_message(failures, n_errors, samples)
    if message:
        if errors:
            message += f" (first error: resample {errors[0][0]}: {errors[0][1]})"
        warn("refits", message, stacklevel=2)
    # Near the boundary the refits of an mle sit below it by more than their spread even
    # when the estimate itself is nearly unbiased (the resampled world is purer than the
    # real one); the normal interval does not use that bias and keeps its coverage
    # (benchmarks/README.md, "Bootstrap coverage"), so the warning would mislead there.
    biased = ([] if method in MAXIMUM_LIKELIHOOD and interval == "normal"
              else biased_figures(names, figures, [point_figures[n] for n in names]))
    if biased:
        listed = "; ".join(f"{n} (bias {b:+.2g}, spread {sp:.2g})" for n, b, sp in biased)
        advice = (" the mle estimator is much less biased near pure processes"
                  if method not in MAXIMUM_LIKELIHOOD
                  else " more counts reduce it")
        warn("bias", f"the bootstrap shows a bias larger than the spread for {listed}: the "
                     f"estimate sits at the boundary of the physical set or the estimator is "
                     f"strongly biased here, and the intervals of these figures may not reach "
                     f"their level;{advice}", stacklevel=2)
    spread = ({"rho_std": acc.std("rho")} if model.kind == "state" else
              {"choi_std": acc.std("choi"), "chi_std": acc.std("chi"),
               "ptm_std": acc.std("ptm").real})
    boot = Bootstrap(figures=figures, names=names, kind=kind, seed=seed, samples=samples,
                     failures=failures, interval=interval, converged=converged, errors=n_errors,
                     method=method, workers=used_workers, seconds=time.perf_counter() - t0,
                     deviances=deviances, **spread)
    return boot, seed


def fit_p_value(observed: float, deviances: np.ndarray | None) -> tuple[float, int]:
    """The parametric-bootstrap p-value of the goodness of fit and the resamples it uses.

    p = (1 + #{D* ≥ D}) / (B + 1) over the B resamples with a finite deviance D*
    (each resample drawn from the fitted model and refitted like the data), D the
    observed deviance: the Monte Carlo test of Davison & Hinkley, *Bootstrap Methods
    and their Application* (1997), §4.2. Unlike the χ² reference it needs no count of
    parameters, so it stays calibrated where the estimate lies on the boundary of the
    physical set (a rank-deficient Choi matrix or density matrix), where the χ²
    p-values are too small. (NaN, 0) without deviances.
    """
    if deviances is None or not np.isfinite(observed):
        return float("nan"), 0
    d = np.asarray(deviances, dtype=float)
    d = d[np.isfinite(d)]
    if d.size == 0:
        return float("nan"), 0
    return float((1 + np.count_nonzero(d >= observed)) / (d.size + 1)), int(d.size)


__all__ = ["KINDS", "Bootstrap", "fit_p_value", "Refitter", "check_options", "run_bootstrap", "biased_figures",
           "resample_means", "resample_counts", "draw_seed", "failure_message"]
