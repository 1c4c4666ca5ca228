"""Poisson maximum likelihood over the physical set by accelerated projected gradient
(``mle-pg``; the ``mle`` of processes is `gatescope.estimators.factored`).

Accelerated projected gradient ascent, the intensities profiled out: FISTA
with backtracking (Beck & Teboulle, SIAM J. Imaging Sci. 2, 183 (2009))
and function-value adaptive restart (O'Donoghue & Candès, Found. Comput.
Math. 15, 715 (2015)), projecting onto CPTP maps as in Knee, Bolduc, Leach
& Gauger, Phys. Rev. A 98, 062336 (2018). The same loop fits a state: its
projection step is then the one onto density matrices
(`gatescope.projection.project_physical`).
"""

from __future__ import annotations

import time

import numpy as np

from ..errors import NumericalError
from ..likelihood import PoissonLikelihood, Tilt, TiltedLikelihood
from ..model import MeasurementModel, StateModel
from ..projection import project_physical
from .base import Fit
from .linear import fit_pls

#: Growth of the step after an accepted iteration (backtracking halves it when too long).
STEP_GROWTH = 1.1
#: Slack of the ascent test, relative to |ℓ|: rounding of ℓ must not reject a good step.
ASCENT_SLACK = 1e-12
#: A decrease of ℓ by a plain projected-gradient step no larger than this (relative)
#: is rounding: ℓ is then at its maximum to working precision.
ROUNDING_CHANGE = 1e-10
#: Backtracking gives up below this step (the line search cannot increase ℓ).
MIN_STEP = 1e-300
#: Mixtures with the completely depolarising channel tried for a start with a finite ℓ.
START_MIXTURES = (1e-2, 1e-1, 1.0)


def fit_mle(model: MeasurementModel | StateModel, *, counts=None, start=None,
            tol: float = 1e-10, maxiter: int = 3000, opt_tol: float = 1e-4, mix: float = 1e-3,
            proj_tol: float = 1e-9, proj_maxiter: int = 100, tilt: Tilt | None = None) -> Fit:
    """Poisson maximum likelihood over CPTP maps, or over density matrices for a state
    model (accelerated projected gradient).

    Parameters
    ----------
    model : MeasurementModel or StateModel
    counts : array, optional
        Counts per row (default: the experiment's).
    start : (d², d²) array, or (d, d) for a state, optional
        Starting point (physical); default the ``pls`` estimate. It is
        mixed with a fraction ``mix`` of the model's centre, the completely
        depolarising channel or the maximally mixed state (more, up to all of
        it, if that still leaves a row with counts at rate zero) so that every
        row starts with a positive rate.
    tol : float
        Stop when the relative change of the log-likelihood over one step is
        below ``tol`` and the optimality residual below ``opt_tol``.
    maxiter : int
        Maximum number of iterations (``stop_reason`` says when it is hit).
    opt_tol : float
        Bound on the optimality residual ‖G‖_F / ‖∇ℓ‖_F, where G = (J⁺ − Y)/t
        is the gradient mapping of the last step: zero exactly at the
        constrained optimum, and scale free (it does not grow with the
        counts).
    mix : float
        Fraction of the model's centre mixed into the start.
    proj_tol, proj_maxiter : float, int
        Tolerance and iteration limit of the inner projections.
    tilt : likelihood.Tilt, optional
        Maximise ℓ(J) + tilt(J) instead of ℓ(J) (one point of a profile
        likelihood, `gatescope.profile`). The returned ``log_likelihood`` is
        ℓ alone at the maximiser; ``info["objective"]`` is ℓ + tilt there.
        Without a tilt the computation is unchanged.

    Raises
    ------
    NumericalError
        When not even the completely depolarising channel gives every row
        with counts a positive rate (no finite starting point).

    Notes
    -----
    One iteration: the gradient at the extrapolated point Y, a step
    J⁺ = Π(Y + t∇ℓ(Y)) with Π the projection onto the physical set, accepted when ℓ(J⁺) ≥
    ℓ(Y) + <∇ℓ, J⁺ − Y> − ‖J⁺ − Y‖²/(2t) (else t is halved), then a
    restart of the momentum whenever ℓ decreased.
    """
    t0 = time.perf_counter()
    lik = PoissonLikelihood(model, counts)
    if tilt is not None:
        lik = TiltedLikelihood(lik, tilt)
    if start is None:
        pls = fit_pls(model, counts=counts)
        start, mult = pls.choi, pls.info["multiplier"]
    else:
        mult = None
    # Mix in as little of the centre (the completely depolarising channel, the maximally
    # mixed state) as it takes for every row with counts to have a positive rate (a warm
    # start sits on the boundary of the set).
    depolarized = model.centre()
    for amount in (mix,) + START_MIXTURES:
        x = (1.0 - amount) * np.asarray(start, dtype=complex) + amount * depolarized
        ev = lik.evaluate(x)
        if ev.finite:
            break
    else:
        raise NumericalError("no starting point with a finite likelihood: some row with counts "
                             "has a zero rate for every process")
    x_prev = x
    ev_x = ev_prev = ev
    momentum = 1.0
    step = 1.0 / max(lik.total_counts, 1.0)   # refined by backtracking at the first iteration
    residual = np.inf
    stop_reason = "maximum number of iterations reached"
    converged = False
    it = 0
    restarts = 0
    n_proj = 0
    for it in range(1, maxiter + 1):
        new_momentum = 0.5 * (1.0 + np.sqrt(1.0 + 4.0 * momentum * momentum))
        beta = (momentum - 1.0) / new_momentum
        if beta > 0:
            y = x + beta * (x - x_prev)
            # the forward map is linear: extrapolate the probabilities as well
            ev_y = lik.evaluate(y, (1.0 + beta) * ev_x.probabilities
                                - beta * ev_prev.probabilities)
            if not ev_y.finite:
                y, ev_y, beta, new_momentum = x, ev_x, 0.0, 1.0
        else:
            y, ev_y = x, ev_x
        grad = lik.gradient(ev_y)
        while True:
            # Inner projections may be inexact: every iterate is exactly CPTP anyway (positive
            # part, then the trace-preserving congruence), and the ascent test below is
            # made on the point actually obtained.
            proj = project_physical(model, y + step * grad, multiplier=mult, tol=proj_tol,
                                    maxiter=proj_maxiter)
            n_proj += 1
            cand = proj.choi
            ev_c = lik.evaluate(cand)
            delta = cand - y
            dist2 = np.vdot(delta, delta).real
            if ev_c.finite and (ev_c.log_likelihood >= ev_y.log_likelihood
                                + np.vdot(grad, delta).real - dist2 / (2.0 * step)
                                - ASCENT_SLACK * abs(ev_y.log_likelihood)):
                break
            step *= 0.5
            if step < MIN_STEP:
                break
        mult = proj.multiplier
        residual = np.sqrt(dist2) / step / max(np.linalg.norm(grad), 1e-300)
        change = (ev_c.log_likelihood - ev_x.log_likelihood) / max(1.0, abs(ev_x.log_likelihood))
        if change < 0:
            # function-value restart: drop the momentum, retry from x
            momentum = 1.0
            x_prev, ev_prev = x, ev_x
            restarts += 1
            if beta == 0.0:
                # A plain projected-gradient step that passed the ascent test yet lowered ℓ:
                # the change is rounding noise, so ℓ is at its maximum to working precision.
                converged = -change <= ROUNDING_CHANGE
                stop_reason = ("log-likelihood at its maximum to rounding precision" if converged
                               else "the line search cannot increase the likelihood")
                break
            continue
        x_prev, ev_prev, x, ev_x = x, ev_x, cand, ev_c
        momentum = new_momentum
        if change <= tol and residual <= opt_tol:
            converged = True
            stop_reason = "relative likelihood change and optimality residual below tolerance"
            break
        step *= STEP_GROWTH
    info = {"optimality_residual": float(residual), "restarts": restarts,
            "projections": n_proj, "multiplier": mult}
    log_likelihood = ev_x.log_likelihood
    if tilt is not None:
        info["objective"] = log_likelihood
        log_likelihood = log_likelihood - ev_x.tilt
    return Fit("mle-pg", x, ev_x.intensities, log_likelihood, converged, it, stop_reason,
               time.perf_counter() - t0, info)
