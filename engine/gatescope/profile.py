"""Profile-likelihood confidence intervals and lower confidence bounds of figures of merit.

The profile log-likelihood of a figure F is

    ℓ_p(f) = max { ℓ(J) : J physical, F(J) = f },

ℓ the Poisson log-likelihood of `gatescope.likelihood` (intensities
profiled out) and "physical" the set the maximum-likelihood fit uses (CPTP
maps, trace non-increasing maps for ``trace = "decreasing"``, density
matrices for a state model). Its deviance is D(f) = 2(ℓ̂ − ℓ_p(f)), ℓ̂ the
maximum of ℓ over the physical set (Venzon & Moolgavkar, Appl. Stat. 37, 87
(1988), for intervals from the profile).

**Computing the profile.** For a figure linear in J, F(J) = Re Tr(W J), the
maximiser J_μ of the tilted objective ℓ(J) + μ·F(J) is a point of the
profile: every J with F(J) = F(J_μ) has ℓ(J) + μF(J) ≤ ℓ(J_μ) + μF(J_μ),
hence ℓ(J) ≤ ℓ(J_μ), so ℓ_p(F(J_μ)) = ℓ(J_μ) exactly, and the slope of the
profile there is ℓ_p'(F(J_μ)) = −μ. Each J_μ is one call of the
accelerated projected-gradient maximum-likelihood fit
(`gatescope.estimators.fit_mle` with a `gatescope.likelihood.Tilt`),
warm-started from the nearest point already computed. When ℓ is concave in
J — it is whenever the fitted intensities do not depend on J, e.g. a
trace-preserving model whose normalisation groups hold complete analyser
bases with equal exposures and no background — every tilted problem is a
concave program, the profile is concave, F(J_μ) increases with μ and
μ ↦ J_μ sweeps the whole profile. Otherwise the fits are local and ℓ(J_μ)
is still a lower bound on ℓ_p(F(J_μ)) (J_μ is feasible), so the computed
deviance can only be too large: the interval computed is then contained in
the exact one.

Figures (`ProfiledFigure`, `named_figure`), in the conventions of
`gatescope.merit`:

* ``process_fidelity`` <<U|J|U>>/d²: W = |U>><<U|/d²;
* ``average_gate_fidelity`` (d·F_pro + Tr J/d)/(d + 1): W =
  (|U>><<U|/d + I/d)/(d + 1), linear for trace-preserving and trace
  non-increasing maps alike;
* ``state_fidelity`` <ψ|ρ|ψ> of a state with a pure target ψ: W = |ψ><ψ|
  (a mixed target makes the fidelity non-linear: no profile then);
* ``purity`` Tr J²/d² of a trace-preserving process, or Tr ρ² of a state,
  is not linear. Its tilted objective ℓ + μ·purity is concave for μ ≤ 0,
  so the part of the profile *below* the estimate (the lower end and the
  lower bound) is computed by concave programs as for a linear figure.
  Above the estimate (μ > 0) the objective is not concave: the fit finds a
  local maximum along the path from the estimate, a feasible point, so the
  upper end it gives can be too low (never too high). `ProfileInterval.exact`
  says which case applies.

**The intervals** (`Profile.interval`, `Profile.lower_bound`). Two-sided,
level 1 − α: {f : D(f) ≤ χ²₁(1 − α)} (3.841 at 95%). Lower bound, level
1 − α: the smaller solution of D(f) = z²_{1−α} (2.706 at 95%), i.e. the
signed root r(f) = sign(f̂ − f)·√D(f) set to z_{1−α} — the one-sided
profile-likelihood bound. The ends are found by a search on μ
(`Profile._search`): inverse interpolation of |μ| against √D, and, where the
profile is a straight line, the chord between two points whose slopes
agree. When D stays below the cutoff up to the edge of the figure's range
(F = 1: the data are consistent with a perfect gate at this level), that
edge is the end; for the fidelities the edge is the target's own Choi matrix
(or the target state), whose likelihood is evaluated directly
(`Profile.edge_deviance`, `Profile.consistent_with_top`).

**What is guaranteed.**

1. The profile values are exact (to the fit's tolerance) where ℓ is
   concave, as said above; the deviance at the computed ends equals the
   cutoff to `DEVIANCE_TOL`.
2. Asymptotically (many counts, fixed truth in the interior) D(f₀) → χ²₁
   (Wilks, Ann. Math. Stat. 9, 60 (1938)), so the two-sided interval and the
   lower bound have coverage 1 − α. For a truth *on* the edge of the range
   the law of D(f₀) is the mixture ½χ²₀ + ½χ²₁ (Chernoff, Ann. Math. Stat.
   25, 573 (1954); Self & Liang, JASA 82, 605 (1987)): the interval then
   covers at least its level, and its upper end is the edge — it is
   one-sided. The two-sided interval and the lower bound are separate
   statements, each at its own level; neither switches construction on the
   data.
3. Near the rest of the boundary of the physical set (eigenvalues of J close
   to zero, where good gates live) no asymptotic law holds: the information
   about the infidelity comes from a handful of counts in the rows a perfect
   gate leaves empty. No finite-sample guarantee is claimed; the coverage
   measured there is in benchmarks/README.md ("Coverage near the boundary").
   Physical-set constraints in likelihood-based regions of quantum estimates
   are discussed by Schwemmer et al., PRL 114, 080403 (2015) and Faist &
   Renner, PRL 117, 010404 (2016).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np
from scipy.linalg import expm
from scipy.special import ndtri

from .bootstrap import resample_counts
from .channels import chi_to_choi, choi_from_unitary, choi_to_chi, operator_vector
from .estimators import Fit, estimate, fit_mle
from .likelihood import PoissonLikelihood, Tilt
from .merit.process import nearest_unitary
from .merit.state import _pure_vector
from .parallel import Runner

#: Options of the tilted fits (and of the profile's own maximum-likelihood fit): a tighter
#: optimality residual than `fit_mle`'s default (1e−4), so that the deviance is accurate
#: well within `DEVIANCE_TOL` (on a near-unitary two-qubit gate the ends agreed to 1e−9
#: with those of tol = 1e−12, opt_tol = 1e−6, which take half as long again).
FIT_OPTIONS = {"tol": 1e-10, "opt_tol": 1e-5, "maxiter": 20000}
#: The search stops when the deviance is within this of the cutoff.
DEVIANCE_TOL = 1e-3
#: At most this many tilted fits per end of an interval.
MAX_FITS_PER_END = 40
#: Simulated data sets per tested value of a test inversion (the B of the coverage
#: measured in benchmarks/README.md, "Test inversion").
CALIBRATION_SAMPLES = 100
#: At most this many values tested per test-inversion lower bound.
MAX_TESTED = 8
#: The search of a test-inversion bound stops when an accepted and a rejected value lie
#: this close in signed root of the deviance (about a tenth of a standard error).
S_TOL = 0.1
#: The figures of a process with a profile (the fidelities need a target).
PROCESS_FIGURES = ("process_fidelity", "average_gate_fidelity", "purity")
#: The figures of a state with a profile (the fidelity needs a pure target).
STATE_FIGURES = ("state_fidelity", "purity")
PROFILED_FIGURES = ("process_fidelity", "average_gate_fidelity", "state_fidelity", "purity")
#: The figures with test-inversion intervals and bounds: the linear ones, whose top
#: (F = 1) has one maximiser, the target.
INVERTED_FIGURES = ("process_fidelity", "average_gate_fidelity", "state_fidelity")
#: The processes a test inversion of a process fidelity simulates for a tested value f
#: (`Profile.simulated_processes`): the profile maximiser J_f Pauli-twirled around the
#: target (``"twirled"``) and J_f itself (``"plain"``).
NULLS = ("twirled", "plain")


def default_nulls(n_qubits: int) -> tuple:
    """The processes a test inversion of a process fidelity simulates by default: the
    twirled profile maximiser for one qubit, the twirled and the plain one beyond.

    The twirl keeps the fidelity but drops the coherent part of an error, and with it
    part of the estimate's bias: near a unitary the estimate of F lies low by about the
    number of error directions (d² − 1) times the variance per direction, a bias a
    twirled (full-rank) null reproduces only in part. Measured (benchmarks/README.md,
    "Test inversion"): at one qubit the twirled null alone covered 0.940–0.970 at 1000
    counts per basis and the pair 0.970–0.980, wider by 4–6% at twice the cost; at two
    qubits under a coherent over-rotation the twirled null covered 0.914–0.933 and the
    pair 0.933–1.000."""
    return ("twirled",) if n_qubits <= 1 else ("twirled", "plain")


def two_sided_cutoff(level: float) -> float:
    """χ²₁ quantile at ``level``: z²_{(1+level)/2} (3.841 at 0.95)."""
    return float(ndtri(0.5 * (1.0 + level)) ** 2)


def one_sided_cutoff(level: float) -> float:
    """z²_{level} = χ²₁ quantile at 2·level − 1 (2.706 at 0.95), for a one-sided bound."""
    if not 0.5 < level < 1:
        raise ValueError(f"a one-sided level must lie in (0.5, 1), got {level}")
    return float(ndtri(level) ** 2)


@dataclass(frozen=True, eq=False)
class ProfiledFigure:
    """A figure of merit whose profile likelihood can be computed.

    Attributes
    ----------
    name : str
    operator : Hermitian array of the shape of J, or None
        W of a linear figure, F(J) = Re Tr(W J); None for purity.
    low, high : float
        The range of the figure over the physical set (the interval never
        leaves it).
    maximiser : array or None
        The one physical point at which the figure equals ``high``, when
        there is exactly one (the target's Choi matrix, or the target state,
        for the fidelities).
    scale : float
        For purity F(J) = scale·Tr J² (1/d² for a process's Choi matrix of
        trace d, 1 for a density matrix); its tilt is μ·scale·Tr J².
    unitary : array or None
        The target unitary U of a process fidelity: a test inversion
        (`Profile.test_inversion_end`) may simulate processes Pauli-twirled
        around it (`Profile.simulated_processes`).
    """

    name: str
    operator: np.ndarray | None
    low: float
    high: float
    maximiser: np.ndarray | None = None
    scale: float = 0.0
    unitary: np.ndarray | None = None

    @property
    def quadratic(self) -> bool:
        return self.operator is None

    def value(self, choi: np.ndarray) -> float:
        if self.quadratic:
            return self.scale * float(np.vdot(choi, choi).real)
        return float(np.vdot(self.operator, choi).real)

    def tilt(self, mu: float) -> Tilt:
        """The term μ·F(J) added to ℓ."""
        if self.quadratic:
            return Tilt(quadratic=mu * self.scale)
        return Tilt(linear=mu * self.operator)

    def concave_side(self, side: int) -> bool:
        """True when the tilted objectives on ``side`` (+1 above the estimate, −1
        below) are concave wherever ℓ is."""
        return not self.quadratic or side < 0


def process_fidelity_figure(target: np.ndarray) -> ProfiledFigure:
    """F_pro = <<U|J|U>>/d² = Tr(W J), W = |U>><<U|/d² (`gatescope.merit.process_fidelity`)."""
    u = np.asarray(target, dtype=complex)
    d = u.shape[0]
    return ProfiledFigure("process_fidelity", choi_from_unitary(u) / d ** 2, 0.0, 1.0,
                          choi_from_unitary(u), unitary=u)


def average_gate_fidelity_figure(target: np.ndarray) -> ProfiledFigure:
    """F_avg = (d·F_pro + Tr J/d)/(d + 1) = Tr(W J), W = (|U>><<U|/d + I/d)/(d + 1).

    Its largest value, 1, is reached only at the target (it needs F_pro = 1).
    """
    u = np.asarray(target, dtype=complex)
    d = u.shape[0]
    w = (choi_from_unitary(u) / d + np.eye(d * d) / d) / (d + 1)
    return ProfiledFigure("average_gate_fidelity", w, 0.0, 1.0, choi_from_unitary(u),
                          unitary=u)


def state_fidelity_figure(target) -> ProfiledFigure:
    """<ψ|ρ|ψ> = Tr(W ρ), W = |ψ><ψ|, for a pure target (a ket or a rank-1 density
    matrix); its one maximiser is |ψ><ψ|."""
    psi = _pure_vector(target)
    if psi is None:
        raise ValueError("the state fidelity is linear only for a pure target")
    w = np.outer(psi, psi.conj())
    return ProfiledFigure("state_fidelity", w, 0.0, 1.0, w)


def purity_figure(dim: int, kind: str = "process") -> ProfiledFigure:
    """Purity Tr J²/d² of the Choi matrix of a trace-preserving map, in [1/d², 1], or
    Tr ρ² of a state on ``dim`` dimensions, in [1/d, 1]."""
    if kind == "state":
        return ProfiledFigure("purity", None, 1.0 / dim, 1.0, None, scale=1.0)
    return ProfiledFigure("purity", None, 1.0 / dim ** 2, 1.0, None, scale=1.0 / dim ** 2)


def profiled_names(model, target) -> tuple:
    """The names of the figures of ``model`` (a process or a state model) with a profile
    for this target (None: no target)."""
    if model.kind == "state":
        pure = target is not None and _pure_vector(target) is not None
        return tuple(n for n in STATE_FIGURES if n == "purity" or pure)
    names = PROCESS_FIGURES if target is not None else ("purity",)
    return tuple(n for n in names if not (n == "purity" and model.trace_decreasing))


def named_figure(name: str, target, dim: int, kind: str = "process") -> ProfiledFigure:
    """The `ProfiledFigure` called ``name`` (one of `PROFILED_FIGURES`) of a process
    (``kind="process"``, ``target`` a unitary) or a state (``target`` a pure state)."""
    if name == "purity":
        return purity_figure(dim, kind)
    if name not in PROFILED_FIGURES:
        raise ValueError(f"no profile for {name!r}; known: {', '.join(PROFILED_FIGURES)}")
    if target is None:
        raise ValueError(f"{name} needs a target")
    if name == "state_fidelity":
        return state_fidelity_figure(target)
    return (process_fidelity_figure if name == "process_fidelity"
            else average_gate_fidelity_figure)(target)


@dataclass
class ProfilePoint:
    """One point of the profile: J_μ maximises ℓ(J) + μ·F(J)."""

    mu: float
    value: float                 # F(J_μ)
    log_likelihood: float        # ℓ(J_μ) = ℓ_p(F(J_μ))
    choi: np.ndarray
    converged: bool
    iterations: int


@dataclass
class End:
    """One end of an interval: its value, a physical Choi matrix at (about) that
    value on the profile, whether it is the edge of the figure's range."""

    value: float
    choi: np.ndarray
    touches_edge: bool
    converged: bool
    mu: float = 0.0              # the multiplier of the profile there (inf: the maximiser)
    deviance: float | None = None  # a test-inversion end: the deviance there (its cutoff)


@dataclass
class ProfileInterval:
    """A profile-likelihood interval (``sided = "two-sided"``) or lower bound
    (``sided = "lower"``, ``high`` is then the top of the figure's range).

    ``cutoff`` is the deviance at the ends; ``touches_boundary`` is True when
    an end is the edge of the figure's range (the data are compatible with,
    e.g., a perfect gate at this level); ``exact`` is False when an end was
    found by a non-concave search (purity above its estimate); ``method`` is
    ``"profile"``, or ``"test-inversion"`` for `Profile.test_inversion_lower_bound`
    and `Profile.test_inversion_interval` (whose ``cutoff`` is then the
    deviance at the lower end, the calibrated cutoff; an end where even the
    estimate was rejected falls back to the profile-likelihood end and makes
    ``method`` "profile"); ``converged``
    is False when a fit of a concave search stopped before it converged (a
    non-concave search is local anyway, its fits may stop where the line
    search cannot climb); ``fits`` and ``seconds`` count the tilted fits this
    interval needed beyond those already made for the same profile.
    """

    name: str
    estimate: float
    low: float
    high: float
    level: float
    sided: str
    cutoff: float
    touches_boundary: bool
    exact: bool
    fits: int
    seconds: float
    converged: bool = True
    method: str = "profile"

    @property
    def ci(self) -> tuple[float, float]:
        return (self.low, self.high)


class Profile:
    """The profile likelihood of one figure for one data set.

    Parameters
    ----------
    model : MeasurementModel or StateModel
    figure : ProfiledFigure
    counts : array, optional
        Counts per row (default: the experiment's).
    mle : Fit, optional
        The maximum-likelihood fit of these counts; made here (with
        `FIT_OPTIONS`, from ``start`` when given) when not given.
    fit_options : dict, optional
        Options of the tilted fits (`fit_mle`), default `FIT_OPTIONS`.
    nulls : tuple of `NULLS`, optional
        The processes a test inversion simulates for each tested value of a process
        fidelity (`simulated_processes`), default `default_nulls` of the model's qubits.
    """

    def __init__(self, model, figure: ProfiledFigure, *, counts=None,
                 mle: Fit | None = None, fit_options: dict | None = None, start=None,
                 nulls: tuple | None = None):
        if figure.quadratic and model.trace_decreasing:
            raise ValueError("the purity profile needs a trace-preserving model")
        self.nulls = tuple(default_nulls(model.n_qubits) if nulls is None else nulls)
        if not self.nulls or any(n not in NULLS for n in self.nulls):
            raise ValueError(f"nulls must be a non-empty selection of {NULLS}, got {nulls}")
        self.model = model
        self.figure = figure
        self.counts = counts
        self.options = dict(FIT_OPTIONS if fit_options is None else fit_options)
        self.likelihood = PoissonLikelihood(model, counts)
        t0 = time.perf_counter()
        if mle is None:
            mle = fit_mle(model, counts=counts, start=start, **self.options)
        self.seconds = time.perf_counter() - t0
        self.mle = mle
        self.points = [ProfilePoint(0.0, figure.value(mle.choi), float(mle.log_likelihood),
                                    np.asarray(mle.choi, dtype=complex), bool(mle.converged),
                                    int(mle.iterations))]
        self.fits = 0
        self.simulated_fits = 0
        #: The `gatescope.parallel.Runner` (shared: ``(model, figure)``) that runs the
        #: simulated refits of `exceedance`; None: this process.
        self.runner = None
        self._edge_loglik = {}
        self._observed = None

    # ---- basic quantities ------------------------------------------------

    @property
    def estimate(self) -> float:
        """F(Ĵ), the figure at the maximum-likelihood estimate."""
        return self.points[0].value

    @property
    def max_log_likelihood(self) -> float:
        """ℓ̂: the best ℓ found (the point fit, unless a tilted fit found more)."""
        return max(p.log_likelihood for p in self.points)

    def deviance(self, point: ProfilePoint) -> float:
        return max(2.0 * (self.max_log_likelihood - point.log_likelihood), 0.0)

    def at(self, mu: float) -> ProfilePoint:
        """The profile point of multiplier μ (a tilted fit, warm-started from the
        computed point nearest in μ; repeated calls reuse it)."""
        mu = float(mu)
        for p in self.points:
            if p.mu == mu:
                return p
        start = min(self.points, key=lambda p: abs(p.mu - mu)).choi
        t0 = time.perf_counter()
        fit = fit_mle(self.model, counts=self.counts, start=start, tilt=self.figure.tilt(mu),
                      **self.options)
        self.seconds += time.perf_counter() - t0
        self.fits += 1
        point = ProfilePoint(mu, self.figure.value(fit.choi), float(fit.log_likelihood),
                             fit.choi, bool(fit.converged), int(fit.iterations))
        self.points.append(point)
        return point

    def edge_deviance(self, side: int) -> float | None:
        """D at the edge of the figure's range on ``side`` when a single physical
        point reaches it (the target, for the fidelities at F = 1), else None."""
        if side > 0 and self.figure.maximiser is not None:
            if side not in self._edge_loglik:
                ev = self.likelihood.evaluate(self.figure.maximiser)
                self._edge_loglik[side] = ev.log_likelihood if ev.finite else -math.inf
            return max(2.0 * (self.max_log_likelihood - self._edge_loglik[side]), 0.0)
        return None

    def consistent_with_top(self, level: float = 0.95) -> bool | None:
        """True when the top of the figure's range (F = 1: a perfect gate, or the target
        state) lies inside the two-sided interval at ``level``: D(top) ≤ χ²₁(level).
        None for a figure with no single maximiser (purity), whose top is known only
        from `interval`."""
        dev = self.edge_deviance(+1)
        return None if dev is None else bool(dev <= two_sided_cutoff(level))

    def _scale(self) -> float:
        """A rough standard error of the figure, only to choose the first multiplier."""
        v, lo, hi = self.estimate, self.figure.low, self.figure.high
        n = max(self.likelihood.total_counts, 1.0)
        frac = min(max((v - lo) * (hi - v) / (hi - lo) ** 2, 1.0 / n), 0.25)
        return (hi - lo) * math.sqrt(frac / n)

    # ---- ends of intervals ------------------------------------------------

    def end(self, side: int, cutoff: float, *, deviance_tol: float = DEVIANCE_TOL):
        """(f, touches_edge, converged): the f on ``side`` (+1 above the estimate, −1
        below) where D(f) = cutoff; the edge of the figure's range when D stays below
        the cutoff all the way to it."""
        e = self.end_point(side, cutoff, deviance_tol=deviance_tol)
        return e.value, e.touches_edge, e.converged

    def end_point(self, side: int, cutoff: float, *, deviance_tol: float = DEVIANCE_TOL):
        """Like `end`, as an `End` that also carries a physical Choi matrix whose
        figure is (to the search's tolerance) the end and whose likelihood is the
        profile's there: the profile point itself, the mixture of the two points
        of a straight stretch (a maximiser too, since ℓ is concave and F linear),
        or the target at the edge."""
        edge = self.figure.high if side > 0 else self.figure.low
        edge_dev = self.edge_deviance(side)
        if edge_dev is not None and edge_dev <= cutoff:
            return End(edge, self.figure.maximiser, True, True, side * math.inf)
        root = math.sqrt(cutoff)
        kind, a, b, ok = self._search(side, lambda p: math.sqrt(self.deviance(p)), root,
                                      deviance_tol / (2.0 * root), 0.5 * deviance_tol, edge)
        if kind == "edge":
            return End(edge, a.choi, True, ok, a.mu)
        if kind == "chord":
            # the profile is a straight line between a and b to within the tolerance
            goal = self.max_log_likelihood - 0.5 * cutoff
            value = a.value + (goal - a.log_likelihood) * (b.value - a.value) / (
                b.log_likelihood - a.log_likelihood)
            t = (value - a.value) / (b.value - a.value)
            return End(value, (1.0 - t) * a.choi + t * b.choi, False, ok, b.mu)
        return End(self._corrected(a, cutoff), a.choi, False, ok, a.mu)

    def _search(self, side: int, key, goal: float, tol: float, ll_tol: float, edge: float):
        """Tilted fits on ``side`` until key(point) = goal within ``tol``.

        ``key`` increases with |μ| along the profile (√D, or the distance of F from
        the estimate). The next |μ| comes from inverse interpolation of |μ| against
        the key — smooth even where F changes fast with μ, as on the low side of a
        fidelity, where the slope of the profile levels off — through the points
        computed on this side and the estimate (key 0 at μ = 0): quadratic inside a
        bracket, with bisection after two steps that did not halve it and a bisection
        of log|μ| while the bracket's keys are far from the goal; linear, and 50%
        further, while the goal is not yet bracketed.

        Where the profile is a straight line (its slope −μ constant: the tilted
        problem then has a whole segment of maximisers, and F(J_μ) jumps as μ
        crosses that slope) no μ hits the goal; but a concave function with values
        and slopes known at the ends a, b of a bracket lies between the chord and
        the two tangents, at most (|μ_b| − |μ_a|)·|F_b − F_a|/4 above the chord, so
        once that is below ``ll_tol`` the chord is the profile.

        Returns (kind, a, b, converged): ("point", p, None) with key(p) = goal;
        ("chord", a, b) the bracket; ("edge", p, None) when the key stays below the
        goal up to the edge of the figure's range.
        """
        scale = self._scale()
        converged = True
        slow_steps = 0
        last_width = math.inf
        for _ in range(MAX_FITS_PER_END + 1):
            known = sorted(((key(p), abs(p.mu), p) for p in self.points[1:]
                            if np.sign(p.mu) == side), key=lambda t: t[1])
            nodes = [(0.0, 0.0, self.points[0])] + known
            for k, m, p in known:
                if abs(k - goal) <= tol:
                    return "point", p, None, converged and p.converged
            lo = max((t for t in nodes if t[0] < goal), key=lambda t: t[1])
            hi_all = [t for t in known if t[0] >= goal]
            hi = min(hi_all, key=lambda t: t[1]) if hi_all else None
            if hi is None:
                if abs(lo[2].value - edge) <= 1e-10 * max(1.0, abs(edge)) or lo[1] > 1e30:
                    return "edge", lo[2], None, converged
                if lo[1] == 0.0:
                    m = goal / scale
                else:
                    prev = [t for t in nodes if t[1] < lo[1]]
                    k0, m0, _ = max(prev, key=lambda t: t[1])
                    slope = (lo[1] - m0) / (lo[0] - k0) if lo[0] > k0 else math.inf
                    m = lo[1] + 1.5 * slope * (goal - lo[0])
                    m = min(max(m, 1.2 * lo[1]), 30.0 * lo[1])
            else:
                width = hi[1] - lo[1]
                gap = 0.25 * width * abs(hi[2].value - lo[2].value)
                if gap <= ll_tol or width <= 1e-12 * hi[1]:
                    return "chord", lo[2], hi[2], converged and hi[2].converged
                if hi[0] > 3.0 * goal or lo[0] < goal / 3.0:
                    # far from the goal the key is no guide: bisect |μ| on a log scale
                    m = math.sqrt(lo[1] * hi[1]) if lo[1] > 0 else 0.25 * hi[1]
                elif slow_steps >= 2:
                    m = 0.5 * (lo[1] + hi[1])
                else:
                    m = _inverse_interpolation(nodes, lo, hi, goal)
                    if not (lo[1] + 0.01 * width < m < hi[1] - 0.01 * width):
                        m = 0.5 * (lo[1] + hi[1])
                slow_steps = slow_steps + 1 if width > 0.5 * last_width else 0
                last_width = width
            point = self.at(side * m)
            converged &= point.converged
        raise RuntimeError(f"profile search for {self.figure.name} did not converge in "
                           f"{MAX_FITS_PER_END} fits")

    def _corrected(self, point: ProfilePoint, cutoff: float) -> float:
        """f where D = cutoff, to first order from the point: dD/df = 2μ there."""
        return point.value + (cutoff - self.deviance(point)) / (2.0 * point.mu)

    def interval(self, level: float = 0.95) -> ProfileInterval:
        """The two-sided profile-likelihood interval {f : D(f) ≤ χ²₁(level)}."""
        return self._interval(level, two_sided_cutoff(level), (-1, +1), "two-sided")

    def lower_bound(self, level: float = 0.95) -> ProfileInterval:
        """The one-sided lower confidence bound at ``level`` (D = z²_level below the
        estimate); ``high`` of the result is the top of the figure's range."""
        return self._interval(level, one_sided_cutoff(level), (-1,), "lower")

    def _interval(self, level, cutoff, sides, sided) -> ProfileInterval:
        fits0, t0 = self.fits, time.perf_counter()
        ends = {+1: self.figure.high, -1: self.figure.low}
        touches, converged = False, bool(self.mle.converged)
        exact = True
        for side in sides:
            value, edge, ok = self.end(side, cutoff)
            ends[side] = value
            touches |= edge
            converged &= ok or not self.figure.concave_side(side)   # a local search anyway
            exact &= self.figure.concave_side(side)
        lo = min(max(ends[-1], self.figure.low), self.estimate)
        hi = max(min(ends[+1], self.figure.high), self.estimate)
        if sided == "lower":
            touches = touches or lo <= self.figure.low
        return ProfileInterval(self.figure.name, self.estimate, lo, hi, level, sided, cutoff,
                               bool(touches), bool(exact), self.fits - fits0,
                               time.perf_counter() - t0, bool(converged))


    # ---- test inversion: a lower bound calibrated by simulation ---------------

    def statistic(self, counts=None) -> float:
        """T = F(Ĵ), Ĵ the maximum-likelihood fit of ``counts`` (default the data's) by
        the estimator `gatescope.fit` reports (`gatescope.estimators.estimate`,
        ``"mle"``, its default options)."""
        if counts is None and self._observed is not None:
            return self._observed
        fit = estimate(self.model, "mle", counts=self.counts if counts is None else counts)
        value = self.figure.value(fit.choi)
        if counts is None:
            self._observed = value
        return value

    def simulated_processes(self, choi: np.ndarray) -> list[np.ndarray]:
        """The processes the test of the value F(``choi``) simulates, one per entry of
        ``nulls``: ``choi`` Pauli-twirled around the target (`pauli_twirl`) for
        ``"twirled"``, ``choi`` itself for ``"plain"``. A figure other than a process
        fidelity (the state fidelity, purity) simulates ``choi`` only."""
        if self.figure.unitary is None or self.model.kind == "state":
            return [choi]
        return [pauli_twirl(choi, self.figure.unitary) if null == "twirled" else choi
                for null in self.nulls]

    def _near_top(self) -> np.ndarray:
        """A physical process at the top of the figure's range to within 10⁻⁹ of its
        scale: the maximiser (the target) mixed with 10⁻⁹ of the estimate, so that it
        predicts counts wherever the estimate does and the intensities that maximise
        ℓ there are finite (the target alone may give some observed rows zero)."""
        eps = 1e-9
        return (1.0 - eps) * self.figure.maximiser + eps * self.mle.choi

    def exceedance(self, choi: np.ndarray, observed: float, *, samples: int,
                   seed, side: int = -1, as_is: bool = False) -> float:
        """Monte Carlo p-value of the value F(``choi``) against the estimate ``observed``:
        (1 + #{T* ≥ observed})/(B + 1) for ``side`` −1 (a value below the estimate),
        (1 + #{T* ≤ observed})/(B + 1) for ``side`` +1 (a value above it); with several
        simulated processes (`simulated_processes`; ``as_is``: ``choi`` alone) the
        largest of their p-values — the value is rejected only when every one of them
        rejects it.

        For each process, B = ``samples`` data sets of Poisson counts are drawn
        from it (with the intensities that maximise ℓ there, as the parametric
        bootstrap draws them) and T* = F(Ĵ*) is each one's estimate (by
        `statistic`'s estimator, warm-started at the simulated process, as the
        bootstrap warm-starts its refits; Davison & Hinkley, *Bootstrap Methods
        and their Application*, 1997, §4.2, for the Monte Carlo p-value). Data
        set b always uses the b-th child of ``SeedSequence(seed)``, so the
        p-values of different tested values, and of the processes of one value,
        share their random numbers.
        """
        sources = [choi] if as_is else self.simulated_processes(choi)
        return max(self._exceedance(source, observed, samples, seed, side)
                   for source in sources)

    def _exceedance(self, source, observed, samples, seed, side) -> float:
        t0 = time.perf_counter()
        values = simulated_values(self.likelihood, self.figure, source, samples, seed,
                                  runner=self.runner)
        beyond = sum(value >= observed if side < 0 else value <= observed for value in values)
        self.seconds += time.perf_counter() - t0
        self.simulated_fits += samples
        return (1.0 + beyond) / (samples + 1.0)

    def top_accepted(self, tail: float, *, samples: int = CALIBRATION_SAMPLES,
                     seed=0) -> bool:
        """Whether a simulated test accepts the top of a process's purity, a unitary
        channel, at one-sided ``tail``: B = ``samples`` data sets simulated from the most
        likely unitary channel found near the estimate (`best_unitary`, from the
        estimate's nearest unitary) give the p-value (1 + #{T* ≤ T})/(B + 1) of the
        purity estimate T (`exceedance`, ``side`` +1); accepted when it exceeds
        ``tail``. Near a unitary the deviance of purity 1 does not follow χ²₁ — the
        estimate can leave the unitary channels in d⁴ − d² directions, each bounded by
        positivity — so the likelihood-ratio cutoff rejects a unitary truth too often
        (benchmarks/README.md, "Two qubits: over-rotation and amplitude damping"); the
        simulated test takes the law of T where it is."""
        if not self.figure.quadratic or self.model.kind == "state":
            raise ValueError("the top test is for the purity of a process")
        start, _ = nearest_unitary(self.mle.choi)
        ll, u = best_unitary(self.likelihood, start)
        if not math.isfinite(ll):
            return False
        p = self.exceedance(choi_from_unitary(u), self.statistic(), samples=samples,
                            seed=seed, side=+1, as_is=True)
        return p > tail

    def test_inversion_lower_bound(self, level: float = 0.95, *,
                                   samples: int = CALIBRATION_SAMPLES,
                                   seed=0) -> ProfileInterval:
        """The lower confidence bound at ``level`` by inverting a simulated test: the
        end `test_inversion_end` below the estimate at tail α = 1 − level."""
        if not 0.5 < level < 1:
            raise ValueError(f"a one-sided level must lie in (0.5, 1), got {level}")
        return self._inverted(level, (-1,), 1.0 - level, "lower", samples, seed)

    def test_inversion_interval(self, level: float = 0.95, *,
                                samples: int = CALIBRATION_SAMPLES,
                                seed=0) -> ProfileInterval:
        """The two-sided interval at ``level`` by inverting simulated tests: the ends
        `test_inversion_end` at tail (1 − level)/2 on each side of the estimate (the
        same simulated data sets for both)."""
        return self._inverted(level, (-1, +1), 0.5 * (1.0 - level), "two-sided", samples,
                              seed)

    def _inverted(self, level, sides, tail, sided, samples, seed) -> ProfileInterval:
        t0, fits0, sims0 = time.perf_counter(), self.fits, self.simulated_fits
        ends = {-1: self.figure.low, +1: self.figure.high}
        cutoff, touches, converged, method = math.nan, False, True, "test-inversion"
        for side in sides:
            end = self.test_inversion_end(side, tail, samples=samples, seed=seed)
            ends[side] = end.value
            touches |= end.touches_edge
            converged &= end.converged
            if end.deviance is None:
                method = "profile"          # fell back to the profile-likelihood end
            elif math.isnan(cutoff):
                cutoff = end.deviance
        return ProfileInterval(self.figure.name, self.estimate, ends[-1], ends[+1], level,
                               sided, cutoff, bool(touches), True,
                               self.fits - fits0 + self.simulated_fits - sims0,
                               time.perf_counter() - t0, bool(converged), method)

    def test_inversion_end(self, side: int, tail: float, *,
                           samples: int = CALIBRATION_SAMPLES, seed=0) -> End:
        """The end on ``side`` (−1 below the estimate, +1 above) of the confidence set of
        a simulated test at one-sided ``tail``.

        A value f on the lower side is rejected when the estimate T = F(Ĵ) is
        larger than data from a process with figure f make plausible — its
        p-value `exceedance`, simulated at the profile maximiser J_f (the
        nuisance parameters at their constrained maximum-likelihood values;
        for a process fidelity twirled or not, `simulated_processes`),
        is at most ``tail`` — and on the upper side when T is smaller. The end
        is where the p-value crosses ``tail`` (the test-inversion bootstrap
        interval: Carpenter, J. R. Stat. Soc. B 61, 159 (1999)). The tested
        values are points of the profile, labelled by the signed root s of
        their deviance (s > 0 on ``side`` of the estimate). The first is the
        profile-likelihood end s = z_{1−tail}; steps of at least 0.5 in s (or
        the asymptotic slope −1 of Φ⁻¹(p) against s) look for a value accepted
        (p > tail) and one rejected; false position on Φ⁻¹(p) then shrinks that
        bracket to `S_TOL` — the p-values of B simulated data sets change in
        steps, so a bracket, not a root, is what can be found — or until
        `MAX_TESTED` values are tested. The end is the profile's value at the
        false-position point of the last bracket (``converged`` False when no
        bracket was found: the end is then the last value tested); the edge of
        the range when even the edge is accepted (``touches_edge``). Above the
        estimate of a fidelity, once a value is accepted and none rejected, the
        top itself is tested next (`_near_top`, one extra value): a perfect gate
        often lies at infinite deviance — a count in a row it leaves dark — while
        the p-values of the profile's values approach a limit above the tail, so
        no finite step would reach it. Only
        values on ``side`` of the estimate are tested: when even the estimate
        is rejected (data whose counts lie closer to their expectations than
        shot noise makes likely) the end is the profile-likelihood one, and
        ``deviance`` of the result is None; otherwise it is s², the deviance
        there (the calibrated cutoff). The simulated data sets are the same
        for every tested value (common random numbers), so p changes little
        between nearby values. Cost: B fits for each tested value (4 to 6 as a
        rule).
        """
        observed = self.statistic()
        z_goal = float(ndtri(tail))
        clip = 0.5 / (samples + 1.0)

        def point(s):
            if s == 0.0:
                return End(self.estimate, self.mle.choi, False, bool(self.mle.converged))
            return self.end_point(side if s > 0 else -side, s * s)

        def z_of(p):
            return float(ndtri(min(max(p, clip), 1.0 - clip)))

        tested = {}                                  # signed root s → p-value
        accepted = rejected = None                   # the largest accepted, smallest rejected s
        s = float(ndtri(1.0 - tail))                 # the profile-likelihood end first
        edge = edge_p = None
        for _ in range(MAX_TESTED):
            end = point(s)
            p = self.exceedance(end.choi, observed, samples=samples, seed=seed, side=side)
            tested[s] = p
            if p > tail:
                accepted = s if accepted is None else max(accepted, s)
                if end.touches_edge and s > 0:       # even the edge of the range is accepted
                    edge = end
                    break
            else:
                rejected = s if rejected is None else min(rejected, s)
            if accepted is not None and rejected is not None:
                if rejected - accepted <= S_TOL:
                    break
                s = accepted + (rejected - accepted) * _falsi(z_of(tested[accepted]),
                                                              z_of(tested[rejected]), z_goal)
            elif rejected is None:                   # all accepted: further from the estimate
                if side > 0 and self.figure.maximiser is not None and edge_p is None:
                    edge_p = self.exceedance(self._near_top(), observed, samples=samples,
                                             seed=seed, side=side, as_is=True)
                    if edge_p > tail:                # the whole side up to the top
                        edge = End(self.figure.high, self.figure.maximiser, True, True,
                                   math.inf)
                        break
                s = accepted + max(0.5, z_of(p) - z_goal)
            elif rejected > 0.0:                     # all rejected: back towards the estimate
                s = max(rejected - max(0.5, z_goal - z_of(p)), 0.0)
            else:
                break
        if edge is not None:
            return replace(edge, deviance=accepted * accepted)
        if accepted is None and rejected == 0.0:
            # even the estimate is rejected: no value on this side is in the confidence
            # set; the end reported is the profile-likelihood one
            end = self.end_point(side, one_sided_cutoff(1.0 - tail))
            return replace(end, deviance=None)
        converged = accepted is not None and rejected is not None
        if converged:
            s = accepted + (rejected - accepted) * _falsi(z_of(tested[accepted]),
                                                          z_of(tested[rejected]), z_goal)
        else:
            s = accepted if rejected is None else rejected
        end = point(s)
        return replace(end, converged=bool(converged and end.converged),
                       deviance=s * s if s > 0 else 0.0)

    def log_likelihood_at(self, value: float, *, value_tol: float | None = None,
                          ll_tol: float = 1e-4) -> float:
        """ℓ_p(value), by a search on μ for F(J_μ) = value (to ``value_tol``, default
        1e−4 of the rough standard error) and the first-order correction
        ℓ_p(value) ≈ ℓ(J_μ) + μ·(F(J_μ) − value) (the slope of the profile is −μ),
        or the chord of a bracket where the profile is straight to ``ll_tol``."""
        tol = 1e-4 * self._scale() if value_tol is None else value_tol
        est = self.estimate
        if abs(value - est) <= tol:
            return self.points[0].log_likelihood
        side = 1 if value > est else -1
        edge = self.figure.high if side > 0 else self.figure.low
        if side > 0 and self.figure.maximiser is not None and abs(value - edge) <= tol:
            self.edge_deviance(side)
            return self._edge_loglik[side]
        kind, a, b, _ = self._search(side, lambda p: side * (p.value - est),
                                     side * (value - est), tol, ll_tol, edge)
        if kind == "edge":
            raise ValueError(f"{self.figure.name} = {value} is beyond the reach of the profile")
        if kind == "chord":
            return a.log_likelihood + (value - a.value) * (b.log_likelihood - a.log_likelihood) / (
                b.value - a.value)
        return a.log_likelihood + a.mu * (a.value - value)

    def deviance_at(self, value: float, **kw) -> float:
        """D(value) = 2(ℓ̂ − ℓ_p(value)) (see `log_likelihood_at`)."""
        return max(2.0 * (self.max_log_likelihood - self.log_likelihood_at(value, **kw)), 0.0)


#: `best_unitary` stops after this many steps, or when a step gains less than
#: `UNITARY_TOL` (relative) in ℓ.
UNITARY_MAXITER = 500
UNITARY_TOL = 1e-12


def best_unitary(likelihood: PoissonLikelihood, start: np.ndarray, *,
                 maxiter: int = UNITARY_MAXITER, tol: float = UNITARY_TOL):
    """(ℓ, U): the unitary channel ρ ↦ UρU† of largest likelihood near ``start``.

    Riemannian gradient ascent on the unitary group with Armijo backtracking
    (Absil, Mahony & Sepulchre, *Optimization Algorithms on Matrix Manifolds*,
    2008, §4.2; the step U ← U·exp(tΩ) as in Abrudan, Eriksson & Koivunen,
    IEEE Trans. Signal Process. 56, 1134 (2008)). With J = |U>><<U| and
    G = ∂ℓ/∂J, dℓ = 2 Re <<dU|G|U>>, so the Euclidean gradient is
    E = unvec(2G|U>>) and the ascent direction is U·Ω, Ω = skew(U†E),
    skew(X) = (X − X†)/2, along which ℓ grows at rate ‖Ω‖². The problem is
    not concave: the result is a local maximum. ℓ = −∞ (returned at once)
    when the start predicts no counts in a row that has some.
    """
    d = start.shape[0]
    u = np.asarray(start, dtype=complex)
    ev = likelihood.evaluate(choi_from_unitary(u))
    f = float(ev.log_likelihood)
    if not math.isfinite(f):
        return -math.inf, u
    step = 1.0
    for _ in range(maxiter):
        e = (2.0 * (likelihood.gradient(ev) @ operator_vector(u))).reshape(d, d).T
        a = u.conj().T @ e
        omega = 0.5 * (a - a.conj().T)
        rate = float(np.vdot(omega, omega).real)
        while True:
            cand = u @ expm(step * omega)
            ev_c = likelihood.evaluate(choi_from_unitary(cand))
            f_c = float(ev_c.log_likelihood)
            if math.isfinite(f_c) and f_c >= f + 1e-4 * step * rate:
                break
            step *= 0.5
            if step < 1e-20:                         # no ascent left at this precision
                return f, u
        gain = f_c - f
        u, ev, f = cand, ev_c, f_c
        step *= 2.0
        if gain <= tol * max(abs(f), 1.0):
            break
    return f, u


def _falsi(z_accepted: float, z_rejected: float, z_goal: float) -> float:
    """Where between an accepted (0) and a rejected (1) value the p-value's normal score
    reaches ``z_goal``, on the straight line through their scores, kept within
    [0.2, 0.8] (a false-position step that always shrinks the bracket)."""
    if z_accepted == z_rejected:
        return 0.5
    return min(max((z_accepted - z_goal) / (z_accepted - z_rejected), 0.2), 0.8)


def pauli_twirl(choi: np.ndarray, unitary: np.ndarray) -> np.ndarray:
    """The process U∘T(U†∘Φ), Φ of Choi matrix ``choi``, T the Pauli twirl
    T(Ψ)(ρ) = Σ_m χ_mm P_m ρ P_m (the chi matrix of Ψ with its off-diagonal part
    removed). It keeps the process fidelity to U (χ_00 of U†∘Φ), the trace of J,
    hence the average gate fidelity, and the Pauli error rates χ_mm; it drops the
    coherent (χ_0m) and non-unital parts of the error (Dankert et al., Phys. Rev. A
    80, 012304 (2009), for the twirl)."""
    d = unitary.shape[0]
    back = np.kron(np.eye(d), np.asarray(unitary, dtype=complex).conj().T)
    chi = choi_to_chi(back @ choi @ back.conj().T)
    twirled = chi_to_choi(np.diag(np.diag(chi).real).astype(complex))
    forth = back.conj().T
    return forth @ twirled @ forth.conj().T


def _inverse_interpolation(nodes, lo, hi, goal: float) -> float:
    """|μ| at key = goal: quadratic through lo, hi and the node nearest to them
    (linear between lo and hi when the three keys are not distinct)."""
    others = [t for t in nodes if t is not lo and t is not hi]
    (k0, m0), (k1, m1) = (lo[0], lo[1]), (hi[0], hi[1])
    linear = m0 + (goal - k0) * (m1 - m0) / (k1 - k0) if k1 != k0 else 0.5 * (m0 + m1)
    if not others:
        return linear
    k2, m2, _ = min(others, key=lambda t: min(abs(t[1] - m0), abs(t[1] - m1)))
    if len({k0, k1, k2}) < 3:
        return linear
    return (m0 * (goal - k1) * (goal - k2) / ((k0 - k1) * (k0 - k2))
            + m1 * (goal - k0) * (goal - k2) / ((k1 - k0) * (k1 - k2))
            + m2 * (goal - k0) * (goal - k1) / ((k2 - k0) * (k2 - k1)))


@dataclass
class FigureProfile:
    """What `profile_figures` found for one figure.

    ``interval`` is the two-sided `ProfileInterval` (None when not asked for),
    ``lower`` the one-sided lower bound (None when not asked for);
    ``touches_boundary`` is True when the top of the range (F = 1) lies inside
    the two-sided interval, i.e. the data are consistent with a perfect gate (or
    the target state) at that level; ``fits`` and ``seconds`` cover the whole
    profile, its own maximum-likelihood fit included.
    """

    name: str
    estimate: float
    interval: ProfileInterval | None
    lower: ProfileInterval | None
    touches_boundary: bool
    fits: int
    seconds: float


def simulated_values(likelihood, figure, source, samples: int, seed, *,
                     runner=None) -> np.ndarray:
    """F(Ĵ*) of ``samples`` data sets simulated from the process ``source``: Poisson
    counts with the intensities that maximise ``likelihood`` there (as the parametric
    bootstrap draws them), each refitted by ``mle`` warm-started at ``source``. Data set
    b uses the b-th child of ``SeedSequence(seed)``; the refits run on ``runner`` (a
    `gatescope.parallel.Runner` whose shared object is ``(model, figure)``) when given,
    with the same values in the same order."""
    model = likelihood.model
    ev = likelihood.evaluate(source)
    means = np.maximum(np.asarray(model.expected_counts(source, ev.intensities), dtype=float),
                       0.0)
    items = [(means, source, child) for child in np.random.SeedSequence(seed).spawn(samples)]
    if runner is None:
        return np.array([_simulated_value((model, figure), item) for item in items])
    values = np.empty(samples)
    for index, value in runner.map(_simulated_value, items):
        values[index] = value
    return values


def _simulated_value(shared, item) -> float:
    """F of one simulated data set of `Profile.exceedance`: Poisson counts of mean
    ``means`` drawn from the seed sequence ``child``, refitted by ``mle`` warm-started at
    ``source``. ``shared`` is ``(model, figure)``, ``item`` ``(means, source, child)``
    (a task of `gatescope.parallel.Runner`)."""
    model, figure = shared
    means, source, child = item
    fit = estimate(model, "mle", counts=resample_counts(means, child), start=source)
    return float(figure.value(fit.choi))


def profile_figures(model, target, *, level: float = 0.95, interval: bool = True,
                    lower_bound: bool = False, names=None, start=None, counts=None,
                    fit_options: dict | None = None, invert_bounds=(), invert_intervals=(),
                    seed=0, samples: int | None = None, done=None, workers: int = 1) -> dict:
    """Profile-likelihood intervals and lower bounds of the figures of ``model``.

    Parameters
    ----------
    model : MeasurementModel or StateModel
    target : the target unitary (process) or state, or None
    level : confidence level of both the two-sided interval and the lower bound
    interval, lower_bound : bool
        Which of the two to compute.
    names : iterable of str, optional
        Figures to profile (default `profiled_names`: every one this model and
        target allow); a name they do not allow is skipped.
    start : array, optional
        Warm start of the profile's own maximum-likelihood fit (the point
        estimate of the pipeline).
    invert_bounds, invert_intervals : iterable of str
        Figures whose lower bound is `Profile.test_inversion_lower_bound`, and
        whose two-sided interval is `Profile.test_inversion_interval`
        (``samples`` simulated data sets per tested value, random numbers from
        ``seed``, an int or a sequence of ints for `numpy.random.SeedSequence`;
        ``samples`` None: `CALIBRATION_SAMPLES`), instead of the profile-likelihood ones;
        only `INVERTED_FIGURES` take them.
    done : callable, optional
        Called with each figure's name once its intervals are computed (progress).
    workers : int
        Processes for the simulated refits of the test inversions and of the purity's
        top test (`gatescope.parallel.Runner`); the numbers do not depend on it.

    Returns
    -------
    dict name → `FigureProfile`. All figures share one maximum-likelihood fit.
    For a trace-preserving process F_avg = (d·F_pro + 1)/(d + 1), an increasing
    affine map, so ℓ_p of F_avg is ℓ_p of F_pro at the preimage and the
    intervals of ``average_gate_fidelity`` are the images of those of
    ``process_fidelity`` (computed once when both are asked for).
    """
    options = dict(FIT_OPTIONS if fit_options is None else fit_options)
    samples = CALIBRATION_SAMPLES if samples is None else samples
    allowed = profiled_names(model, target)
    names = allowed if names is None else tuple(n for n in names if n in allowed)
    t0 = time.perf_counter()
    mle = fit_mle(model, counts=counts, start=start, **options) if names else None
    shared = time.perf_counter() - t0
    out = {}
    for name in names:
        if (name == "average_gate_fidelity" and "process_fidelity" in out
                and not model.trace_decreasing):
            out[name] = _affine_image(out["process_fidelity"], name, model.dim)
            if done is not None:
                done(name)
            continue
        prof = Profile(model, named_figure(name, target, model.dim, model.kind), counts=counts,
                       mle=mle, fit_options=options)
        invertible = name in INVERTED_FIGURES
        simulates = (invertible and name in (*invert_intervals, *invert_bounds)
                     or _top_tested(prof))
        with Runner(workers if simulates else 1, shared=(model, prof.figure)) as runner:
            prof.runner = runner
            out[name] = _figure_profile(prof, name, level, interval, lower_bound, invertible,
                                        invert_intervals, invert_bounds, samples, seed, shared)
        if done is not None:
            done(name)
    return out


def _figure_profile(prof, name, level, interval, lower_bound, invertible, invert_intervals,
                    invert_bounds, samples, seed, shared) -> FigureProfile:
    """The `FigureProfile` of one figure for `profile_figures` (its parameters)."""
    two = low = None
    if interval:
        two = (prof.test_inversion_interval(level, samples=samples, seed=seed)
               if name in invert_intervals and invertible else prof.interval(level))
        if two.high < prof.figure.high and _top_accepted(prof, level, samples, seed):
            two = replace(two, high=prof.figure.high, touches_boundary=True)
    if lower_bound:
        low = (prof.test_inversion_lower_bound(level, samples=samples, seed=seed)
               if name in invert_bounds and invertible else prof.lower_bound(level))
    top = prof.consistent_with_top(level)
    if two is not None and two.method == "test-inversion":
        top = bool(two.high >= prof.figure.high)      # the calibrated interval decides
    elif top is None:
        # purity: no single maximiser; the two-sided interval says whether it reaches 1
        if two is None:
            two_top = prof.end_point(+1, two_sided_cutoff(level))
            top = bool(two_top.touches_edge) or _top_accepted(prof, level, samples, seed)
        else:
            top = bool(two.high >= prof.figure.high)
    return FigureProfile(name, prof.estimate, two, low, top, prof.fits + 1,
                         prof.seconds + shared)


#: The purity's top is tested by simulation (`Profile.top_accepted`) for processes up to
#: this dimension (two qubits): B refits of a three-qubit process take minutes.
TOP_TEST_MAX_DIM = 4


def _top_tested(prof: Profile) -> bool:
    """Whether the top of the figure is tested by simulation: the purity of a process
    up to `TOP_TEST_MAX_DIM`."""
    return (prof.figure.quadratic and prof.model.kind != "state"
            and prof.model.dim <= TOP_TEST_MAX_DIM)


def _top_accepted(prof: Profile, level: float, samples: int, seed) -> bool:
    """Whether the top of a process's purity (`_top_tested`) passes
    `Profile.top_accepted` at the tail of a two-sided interval at ``level``; False for
    every other figure."""
    return _top_tested(prof) and prof.top_accepted(0.5 * (1.0 - level), samples=samples,
                                                   seed=seed)


def _affine_image(pro: FigureProfile, name: str, dim: int) -> FigureProfile:
    """The `FigureProfile` of F_avg = (d·F_pro + 1)/(d + 1) from that of F_pro (a
    trace-preserving process)."""
    image = lambda f: (dim * f + 1.0) / (dim + 1.0)   # noqa: E731

    def mapped(iv):
        if iv is None:
            return None
        return replace(iv, name=name, estimate=image(iv.estimate), low=image(iv.low),
                       high=image(iv.high), fits=0, seconds=0.0)

    return FigureProfile(name, image(pro.estimate), mapped(pro.interval), mapped(pro.lower),
                         pro.touches_boundary, 0, 0.0)


__all__ = ["ProfiledFigure", "ProfilePoint", "ProfileInterval", "Profile", "FigureProfile",
           "profile_figures", "profiled_names", "process_fidelity_figure",
           "average_gate_fidelity_figure", "state_fidelity_figure", "purity_figure",
           "INVERTED_FIGURES",
           "named_figure", "two_sided_cutoff", "one_sided_cutoff", "FIT_OPTIONS",
           "pauli_twirl", "CALIBRATION_SAMPLES", "best_unitary", "NULLS", "default_nulls",
           "simulated_values",
           "PROFILED_FIGURES"]
