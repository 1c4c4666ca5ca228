"""The main job as one function: `fit` turns an `Experiment` into a `Result`, for a
process or a state experiment alike.

Data flow, one module a step: the experiment (`reader`) → its measurement
model (`model`) → the estimate (`estimators`) → figures of merit (`merit`)
→ error bars (`bootstrap`) → goodness of fit (`diagnostics`) → what the
data and the estimate can claim (`checks`) → the `Result` (`result`). The
command line calls exactly this function. Every warning raised on the way
is kept in the result (``Result.warnings``).
"""

from __future__ import annotations

import contextlib
import hashlib
import sys
import tempfile
import threading
import time
import warnings
from pathlib import Path

import numpy as np

from . import kernels, resources
from .bootstrap import check_options as check_bootstrap_options
from .bootstrap import draw_seed, fit_p_value, run_bootstrap
from .checks import assess_estimate, check_data, undetermined_figures, warn_about_fit
from .diagnostics import diagnostics, warn_if_poor_fit
from .errors import InputError, NumericalError, collect_warnings, warn
from .estimators import MAXIMUM_LIKELIHOOD, estimate
from .estimators import check_options as check_estimator_options
from .intervals import DEFAULT_INTERVAL, FIT_INTERVALS, PROFILE_INTERVALS, parameter_range
from .likelihood import PoissonLikelihood
from .merit import chsh_gap_warning, compute_figures
from .model import build_model
from .options import choice, flag, fraction, whole
from .options import seed as check_seed
from .options import workers as check_workers
from .parallel import single_threaded_blas
from .profile import PROFILED_FIGURES, profile_figures, profiled_names
from .progress import Progress
from .projection import KERNEL_MAX_DIM, project_physical
from .provenance import provenance
from .reader import Experiment, read_experiment
from .result import Result, build_result


def check_fit_options(*, method: str = "mle", bootstrap: int = 0,
                      bootstrap_kind: str = "parametric", ci_level: float = 0.95,
                      interval: str | None = None, seed=None, workers=None,
                      options: dict | None = None, command_line: bool = False,
                      lower_bound: bool = False) -> None:
    """Check every option of `fit` before any computation (InputError naming the option).

    With ``command_line`` the options are named by their flags (``--ci-level``).
    """
    name = flag if command_line else (lambda key: key)
    check_estimator_options(method, options or {}, key=name("method"))
    bootstrap = whole(bootstrap, name("bootstrap"), 0)
    fraction(ci_level, name("ci_level"))
    if interval is not None:
        choice(interval, FIT_INTERVALS, name("interval"), "interval")
    if (interval in PROFILE_INTERVALS or lower_bound) and method not in MAXIMUM_LIKELIHOOD:
        raise InputError(f"profile-likelihood intervals and lower bounds are centred on the "
                         f"maximum-likelihood estimate; use --method "
                         f"{' or '.join(MAXIMUM_LIKELIHOOD)}, not {method}"
                         if command_line else
                         f"profile-likelihood intervals and lower bounds need a maximum-"
                         f"likelihood method ({', '.join(MAXIMUM_LIKELIHOOD)}), not {method}",
                         key=name("interval") if interval in PROFILE_INTERVALS
                         else name("lower_bound"))
    check_seed(seed, name("seed"))            # recorded even without a bootstrap
    check_workers(workers, name("workers"))
    if bootstrap:
        check_bootstrap_options(
            samples=bootstrap, kind=bootstrap_kind, workers=workers,
            interval=DEFAULT_INTERVAL if interval in (None,) + PROFILE_INTERVALS else interval,
            seed=seed,
            names={key: name(key) for key in ("bootstrap", "bootstrap_kind", "interval", "seed",
                                              "workers")})


def fit(experiment: Experiment, method: str = "mle", *, bootstrap: int = 0,
        bootstrap_kind: str = "parametric", ci_level: float = 0.95, seed: int | None = None,
        workers: int | None = None, progress: bool = False, command_line: str | None = None,
        diamond: bool = False, interval: str | None = None, lower_bound: bool = False,
        **options) -> Result:
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
        Seed of the bootstrap and of the test-inversion lower bounds; drawn at
        random and recorded when not given.
    workers : int, optional
        Processes for the bootstrap (default: the machine's cores).
    progress : bool
        Report on stderr: the compilation of the numerical kernels on a first run
        (`COMPILE_NOTICE`), and the bootstrap's progress.
    interval : {"normal", "percentile", "basic", "bc", "profile", "test-inversion"}, optional
        Construction of the intervals. A bootstrap one (`gatescope.intervals`)
        applies to every bootstrapped figure. ``"profile"``: two-sided
        profile-likelihood intervals (`gatescope.profile`, with or without a
        bootstrap) for the figures it covers — ``process_fidelity``,
        ``average_gate_fidelity``, ``purity``, and a state's
        ``state_fidelity`` (pure target) and ``purity`` — and the bootstrap
        interval `gatescope.intervals.DEFAULT_INTERVAL` for the others.
        ``"test-inversion"`` (processes of one and two qubits): as ``"profile"``,
        but the process and average gate fidelities get the test-inversion
        interval (calibrated by simulated data sets). It is not offered for a
        state's fidelity, where it covered less than the bootstrap's interval
        (benchmarks/README.md, "Test inversion"). Default (None):
        the test-inversion interval for the figures `default_inverted` names,
        the profile-likelihood one for the others `default_profiled` names, the
        bootstrap's default for the rest. Each figure records its construction
        (``Figure.interval_method``).
    lower_bound : bool
        Also compute the one-sided lower confidence bound at ``ci_level`` of the
        figures `gatescope.profile` covers (``Figure.lower_bound``): the
        test-inversion bound for the figures `TEST_INVERSION_DEFAULT` names (the
        fidelities of a one-qubit process), the profile-likelihood bound for the
        others (``Figure.lower_bound_method`` says which). Profile intervals and
        bounds need a maximum-likelihood method and set
        ``Figure.touches_boundary``.
    diamond : bool
        Also compute the diamond distance to the target by a semidefinite
        program (needs cvxpy, the ``sdp`` extra; skipped with a warning
        without it). Off by default: it adds about 1 s to a two-qubit fit
        (mostly loading cvxpy; the fit itself takes a fraction of a
        second), about 2 s for a trace-decreasing estimate, and 2 s of
        solving from three qubits on. Not bootstrapped. A state has no
        diamond distance: for a state experiment a warning (code ``diamond``) says so.
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
    check_fit_options(method=method, bootstrap=bootstrap, bootstrap_kind=bootstrap_kind,
                      ci_level=ci_level, interval=interval, seed=seed, workers=workers,
                      options=options, lower_bound=lower_bound)
    profiled = PROFILED_FIGURES if interval in PROFILE_INTERVALS else ()
    inverted = PROCESS_INVERTED if interval == "test-inversion" else ()
    if inverted and experiment.kind == "state":
        raise InputError("test-inversion intervals are offered for the fidelities of processes; "
                         "near a pure state they covered a state's fidelity less often than the "
                         "bootstrap's interval (README, Methods); use --interval profile or "
                         "a bootstrap interval", key="interval")
    if inverted and experiment.n_qubits > MAX_INVERTED_QUBITS:
        raise InputError(f"test-inversion intervals take about a thousand refits: they are "
                         f"offered up to {MAX_INVERTED_QUBITS} qubits, and this experiment has "
                         f"{experiment.n_qubits}; use --interval profile",
                         key="interval")
    if interval is None:
        profiled = default_profiled(experiment, method, bootstrap)
        inverted = default_inverted(experiment, method, bootstrap)
    if interval in (None,) + PROFILE_INTERVALS:
        interval = DEFAULT_INTERVAL           # the bootstrap's, for every other figure
    with collect_warnings() as texts:
        result = _fit(experiment, method, bootstrap=bootstrap, bootstrap_kind=bootstrap_kind,
                      ci_level=ci_level, seed=seed, workers=workers, progress=progress,
                      command_line=command_line, diamond=diamond, interval=interval,
                      options=options, lower_bound=lower_bound, profiled=profiled,
                      inverted=inverted)
    result.warnings = tuple(texts)
    return result


#: The figures that a bootstrap of a maximum-likelihood fit gives the profile-likelihood
#: interval by default, by (kind, number of qubits): where its coverage near the
#: boundary was measured closer to the level than the bootstrap's normal interval
#: (benchmarks/README.md, "Coverage near the boundary"). The purity of one- and
#: two-qubit processes and of two-qubit states; the fidelities of one- and two-qubit
#: processes are listed too, and `TEST_INVERSION_DEFAULT` turns their profile into a
#: test inversion. Other figures and sizes keep the normal interval.
PROFILE_DEFAULT = {("process", 1): ("process_fidelity", "average_gate_fidelity", "purity"),
                   ("process", 2): ("process_fidelity", "average_gate_fidelity", "purity"),
                   ("state", 2): ("purity",)}


def default_profiled(experiment: Experiment, method: str, bootstrap: int) -> tuple:
    """The figures whose interval is the profile-likelihood one when `fit` is given no
    ``interval``: `PROFILE_DEFAULT` for a bootstrapped maximum-likelihood fit, none
    otherwise (every figure then has the bootstrap's
    `gatescope.intervals.DEFAULT_INTERVAL`)."""
    if bootstrap and method in MAXIMUM_LIKELIHOOD:
        return PROFILE_DEFAULT.get((experiment.kind, experiment.n_qubits), ())
    return ()


#: The figures whose lower bound (`fit` with ``lower_bound``) and, given an ``mle``
#: bootstrap and no ``interval``, whose interval are the test-inversion ones
#: (`gatescope.profile.Profile.test_inversion_lower_bound`, `test_inversion_interval`),
#: by (kind, number of qubits): where their coverage near the boundary was measured
#: closest to the level (benchmarks/README.md, "Test inversion"). Elsewhere the bound
#: is the profile-likelihood one and the interval `PROFILE_DEFAULT`'s.
TEST_INVERSION_DEFAULT = {("process", 1): ("process_fidelity", "average_gate_fidelity"),
                          ("process", 2): ("process_fidelity", "average_gate_fidelity")}
#: The figures that ``interval="test-inversion"`` inverts: the fidelities of a process.
PROCESS_INVERTED = ("process_fidelity", "average_gate_fidelity")
#: Test-inversion intervals (`fit` with ``interval="test-inversion"``) are offered up to
#: this many qubits: each end tests 4–8 values with B = `profile.CALIBRATION_SAMPLES`
#: refits.
MAX_INVERTED_QUBITS = 2
#: Entropy added to the seed of a fit for the random numbers of its test inversions, so
#: that they are not those of its bootstrap.
TEST_INVERSION_STREAM = 0x7465


def default_interval_words() -> str:
    """`PROFILE_DEFAULT` and `TEST_INVERSION_DEFAULT` in words (the command line's help)."""
    def figures(names):
        return " and ".join(n.replace("_", " ") for n in names)

    parts = [f"test inversion for the {figures(names)} of a {n}-qubit {kind}"
             for (kind, n), names in TEST_INVERSION_DEFAULT.items()]
    for (kind, n), names in PROFILE_DEFAULT.items():
        rest = [m for m in names if m not in TEST_INVERSION_DEFAULT.get((kind, n), ())]
        if rest:
            parts.append(f"profile likelihood for the {figures(rest)} of a {n}-qubit {kind}")
    return "; ".join(parts)


def default_inverted(experiment: Experiment, method: str, bootstrap: int) -> tuple:
    """The figures whose interval is the test-inversion one when `fit` is given no
    ``interval``: `TEST_INVERSION_DEFAULT` for a bootstrapped maximum-likelihood fit,
    none otherwise."""
    if bootstrap and method in MAXIMUM_LIKELIHOOD:
        return TEST_INVERSION_DEFAULT.get((experiment.kind, experiment.n_qubits), ())
    return ()


def attach_profiles(result: Result, model, point, target, level: float, *, interval=(),
                    lower_bound: bool, seed: int = 0, inverted=(), progress: bool = False,
                    workers: int = 1) -> None:
    """Set the profile-likelihood intervals of the figures named in ``interval``, the
    lower bounds (``lower_bound``) and ``touches_boundary`` of the figures of ``result``
    that `gatescope.profile` covers (those in ``interval`` without ``lower_bound``).

    Each interval and bound is widened, if need be, to reach the figure's value: the
    profile's own maximum-likelihood fit (tighter than the point fit) may differ from
    it by the fit's tolerance. A figure the data do not determine keeps no profile. A
    search that fails or does not converge is a warning (code ``profile``). With
    ``progress``, a line per figure on stderr (the test inversions of two qubits take
    tens of seconds); their simulated refits run on ``workers`` processes.
    """
    names = None if lower_bound else tuple(interval)
    bounds = TEST_INVERSION_DEFAULT.get((model.kind, model.n_qubits), ())
    allowed = profiled_names(model, target)
    chosen = [n for n in (allowed if names is None else names) if n in allowed]
    if progress and chosen:
        tested = [n for n in chosen if n in inverted or (lower_bound and n in bounds)]
        print(f"intervals: {', '.join(chosen)}"
              + (f" (test inversion for {', '.join(tested)}: tens of seconds at two qubits)"
                 if tested else ""), file=sys.stderr, flush=True)
    try:
        with Progress(len(chosen), "intervals", "figure", enabled=progress) as bar:
            found = profile_figures(model, target, level=level, interval=bool(interval),
                                    lower_bound=lower_bound, names=names, start=point.choi,
                                    invert_bounds=bounds, invert_intervals=inverted,
                                    seed=[seed, TEST_INVERSION_STREAM], workers=workers,
                                    done=lambda name: bar.update(postfix=name))
    except (RuntimeError, NumericalError, ArithmeticError) as exc:
        warn("profile", f"profile-likelihood intervals not computed: {exc}", stacklevel=2)
        return
    fell_back, unconverged = [], []
    for name, prof in found.items():
        fig = result.figures.get(name)
        if fig is None or not fig.determined:
            continue
        parts = [p for p in (prof.interval, prof.lower) if p is not None]
        asked = ((prof.interval, name in inverted), (prof.lower, name in bounds))
        if any(p is not None and wanted and p.method != "test-inversion" for p, wanted in asked):
            fell_back.append(name)
        if not all(p.converged for p in parts):
            unconverged.append(name)
        low, high = parameter_range(name, model.dim, model.kind)
        if prof.interval is not None and name in interval:
            fig.ci = (max(min(prof.interval.low, fig.value), low),
                      min(max(prof.interval.high, fig.value), high))
            fig.interval_method = prof.interval.method
        if prof.lower is not None:
            fig.lower_bound = max(min(prof.lower.low, fig.value), low)
            fig.lower_bound_method = prof.lower.method
        fig.level = float(level)
        fig.touches_boundary = bool(prof.touches_boundary)
    if fell_back:          # one warning: the average gate fidelity follows the process one
        warn("profile", f"the test inversion of {', '.join(fell_back)} rejected every value up "
                        f"to the estimate itself (counts closer to their expectations than shot "
                        f"noise makes likely): the profile-likelihood interval or bound is "
                        f"given instead", stacklevel=2)
    if unconverged:
        warn("profile", f"the profile-likelihood search for {', '.join(unconverged)} stopped "
                        f"before it converged: the interval may be inaccurate", stacklevel=2)


#: The notice printed while the numerical kernels compile (README, "First run").
COMPILE_NOTICE = "compiling numerical kernels, first run only, about 20 s"
#: On a run that may compile, the notice appears once preparing takes longer than this
#: (loading compiled kernels from numba's cache takes a fraction of it).
NOTICE_AFTER_SECONDS = 1.5
#: Iterations of the estimator run to compile its kernels on a first run.
WARM_UP_ITERATIONS = 3


def warm_marker(model, method: str) -> Path | None:
    """The file that records a finished warm-up of ``method`` on models like ``model``
    with this source of the kernels, this numba and this Python, beside numba's cache
    (None when that place is unknown)."""
    try:
        import numba

        folder = Path(kernels.compiled_kernels()[0].stats.cache_path)
        source = Path(kernels.__file__).read_bytes()
    except (AttributeError, IndexError, OSError):
        return None
    key = f"{numba.__version__} {sys.version} {method} {model.kind} {model.trace_decreasing}"
    digest = hashlib.sha256(source + key.encode("utf-8")).hexdigest()[:16]
    return folder / f"gatescope-warm-{digest}"


def _surrogate(model):
    """A one-qubit model of the same kind as ``model`` (process or state, trace preserving
    or not), read from files as every experiment is, so that its arrays have the same
    types: warming the estimator up on it compiles what ``model``'s fit will call, in
    milliseconds whatever the size of ``model``."""
    labels = ("H", "V", "D", "A", "R", "L")
    if model.kind == "state":
        toml = 'kind = "state"\nqubits = 1\ncounts = "counts.csv"\n'
        rows = ["meas,counts"] + [f"{m},{10 + 3 * k}" for k, m in enumerate(labels)]
    else:
        toml = 'qubits = 1\ncounts = "counts.csv"\n'
        if model.trace_decreasing:
            toml += 'normalization = "global"\ntrace = "decreasing"\ninput_rate = 100.0\n'
        rows = ["prep,meas,counts"] + [f"{p},{m},{10 + (3 * j + k) % 7}"
                                       for j, p in enumerate(labels) for k, m in enumerate(labels)]
    with tempfile.TemporaryDirectory(prefix="gatescope-warm-up-") as folder:
        Path(folder, "experiment.toml").write_text(toml, encoding="utf-8")
        Path(folder, "counts.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
        return build_model(read_experiment(folder))


def compile_kernels(model, method: str = "mle", *, notify: bool = True,
                    stream=None) -> float | None:
    """Compile (or load from numba's cache) the kernels a fit of ``model`` by ``method`` calls.

    Called before the estimator, so that the estimator's ``seconds`` measure the fit
    alone. Unless a warm-up of this kind finished before (`warm_marker`), a few
    iterations of the estimator on a one-qubit model of the same kind (`_surrogate`)
    compile everything it calls, and with ``notify`` `COMPILE_NOTICE` goes to
    ``stream`` (stderr) once that takes longer than `NOTICE_AFTER_SECONDS`. Returns the
    seconds spent when something was compiled, else None.
    """
    stream = sys.stderr if stream is None else stream
    marker = warm_marker(model, method)
    first = marker is None or not marker.exists()
    timer = None
    if notify and first:
        timer = threading.Timer(NOTICE_AFTER_SECONDS,
                                lambda: print(COMPILE_NOTICE, file=stream, flush=True))
        timer.start()
    before = kernels.compiled_in_this_process()
    t0 = time.perf_counter()
    try:
        centre = model.centre()
        PoissonLikelihood(model).evaluate(centre)
        if model.kind == "state" or model.dim <= KERNEL_MAX_DIM:
            project_physical(model, centre)
        if first:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                try:
                    estimate(_surrogate(model), method, maxiter=WARM_UP_ITERATIONS)
                except (ArithmeticError, ValueError):   # the fit itself will say what fails
                    pass
            if marker is not None:
                with contextlib.suppress(OSError):
                    marker.parent.mkdir(parents=True, exist_ok=True)
                    marker.touch()
    finally:
        if timer is not None:
            timer.cancel()
            timer.join()
    seconds = time.perf_counter() - t0
    return seconds if kernels.compiled_in_this_process() > before else None


def _fit(experiment, method, *, bootstrap, bootstrap_kind, ci_level, seed, workers, progress,
         command_line, diamond, interval, options, lower_bound=False, profiled=(),
         inverted=()) -> Result:
    started = time.time()
    t0 = time.perf_counter()
    if experiment.kind != "state" and experiment.n_qubits >= resources.GUARD_FROM_QUBITS:
        need = resources.fit_estimate(experiment.n_qubits, experiment.n_rows,
                                      bootstrap=bootstrap, workers=check_workers(workers))
        if progress:
            print(need.text(), file=sys.stderr, flush=True)
        resources.check_fit(need, str(experiment.path))
    model = build_model(experiment)
    compile_seconds = compile_kernels(model, method, notify=progress)
    rows = check_data(model)
    ident = model.warn_if_undetermined(rows)
    with single_threaded_blas():          # small products: threads only oversubscribe
        point = estimate(model, method, **options)
    verdict = assess_estimate(model, point, options)
    details = {}
    target = experiment.target_state if model.kind == "state" else experiment.target
    if diamond and model.kind == "state":
        warn("diamond", "diamond distance skipped: it is a figure of processes, and this is a "
                        "state experiment", stacklevel=2)
    values = compute_figures(point.choi, target, diamond=diamond, details=details,
                             kind=model.kind)
    boot = None
    if seed is None and (lower_bound or profiled or inverted) and not bootstrap:
        seed = draw_seed()       # the test inversions and the purity's top simulate data sets
    if bootstrap:
        boot, seed = run_bootstrap(model, point, target, samples=bootstrap,
                                   kind=bootstrap_kind, seed=seed, workers=workers,
                                   method=method, options=options, progress=progress,
                                   interval=interval, point_figures=values)
    diag = diagnostics(model, point, ident.rank)
    if boot is not None:
        diag.bootstrap_p_value, diag.bootstrap_resamples = fit_p_value(diag.deviance,
                                                                       boot.deviances)
    no_signal = warn_about_fit(model, point, diag.dof, ident.rank)
    if point.method in MAXIMUM_LIKELIHOOD and verdict.physical and not no_signal:
        # lin and pls do not maximise the likelihood, so their statistics exceed the χ²
        # reference even for a model that fits: the test is for the ML estimate only
        warn_if_poor_fit(diag)
    undetermined = undetermined_figures(model, rows, ident, values, no_signal=no_signal)
    prov = {} if compile_seconds is None else {"compile_seconds": float(compile_seconds)}
    result = build_result(experiment, point.choi, values, details, method=point.method,
                          converged=verdict.converged, iterations=point.iterations,
                          log_likelihood=point.log_likelihood, stop_reason=point.stop_reason,
                          seconds=point.seconds, intensities=point.intensities,
                          diagnostics=diag, provenance=prov)
    result.status = verdict.status
    for name in undetermined:
        result.figures[name].determined = False
    if boot is not None:
        result.attach_bootstrap(boot, ci_level)
        if "chsh_max" in boot.names:
            values = boot.figures[:, boot.names.index("chsh_max")]
            text = chsh_gap_warning(details, float(np.nanstd(values, ddof=1)))
            if text:
                warn("chsh", text, stacklevel=2)
    if profiled or lower_bound:
        attach_profiles(result, model, point, target, ci_level, interval=profiled,
                        lower_bound=lower_bound, seed=seed, inverted=inverted,
                        progress=progress, workers=check_workers(workers))
    # the whole job's time: model, estimate, figures, bootstrap, goodness of fit, intervals
    result.provenance.update(provenance(seed=seed, command_line=command_line,
                                        started=started, wall=time.perf_counter() - t0))
    return result
