"""Confidence intervals of figures of merit from bootstrap values.

Constructions (``method=``), at level 1 − α, from the bootstrap values θ*
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
`gatescope.bootstrap.run_bootstrap` raises a `GatescopeWarning` whenever the bootstrap bias of
a figure exceeds its spread — except for ``mle`` with the ``normal``
interval: near the boundary its refits can sit more than a spread below the
estimate while the estimate itself is nearly unbiased (a CZ bench with
backgrounds, F = 0.9610: estimate 0.9607, mean of the refits 0.9582, spread
0.0015), and the normal interval, which ignores that bias, keeps its
coverage.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.special import ndtr, ndtri

from .options import choice, fraction

INTERVALS = ("percentile", "basic", "bc", "normal")
DEFAULT_INTERVAL = "normal"
#: The interval constructions `gatescope.fit` takes: the bootstrap ones, the profile
#: likelihood and the test inversion (`gatescope.profile`, for the figures they cover).
FIT_INTERVALS = INTERVALS + ("profile", "test-inversion")
#: The constructions of `FIT_INTERVALS` that `gatescope.profile` computes.
PROFILE_INTERVALS = ("profile", "test-inversion")
#: Constructions of a one-sided lower bound (`Figure.lower_bound_method`).
LOWER_BOUND_METHODS = ("profile", "test-inversion")


@dataclass
class Figure:
    """One figure of merit: its value and, when error bars were computed, an interval.

    ``ci`` is (low, high) at confidence ``level`` (a fraction, e.g. 0.95).
    ``determined`` is False for a figure the data do not determine (its value
    is the estimator's choice among processes that fit the data equally well,
    `gatescope.checks.undetermined_figures`).

    ``interval_method`` names the construction of ``ci``: a bootstrap one of
    `INTERVALS`, ``"profile"`` or ``"test-inversion"`` (`gatescope.profile`); None
    when unknown.
    ``lower_bound`` is the one-sided lower confidence bound at ``level``,
    None when not computed; ``lower_bound_method`` its construction,
    `LOWER_BOUND_METHODS`: ``"profile"`` (profile likelihood) or
    ``"test-inversion"`` (calibrated by simulated data sets, `gatescope.profile`).
    ``touches_boundary`` is True
    when the top of the figure's range (F = 1: a perfect gate, or the target
    state) lies inside the profile-likelihood interval at ``level`` — the data
    are then consistent with it, and the interval is one-sided; None when no
    profile was computed.
    """

    value: float
    ci: tuple[float, float] | None = None
    level: float | None = None
    determined: bool = True
    interval_method: str | None = None
    lower_bound: float | None = None
    touches_boundary: bool | None = None
    lower_bound_method: str | None = None

    def __float__(self) -> float:
        return float(self.value)


def parameter_range(name: str, dim: int, kind: str = "process"):
    """The values the true figure ``name`` can take for a CPTP process on ``dim`` dimensions
    (or, with ``kind="state"``, for a state on ``dim`` dimensions).

    ``None`` for a figure without a known range. Fidelities, the trace,
    the unitarity and the concurrence lie in [0, 1]; the purity Tr J²/d² in
    [1/d², 1]; the smallest eigenvalue of a Choi matrix (trace d, d²
    eigenvalues) in [0, 1/d]; a diamond distance in [0, 2]. For a state
    (`state_parameter_range`): the purity in [1/d, 1], the von Neumann entropy
    in [0, log₂ d] bits, the negativities in [0, 1/2], the log-negativity in
    [0, 1], ``chsh_max`` in [0, 2√2] (Cirel'son, Lett. Math. Phys. 4, 93
    (1980)), the other state figures in [0, 1].
    """
    if kind == "state":
        return state_parameter_range(name, dim)
    unit = (0.0, 1.0)
    ranges = {"process_fidelity": unit, "average_gate_fidelity": unit, "trace": unit,
              "purity": (1.0 / dim**2, 1.0), "min_eigenvalue": (0.0, 1.0 / dim),
              "unitarity": unit, "nearest_unitary_fidelity": unit,
              "process_fidelity_local_phases": unit, "truth_table_fidelity": unit,
              "concurrence": unit, "diamond_distance": (0.0, 2.0)}
    return ranges.get(name)


def state_parameter_range(name: str, dim: int):
    """The values the true state figure ``name`` can take for a state on ``dim``
    dimensions (`parameter_range`); None for an unknown name."""
    unit = (0.0, 1.0)
    if name.startswith("negativity_"):
        return (0.0, 0.5)                   # one qubit against the rest: (2 − 1)/2 at most
    ranges = {"state_fidelity": unit, "purity": (1.0 / dim, 1.0),
              "von_neumann_entropy": (0.0, math.log2(dim)), "linear_entropy": unit,
              "concurrence": unit, "tangle": unit, "entanglement_of_formation": unit,
              "negativity": (0.0, 0.5), "log_negativity": unit,
              "chsh_max": (0.0, 2.0 * math.sqrt(2.0))}
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
    fraction(level, "level")
    choice(method, INTERVALS, "interval", "interval")
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
