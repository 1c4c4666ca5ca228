"""Bootstrap error bars: Poisson resampling of the rows, refits, intervals.

Each resample draws new counts for every row, independently from a Poisson
law, and is refitted with the estimator of the point fit:

* ``parametric`` — around the point fit's expected counts
  ν_k = λ_g·seconds·efficiency·p_k(Ĵ) + background (CONTRACT §3);
* ``nonparametric`` — around the observed counts n_k (the Poisson
  bootstrap of count data; rows with no counts stay at zero).

Every refit is warm-started from the point estimate (``start=``; the
closed-form ``lin`` and ``pls`` ignore it). The figures of merit of every
resample are kept (``Bootstrap.figures``, one row per resample); the Choi,
chi and Pauli-transfer matrices are summarised by their element-wise
standard deviations.

Reproducibility. Resample i draws its counts from
``numpy.random.default_rng(SeedSequence(seed).spawn(B)[i])``, whatever the
process that runs it, so the same seed gives bit-identical figures for any
number of workers. Without a seed one is drawn from the operating system's
entropy (63 bits) and returned, so it can be recorded.

Parallel runs use a process pool (``concurrent.futures``). Its workers are
forked from the calling process when that is safe (`_fork_is_safe`: Linux,
no other Python thread, numba's threading layer not started; OpenBLAS
handles a fork itself), which starts them in about 0.1 s; otherwise they
come from the ``forkserver`` (or, where there is none, ``spawn``), which
imports the package and loads the numba cache in every worker, 1–4 s. Each
worker receives the model once (pool initializer), then chunks of resample
indices (`chunk_sizes`): about eight chunks per worker, so that the
per-task overhead stays small, then smaller and smaller ones, so that the
workers finish together. Workers run single-threaded
(``OMP_NUM_THREADS``, ``OPENBLAS_NUM_THREADS``, ``MKL_NUM_THREADS``,
``NUMBA_NUM_THREADS`` set to 1 before they start, ``numba.set_num_threads(1)``
and every loaded OpenBLAS told to use one thread) so W workers use W cores.
With one worker, or inside a daemonic process that may not start children,
the resamples run in the calling process, with its own thread settings.

Failures. A refit that reports ``converged = False`` is a failure; it is
counted (``Bootstrap.failures``, and per resample in
``Bootstrap.converged``) and a `GatescopeWarning` is raised when more than
1% of the resamples fail. Its estimate is *kept* in the intervals: ``pls``
and ``mle`` return an exactly CPTP matrix at every iteration, so a
non-converged refit is still a physical process, only not the exact
optimum, and dropping it would bias the spread towards the resamples that
are easy to fit. A refit that raises a numerical error has no estimate:
its row of figures is NaN, it is counted in ``Bootstrap.errors`` (and as a
failure) and necessarily left out of the intervals and standard deviations.

Intervals (``interval=``), at level 1 − α, from the bootstrap values θ*
and the point estimate θ̂, with Q the empirical quantile of θ*:

* ``percentile`` — [Q(α/2), Q(1 − α/2)] (Efron, Ann. Stat. 7, 1 (1979);
  Efron & Tibshirani, *An Introduction to the Bootstrap*, 1993, ch. 13);
* ``basic`` — [2θ̂ − Q(1 − α/2), 2θ̂ − Q(α/2)] (Davison & Hinkley,
  *Bootstrap Methods and their Application*, 1997, §5.2);
* ``bc`` — bias-corrected percentile: z₀ = Φ⁻¹(#{θ* < θ̂}/B) and the
  interval [Q(Φ(2z₀ + z_{α/2})), Q(Φ(2z₀ + z_{1−α/2}))] (Efron, *The
  Jackknife, the Bootstrap and Other Resampling Plans*, SIAM 1982, ch. 10;
  the BCa interval of Efron, JASA 82, 171 (1987) with zero acceleration);
* ``normal`` — θ̂ ± z_{1−α/2}·s*, s* the standard deviation of θ* (the
  standard normal interval, Efron & Tibshirani 1993, ch. 13): it uses the
  bootstrap for the spread only, not for the shape or the bias.

Every interval is then intersected with the range the true figure can take
(`parameter_range`: [0, 1] for a fidelity), which cannot lower its coverage.

The default is ``normal``, chosen on the coverage measured in
benchmarks/README.md ("Bootstrap coverage"): for 2-qubit gates, full rank
and near unitary, at two count levels, the bootstrap estimates the *spread*
of the process fidelity well (the mean s* matches the actual spread of the
estimates over repetitions), but not its *bias* or shape. Near the boundary
of the physical set the estimate lies closer to the boundary than the truth,
so refits around it exaggerate the bias of ``mle`` (bootstrap bias a few
tenths of s* against a true bias near zero) and understate the large bias of
``pls`` near a pure process. Intervals that use the bootstrap's bias — the
percentile interval (which carries it twice), ``basic`` and ``bc`` — then
cover less than nominal with ``mle``; ``normal`` came closest to 95% for
``mle`` and for ``pls`` at full rank. No construction rescues ``pls`` near
a pure process (there its bias is several times its spread; ``basic``
covers best, still well below 95%, and ``bc`` collapses onto the top
resamples, a falsely narrow interval, because z₀ saturates); for that case
`run_bootstrap` raises a `GatescopeWarning` whenever the bootstrap bias of
a figure exceeds its spread — except for ``mle`` with the ``normal``
interval: near the boundary its refits can sit more than a spread below the
estimate while the estimate itself is nearly unbiased (a CZ bench with
backgrounds, F = 0.9610: estimate 0.9607, mean of the refits 0.9582, spread
0.0015), and the normal interval, which ignores that bias, keeps its
coverage.
"""

from __future__ import annotations

import math
import multiprocessing as mp
import numbers
import os
import sys
import threading
import time
import warnings
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from contextlib import contextmanager

import numpy as np
from scipy.special import ndtr, ndtri
from tqdm import tqdm

from .channels import choi_to_chi, choi_to_ptm
from .errors import GatescopeWarning, InputError
from .estimators import METHODS, Fit, estimate
from .figures import compute_figures
from .model import MeasurementModel
from .results import Bootstrap

KINDS = ("parametric", "nonparametric")
INTERVALS = ("percentile", "basic", "bc", "normal")
DEFAULT_INTERVAL = "normal"
FAILURE_WARNING_FRACTION = 0.01
CHUNKS_PER_WORKER = 8
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                    "NUMBA_NUM_THREADS")


# --------------------------------------------------------------------------
# Resampling
# --------------------------------------------------------------------------

def resample_means(model: MeasurementModel, point: Fit, kind: str) -> np.ndarray:
    """Poisson means of every row for a bootstrap of ``kind``.

    Parametric: the point fit's expected counts (clipped at 0, which only
    matters for an unphysical ``lin`` estimate); nonparametric: the
    observed counts.
    """
    if kind == "parametric":
        nu = model.expected_counts(point.choi, np.asarray(point.intensities, dtype=float))
        return np.maximum(np.asarray(nu, dtype=float), 0.0)
    if kind == "nonparametric":
        return np.asarray(model.counts, dtype=float).copy()
    raise InputError(f"unknown kind {kind!r}; known: {', '.join(KINDS)}", key="bootstrap_kind")


def resample_counts(means: np.ndarray, seed_sequence: np.random.SeedSequence) -> np.ndarray:
    """One resample: independent Poisson counts of mean ``means`` (as float)."""
    rng = np.random.default_rng(seed_sequence)
    return rng.poisson(means).astype(float)


# --------------------------------------------------------------------------
# Intervals
# --------------------------------------------------------------------------

def parameter_range(name: str, dim: int):
    """The values the true figure ``name`` can take for a CPTP process on ``dim`` dimensions.

    ``None`` for a figure without a known range. Fidelities, the trace,
    the unitarity and the concurrence lie in [0, 1]; the purity Tr J²/d² in
    [1/d², 1]; the smallest eigenvalue of a Choi matrix (trace d, d²
    eigenvalues) in [0, 1/d]; a diamond distance in [0, 2].
    """
    unit = (0.0, 1.0)
    ranges = {"process_fidelity": unit, "average_gate_fidelity": unit, "trace": unit,
              "purity": (1.0 / dim**2, 1.0), "min_eigenvalue": (0.0, 1.0 / dim),
              "unitarity": unit, "nearest_unitary_fidelity": unit,
              "process_fidelity_local_phases": unit, "truth_table_fidelity": unit,
              "concurrence": unit, "diamond_distance": (0.0, 2.0)}
    return ranges.get(name)


def interval(values, point: float, level: float = 0.95, method: str = DEFAULT_INTERVAL,
             bounds=None):
    """Bootstrap confidence interval (low, high) of one figure.

    Parameters
    ----------
    values : array
        The figure in every resample; NaN entries (refits that raised) are ignored.
    point : float
        The figure of the point estimate θ̂.
    level : float
        Confidence level 1 − α, a fraction in (0, 1).
    method : {"percentile", "basic", "bc", "normal"}
        See the module docstring; quantiles are numpy's default (linear
        interpolation between order statistics).
    bounds : (float, float), optional
        The range the true value can take (`parameter_range`); the interval
        is intersected with it. An interval wholly outside collapses onto
        the nearer bound.

    Returns
    -------
    (float, float), or (nan, nan) when no value is finite.
    """
    _check_level(level)
    if method not in INTERVALS:
        raise InputError(f"unknown interval {method!r}; known: {', '.join(INTERVALS)}",
                         key="interval")
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return (math.nan, math.nan)
    alpha = 1.0 - level
    if method == "percentile":
        lo, hi = np.quantile(v, [alpha / 2, 1 - alpha / 2])
    elif method == "basic":
        qlo, qhi = np.quantile(v, [alpha / 2, 1 - alpha / 2])
        lo, hi = 2.0 * point - qhi, 2.0 * point - qlo
    elif method == "normal":
        half = ndtri(1 - alpha / 2) * (np.std(v, ddof=1) if v.size > 1 else math.nan)
        lo, hi = point - half, point + half
    else:
        below = np.count_nonzero(v < point) + 0.5 * np.count_nonzero(v == point)
        # keep z0 finite when θ̂ lies outside the bootstrap values: clip at half a sample
        frac = min(max(below / v.size, 0.5 / v.size), 1.0 - 0.5 / v.size)
        z0 = ndtri(frac)
        a1 = ndtr(2.0 * z0 + ndtri(alpha / 2))
        a2 = ndtr(2.0 * z0 + ndtri(1 - alpha / 2))
        lo, hi = np.quantile(v, [a1, a2])
    if bounds is not None:
        lo, hi = np.clip([lo, hi], bounds[0], bounds[1])
    return (float(lo), float(hi))


def attach_intervals(result, boot: Bootstrap, ci_level: float) -> None:
    """Set ``result.figures[name].ci`` and ``.level`` from ``boot``; set ``result.bootstrap``.

    The interval construction is ``boot.interval``; the point value is the
    figure of ``result`` itself; every interval is intersected with the
    range the true figure can take (`parameter_range`).
    """
    _check_level(ci_level, key="ci_level")
    dim = int(round(np.sqrt(np.asarray(result.choi).shape[0])))
    for k, name in enumerate(boot.names):
        fig = result.figures.get(name)
        if fig is None:
            continue
        fig.ci = interval(boot.figures[:, k], fig.value, ci_level, boot.interval,
                          parameter_range(name, dim))
        fig.level = float(ci_level)
    result.bootstrap = boot


# --------------------------------------------------------------------------
# Refits (the same code in the calling process and in the workers)
# --------------------------------------------------------------------------

_NUMERICAL_ERRORS = (np.linalg.LinAlgError, ArithmeticError, ValueError)


class _Refitter:
    """Everything a resample needs, built once per process."""

    def __init__(self, model, means, start, target, method, options, names):
        self.model = model
        self.means = means
        self.start = start
        self.target = target
        self.method = method
        self.options = options
        self.names = names

    def run(self, first: int, seeds) -> dict:
        n = len(seeds)
        k = len(self.names)
        d2 = self.model.dim ** 2
        out = {"first": first,
               "figures": np.full((n, k), np.nan),
               "converged": np.zeros(n, dtype=bool),
               "ok": np.zeros(n, dtype=bool),
               "choi": np.zeros((n, d2, d2), dtype=complex),
               "chi": np.zeros((n, d2, d2), dtype=complex),
               "ptm": np.zeros((n, d2, d2)),
               "errors": []}
        for i, ss in enumerate(seeds):
            counts = resample_counts(self.means, ss)
            try:
                fit = estimate(self.model, self.method, counts=counts, start=self.start,
                               **self.options)
                figs = compute_figures(fit.choi, self.target)
                row = np.array([figs[name] for name in self.names], dtype=float)
            except InputError:
                raise
            except _NUMERICAL_ERRORS as exc:
                out["errors"].append(f"resample {first + i}: {type(exc).__name__}: {exc}")
                continue
            out["figures"][i] = row
            out["converged"][i] = bool(fit.converged)
            out["ok"][i] = True
            out["choi"][i] = fit.choi
            out["chi"][i] = choi_to_chi(fit.choi)
            out["ptm"][i] = choi_to_ptm(fit.choi)
        return out


_WORKER: _Refitter | None = None


def _init_worker(state: dict) -> None:
    global _WORKER
    for var in THREAD_VARIABLES:
        os.environ[var] = "1"
    try:
        import numba
        numba.set_num_threads(1)
    except Exception:                 # numba missing or its threading layer unavailable
        pass
    _limit_blas_threads()
    _WORKER = _Refitter(**state)


def _run_chunk(first: int, seeds) -> dict:
    return _WORKER.run(first, seeds)


class _Accumulator:
    """Element-wise standard deviations, summed in resample order.

    Chunks may finish in any order; they are folded in by index so that the
    sums (and so the standard deviations) do not depend on the number of
    workers. The sums are shifted by the point estimate for accuracy.
    """

    def __init__(self, shifts: dict):
        self.shifts = shifts
        self.n = 0
        self.s1 = {k: np.zeros_like(v) for k, v in shifts.items()}
        self.s2 = {k: np.zeros(v.shape, dtype=complex) for k, v in shifts.items()}
        self.pending = {}
        self.next_first = 0

    def add(self, chunk: dict) -> None:
        self.pending[chunk["first"]] = chunk
        while self.next_first in self.pending:
            c = self.pending.pop(self.next_first)
            for i in range(len(c["ok"])):
                if not c["ok"][i]:
                    continue
                self.n += 1
                for key, shift in self.shifts.items():
                    x = c[key][i] - shift
                    self.s1[key] += x
                    self.s2[key] += x.real ** 2 + 1j * x.imag ** 2
            self.next_first += len(c["ok"])

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


class _Bar(tqdm):
    """tqdm without its monitor thread, which would outlive the bar and make a
    later fork unsafe (`_fork_is_safe`)."""

    monitor_interval = 0


@contextmanager
def _single_threaded_children():
    """Children started inside this block inherit one-thread settings for BLAS and numba."""
    saved = {var: os.environ.get(var) for var in THREAD_VARIABLES}
    for var in THREAD_VARIABLES:
        os.environ[var] = "1"
    try:
        yield
    finally:
        for var, value in saved.items():
            if value is None:
                os.environ.pop(var, None)
            else:
                os.environ[var] = value


def _fork_is_safe() -> bool:
    """True when forking this process cannot inherit a lock held by another thread.

    That is: Linux (elsewhere system libraries are not fork safe), no Python
    thread besides this one, and numba's threading layer not started here
    (GNU OpenMP, one of its layers, does not survive a fork). OpenBLAS
    re-creates its own threads after a fork (it registers fork handlers).
    """
    if not sys.platform.startswith("linux") or threading.active_count() > 1:
        return False
    try:
        from numba.np.ufunc import parallel
    except Exception:
        return False
    return getattr(parallel, "_is_initialized", True) is False


def _openblas_functions(names):
    """For every OpenBLAS loaded in this process, its first function among ``names``.

    numpy and scipy wheels may each bring their own OpenBLAS, with prefixed
    symbol names; libraries are found through /proc/self/maps (best effort).
    """
    import ctypes

    try:
        with open("/proc/self/maps") as fh:
            paths = {line.split()[-1] for line in fh if "openblas" in line.lower() and "/" in line}
    except OSError:
        return []
    found = []
    for path in sorted(paths):
        try:
            lib = ctypes.CDLL(path)
        except OSError:
            continue
        for symbol in names:
            function = getattr(lib, symbol, None)
            if function is not None:
                found.append(function)
                break
    return found


def _limit_blas_threads() -> None:
    """Ask every OpenBLAS loaded in this process to use one thread (best effort).

    The environment variables only act on libraries loaded after they are
    set; a forked worker inherits libraries already loaded, so it calls each
    library's own setter.
    """
    import ctypes

    for setter in _openblas_functions(("openblas_set_num_threads", "scipy_openblas_set_num_threads64_",
                                       "scipy_openblas_set_num_threads", "openblas_set_num_threads64_")):
        setter.argtypes = [ctypes.c_int]
        setter.restype = None
        setter(1)


def _blas_thread_counts() -> list[int]:
    """Threads of every OpenBLAS loaded in this process (for checking the workers)."""
    import ctypes

    counts = []
    for getter in _openblas_functions(("openblas_get_num_threads", "scipy_openblas_get_num_threads64_",
                                       "scipy_openblas_get_num_threads", "openblas_get_num_threads64_")):
        getter.restype = ctypes.c_int
        counts.append(int(getter()))
    return counts


def _worker_threads() -> dict:
    """Thread settings seen inside a worker: numba's and every OpenBLAS's."""
    import numba

    return {"numba": numba.get_num_threads(), "blas": _blas_thread_counts(),
            "start_method": mp.get_start_method(allow_none=True)}


def _pool_context():
    """fork when `_fork_is_safe` (workers start at once), else forkserver, else spawn."""
    if _fork_is_safe():
        return mp.get_context("fork")
    if "forkserver" in mp.get_all_start_methods():
        ctx = mp.get_context("forkserver")
        # workers forked from the server find the package already imported
        ctx.set_forkserver_preload(["gatescope.bootstrap"])
        return ctx
    return mp.get_context("spawn")


# --------------------------------------------------------------------------
# The bootstrap
# --------------------------------------------------------------------------

def _check_level(level, key: str = "level") -> None:
    if isinstance(level, bool) or not isinstance(level, numbers.Real) or not 0 < float(level) < 1:
        raise InputError(f"must be a fraction strictly between 0 and 1 (e.g. 0.95), got {level!r}",
                         key=key)


def _check_int(value, key: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise InputError(f"must be a whole number, got {value!r}", key=key)
    if value < minimum:
        raise InputError(f"must be at least {minimum}, got {value}", key=key)
    return int(value)


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
        if spread > 1e-12 and abs(bias) > spread:
            out.append((name, bias, spread))
    return out


def check_options(*, samples, kind: str = "parametric", workers=None,
                  interval: str = DEFAULT_INTERVAL, ci_level=None) -> tuple[int, int]:
    """Validate the bootstrap's options (InputError naming the option); returns
    (samples, workers) with the default worker count filled in."""
    samples = _check_int(samples, "bootstrap", 2)
    if kind not in KINDS:
        raise InputError(f"unknown kind {kind!r}; known: {', '.join(KINDS)}", key="bootstrap_kind")
    if interval not in INTERVALS:
        raise InputError(f"unknown interval {interval!r}; known: {', '.join(INTERVALS)}",
                         key="interval")
    if ci_level is not None:
        _check_level(ci_level, key="ci_level")
    workers = (os.cpu_count() or 1) if workers is None else _check_int(workers, "workers", 1)
    return samples, workers


def chunk_sizes(samples: int, workers: int) -> list[int]:
    """Resamples per task: at most B/(W·CHUNKS_PER_WORKER), and towards the end
    1/(2W) of what is left (at least one), so that the last tasks are small and the
    workers finish together (guided self-scheduling, Polychronopoulos & Kuck, IEEE
    Trans. Comput. C-36, 1425 (1987))."""
    cap = max(1, -(-samples // (workers * CHUNKS_PER_WORKER)))
    sizes = []
    left = samples
    while left > 0:
        size = min(cap, max(1, left // (2 * workers)))
        sizes.append(size)
        left -= size
    return sizes


def run_bootstrap(model: MeasurementModel, point: Fit, target, *, samples: int,
                  kind: str = "parametric", seed: int | None = None, workers: int | None = None,
                  method: str | None = None, options: dict | None = None,
                  progress: bool = False, interval: str = DEFAULT_INTERVAL,
                  point_figures: dict | None = None):
    """Resample the rows, refit every resample, and summarise the spread.

    Parameters
    ----------
    model : MeasurementModel
    point : Fit
        The point estimate (centre of the parametric resampling, warm start).
    target : (d, d) array or None
        Target unitary of the target figures (``compute_figures``).
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
        A tqdm bar on stderr, only when stderr is a terminal.
    interval : {"normal", "percentile", "basic", "bc"}
        The construction `attach_intervals` will use (stored in the result).
    point_figures : dict, optional
        ``compute_figures(point.choi, target)`` when the caller has it; every
        figure in it but the diamond distance (not bootstrapped) is resampled.

    Returns
    -------
    (Bootstrap, int)
        The resampled figures and summaries, and the seed used.
    """
    samples, workers = check_options(samples=samples, kind=kind, workers=workers,
                                     interval=interval)
    method = point.method if method is None else method
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; known: {', '.join(METHODS)}", key="method")
    options = dict(options or {})
    for reserved in ("counts", "start"):
        if reserved in options:
            raise InputError("is set by the bootstrap for every resample", key=reserved)
    seed = draw_seed() if seed is None else _check_int(seed, "seed", 0)

    t0 = time.perf_counter()
    if point_figures is None:
        point_figures = compute_figures(point.choi, target)
    names = tuple(name for name in point_figures if name != "diamond_distance")
    point_choi = np.asarray(point.choi, dtype=complex)
    state = {"model": model, "means": resample_means(model, point, kind), "start": point_choi,
             "target": target, "method": method, "options": options, "names": names}
    seeds = np.random.SeedSequence(seed).spawn(samples)

    figures = np.full((samples, len(names)), np.nan)
    converged = np.zeros(samples, dtype=bool)
    errors: list[str] = []
    acc = _Accumulator({"choi": point_choi, "chi": choi_to_chi(point_choi),
                        "ptm": choi_to_ptm(point_choi)})

    def collect(chunk):
        sl = slice(chunk["first"], chunk["first"] + len(chunk["ok"]))
        figures[sl] = chunk["figures"]
        converged[sl] = chunk["converged"]
        errors.extend(chunk["errors"])
        acc.add(chunk)

    if workers > 1 and mp.current_process().daemon:
        workers = 1                   # a daemonic process may not start a pool
    chunks, first = [], 0
    for size in chunk_sizes(samples, workers):
        chunks.append((first, seeds[first:first + size]))
        first += size
    workers = min(workers, len(chunks))

    show = bool(progress) and hasattr(sys.stderr, "isatty") and sys.stderr.isatty()

    def bar():
        return _Bar(total=samples, desc="bootstrap", unit="fit", file=sys.stderr,
                    disable=not show, dynamic_ncols=True)

    if workers == 1:
        refitter = _Refitter(**state)
        with bar() as b:
            for first, chunk_seeds in chunks:
                for j in range(len(chunk_seeds)):
                    collect(refitter.run(first + j, chunk_seeds[j:j + 1]))
                    b.update(1)
    else:
        # The pool (and, with fork, every worker) starts before the bar's monitor thread.
        with _single_threaded_children():
            pool = ProcessPoolExecutor(max_workers=workers, mp_context=_pool_context(),
                                       initializer=_init_worker, initargs=(state,))
            todo = {pool.submit(_run_chunk, first, s) for first, s in chunks}
        with pool, bar() as b:
            try:
                while todo:
                    done, todo = wait(todo, return_when=FIRST_COMPLETED)
                    for fut in done:
                        chunk = fut.result()
                        collect(chunk)
                        b.update(len(chunk["ok"]))
            except BaseException:
                for fut in todo:
                    fut.cancel()
                raise

    n_errors = len(errors)
    failures = int(np.count_nonzero(~converged))
    message = failure_message(failures, n_errors, samples)
    if message:
        if errors:
            message += f" (first error: {errors[0]})"
        warnings.warn(message, GatescopeWarning, stacklevel=2)
    # Near the boundary the refits of an mle sit below it by more than their spread even
    # when the estimate itself is nearly unbiased (the resampled world is purer than the
    # real one); the normal interval does not use that bias and keeps its coverage
    # (benchmarks/README.md, "Bootstrap coverage"), so the warning would mislead there.
    biased = ([] if method == "mle" and interval == "normal"
              else biased_figures(names, figures, [point_figures[n] for n in names]))
    if biased:
        listed = "; ".join(f"{n} (bias {b:+.2g}, spread {sp:.2g})" for n, b, sp in biased)
        advice = (" the mle estimator is much less biased near pure processes" if method != "mle"
                  else " more counts reduce it")
        warnings.warn(f"the bootstrap shows a bias larger than the spread for {listed}: the "
                      f"estimate sits at the boundary of the physical set or the estimator is "
                      f"strongly biased here, and the intervals of these figures may not reach "
                      f"their level;{advice}", GatescopeWarning, stacklevel=2)
    boot = Bootstrap(figures=figures, names=names, kind=kind, seed=seed, samples=samples,
                     failures=failures, interval=interval, converged=converged, errors=n_errors,
                     choi_std=acc.std("choi"), chi_std=acc.std("chi"), ptm_std=acc.std("ptm").real,
                     method=method, workers=workers, seconds=time.perf_counter() - t0)
    return boot, seed


__all__ = ["KINDS", "INTERVALS", "DEFAULT_INTERVAL", "check_options", "run_bootstrap", "attach_intervals",
           "interval", "parameter_range", "biased_figures", "resample_means", "resample_counts",
           "draw_seed", "failure_message"]
