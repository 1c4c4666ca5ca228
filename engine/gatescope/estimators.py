"""Process estimators behind one interface and one result type.

Every estimator is a function ``(model, *, counts=None, start=None, tol,
maxiter) -> Fit`` registered in `ESTIMATORS`:

* ``lin`` — linear inversion: least squares on relative frequencies in
  Pauli-transfer-matrix coordinates with trace preservation imposed
  exactly; may be unphysical (negative Choi eigenvalues).
* ``pls`` — projected least squares: ``lin`` followed by the Euclidean
  projection onto the CPTP set (Guţă, Kahn, Kueng & Tropp, J. Phys. A 53,
  204001 (2020); Surawy-Stepney, Kahn, Kueng & Guţă, Quantum 6, 844 (2022)
  for processes).
* ``mle`` — Poisson maximum likelihood over CPTP maps, the intensities
  profiled out, by accelerated projected gradient ascent: FISTA with
  backtracking (Beck & Teboulle, SIAM J. Imaging Sci. 2, 183 (2009)) and
  function-value adaptive restart (O'Donoghue & Candès, Found. Comput.
  Math. 15, 715 (2015)), projecting onto CPTP maps as in Knee, Bolduc,
  Leach & Gauger, Phys. Rev. A 98, 062336 (2018).

Options share their names across estimators: ``tol`` (relative change of
the log-likelihood) and ``maxiter``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
from scipy.sparse.linalg import LinearOperator, lsqr

from . import kernels
from .channels import ptm_to_choi
from .likelihood import PoissonLikelihood
from .model import MeasurementModel
from .projection import project_cptni, project_cptp


@dataclass
class Fit:
    """What every estimator returns (the same fields for all of them).

    Attributes
    ----------
    method : str
    choi : (d², d²) complex array, CONTRACT §2 Choi matrix
    intensities : (G,) array, fitted λ_g of every normalisation group
    log_likelihood : float
        Poisson log-likelihood Σ [n log ν − ν − log n!] at ``choi`` and
        ``intensities`` (−inf for an unphysical estimate that predicts a
        non-positive rate where counts were seen).
    converged : bool
    iterations : int
    stop_reason : str
    seconds : float, wall time of the estimator
    info : dict, estimator-specific extras (for example ``min_eigenvalue``
        of the linear-inversion estimate, or the optimality residual)
    """

    method: str
    choi: np.ndarray
    intensities: np.ndarray
    log_likelihood: float
    converged: bool
    iterations: int
    stop_reason: str
    seconds: float
    info: dict = field(default_factory=dict)


# --------------------------------------------------------------------------
# Linear inversion
# --------------------------------------------------------------------------

_DENSE_LIMIT = 20_000_000         # entries of the pair design matrix solved densely


def _frequencies(model: MeasurementModel, counts: np.ndarray, probs: np.ndarray):
    """Relative frequencies with moment intensities λ_g = Σ(n − b)/Σ(s·e·p)."""
    g = model.group_index
    if model.fixed_intensities is not None:
        lam = model.fixed_intensities
    else:
        num = np.bincount(g, weights=counts - model.background, minlength=model.n_groups)
        den = np.bincount(g, weights=model.exposure * probs, minlength=model.n_groups)
        with np.errstate(divide="ignore", invalid="ignore"):
            lam = np.where(den > 0, num / den, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = lam[g] * model.exposure
        freq = np.where(scale > 0, (counts - model.background) / scale, 0.0)
    return freq, lam


def _linear_least_squares(model: MeasurementModel, freq: np.ndarray) -> np.ndarray:
    """PTM R minimising Σ_k (f_k − p_k(R))², p = (1/d) e_mᵀ R r_p.

    For a trace-preserving model the first row is fixed, R[0] = (1, 0, …);
    for a trace non-increasing one every entry is free.
    """
    d = model.dim
    d2 = d * d
    r, e = model.pauli_coordinates()
    mult = model.pairs_present().reshape(-1)
    sums = np.bincount(model.pair_index, weights=freq, minlength=mult.size)
    q = np.nonzero(mult)[0]
    p_idx, m_idx = np.divmod(q, model.n_meas)
    weight = np.sqrt(mult[q].astype(float))
    first = 0 if model.trace_decreasing else 1
    n_free = d2 - first
    # the fixed trace-preserving first row contributes Tr(E)·Tr(ρ)/d
    fixed_table = (e[:, :1] @ r[:, :1].T) / d if first else np.zeros((model.n_meas, model.n_preps))
    target = weight * (sums[q] / mult[q] - fixed_table[m_idx, p_idx])
    e1 = e[:, first:] / d
    n_cols = n_free * d2
    if q.size == mult.size and np.all(mult == mult[0]):
        # complete table, equal multiplicity: the design is a Kronecker product
        y = (sums / mult).reshape(model.n_preps, model.n_meas).T - fixed_table
        sol = (np.linalg.pinv(e1) @ y @ np.linalg.pinv(r).T).reshape(-1)
    elif q.size * n_cols <= _DENSE_LIMIT:
        design = (e1[m_idx][:, :, None] * r[p_idx][:, None, :]).reshape(q.size, n_cols)
        sol = np.linalg.lstsq(weight[:, None] * design, target, rcond=None)[0]
    else:
        def matvec(v):
            table = e1 @ v.reshape(n_free, d2) @ r.T
            return weight * table.reshape(-1)[q]

        def rmatvec(u):
            table = np.zeros(model.n_preps * model.n_meas)
            table[q] = weight * u
            return (e1.T @ table.reshape(model.n_preps, model.n_meas).T @ r).reshape(-1)

        op = LinearOperator((q.size, n_cols), matvec=matvec, rmatvec=rmatvec, dtype=float)
        sol = lsqr(op, target, atol=1e-14, btol=1e-14, iter_lim=10 * n_cols)[0]
    ptm = np.zeros((d2, d2))
    ptm[0, 0] = 1.0
    ptm[first:] = sol.reshape(n_free, d2)
    return ptm


def project_physical(model: MeasurementModel, x: np.ndarray, *, multiplier=None,
                     tol: float = 1e-12, maxiter: int = 100):
    """Euclidean projection onto the model's physical set: CPTP maps, or completely
    positive trace non-increasing maps for ``trace = "decreasing"``."""
    if model.trace_decreasing:
        return project_cptni(x, tol=tol)
    return project_cptp(x, multiplier=multiplier, tol=tol, maxiter=maxiter)


def fit_lin(model: MeasurementModel, *, counts=None, start=None, tol: float = 1e-10,
            maxiter: int = 200) -> Fit:
    """Linear inversion by least squares on relative frequencies.

    Relative frequencies are f_k = (n_k − b_k)/(λ_g s_k e_k). The
    intensities λ_g are first those of the completely depolarising channel
    (exact for any trace-preserving process when every group holds complete
    analyser bases with equal exposure) and are then re-estimated from the
    current linear estimate until they stop changing (``maxiter`` passes,
    relative change ``tol``). The result can have negative eigenvalues;
    ``info["min_eigenvalue"]`` reports the smallest.
    """
    t0 = time.perf_counter()
    lik = PoissonLikelihood(model, counts)
    d = model.dim
    probs = model.forward(np.eye(d * d, dtype=complex) / d)
    lam_prev = None
    passes = 0
    for passes in range(1, maxiter + 1):
        freq, lam = _frequencies(model, lik.counts, probs)
        ptm = _linear_least_squares(model, freq)
        choi = ptm_to_choi(ptm)
        probs = model.forward(choi)
        settled = lam_prev is not None and np.allclose(lam, lam_prev, rtol=tol, atol=0)
        if settled:
            break
        lam_prev = lam
    ev = lik.evaluate(choi)
    min_eig = float(np.linalg.eigvalsh(choi)[0])
    reason = ("least squares; intensities settled after {} passes".format(passes) if settled
              else "least squares; intensities still changing after the last pass")
    return Fit("lin", choi, ev.intensities, ev.log_likelihood, bool(settled), passes, reason,
               time.perf_counter() - t0, {"min_eigenvalue": min_eig})


def fit_pls(model: MeasurementModel, *, counts=None, start=None, tol: float = 1e-10,
            maxiter: int = 200) -> Fit:
    """Projected least squares: the ``lin`` estimate projected onto CPTP maps
    (onto trace non-increasing CP maps for ``trace = "decreasing"``)."""
    t0 = time.perf_counter()
    lin = fit_lin(model, counts=counts, tol=tol, maxiter=maxiter)
    proj = project_physical(model, lin.choi)
    lik = PoissonLikelihood(model, counts)
    ev = lik.evaluate(proj.choi)
    info = {"lin_min_eigenvalue": lin.info["min_eigenvalue"],
            "projection_iterations": proj.iterations, "multiplier": proj.multiplier}
    return Fit("pls", proj.choi, ev.intensities, ev.log_likelihood, proj.converged,
               lin.iterations, "projection of the linear-inversion estimate",
               time.perf_counter() - t0, info)


# --------------------------------------------------------------------------
# Maximum likelihood
# --------------------------------------------------------------------------

def fit_mle(model: MeasurementModel, *, counts=None, start=None, tol: float = 1e-10,
            maxiter: int = 3000, opt_tol: float = 1e-4, mix: float = 1e-3,
            record: bool = False, proj_tol: float = 1e-9, proj_maxiter: int = 100) -> Fit:
    """Poisson maximum likelihood over CPTP maps (accelerated projected gradient).

    Parameters
    ----------
    model : MeasurementModel
    counts : array, optional
        Counts per row (default: the experiment's).
    start : (d², d²) array, optional
        Starting Choi matrix (CPTP); default the ``pls`` estimate. It is
        mixed with a fraction ``mix`` of the completely depolarising channel
        (more, up to all of it, if that still leaves a row with counts at
        rate zero) so that every row starts with a positive rate.
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

    Notes
    -----
    One iteration: the gradient at the extrapolated point Y, a step
    J⁺ = Π(Y + t∇ℓ(Y)) with Π the CPTP projection, accepted when ℓ(J⁺) ≥
    ℓ(Y) + <∇ℓ, J⁺ − Y> − ‖J⁺ − Y‖²/(2t) (else t is halved), then a
    restart of the momentum whenever ℓ decreased.
    """
    t0 = time.perf_counter()
    lik = PoissonLikelihood(model, counts)
    d = model.dim
    d2 = d * d
    if start is None:
        pls = fit_pls(model, counts=counts)
        start, mult = pls.choi, pls.info["multiplier"]
    else:
        mult = None
    # Mix in as little of the completely depolarising channel as it takes for every row
    # with counts to have a positive rate (a warm start sits on the boundary of the set).
    depolarized = np.eye(d2, dtype=complex) / d
    for amount in (mix, 1e-2, 1e-1, 1.0):
        x = (1.0 - amount) * np.asarray(start, dtype=complex) + amount * depolarized
        ev = lik.evaluate(x)
        if ev.finite:
            break
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
    history = []
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
                                - 1e-12 * abs(ev_y.log_likelihood)):
                break
            step *= 0.5
            if step < 1e-300:
                break
        mult = proj.multiplier
        residual = np.sqrt(dist2) / step / max(np.linalg.norm(grad), 1e-300)
        change = (ev_c.log_likelihood - ev_x.log_likelihood) / max(1.0, abs(ev_x.log_likelihood))
        if record:
            history.append((ev_c.log_likelihood, step, residual, beta, change))
        if change < 0:
            # function-value restart: drop the momentum, retry from x
            momentum = 1.0
            x_prev, ev_prev = x, ev_x
            restarts += 1
            if beta == 0.0:
                # A plain projected-gradient step that passed the ascent test yet lowered ℓ:
                # the change is rounding noise, so ℓ is at its maximum to working precision.
                converged = -change <= 1e-10
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
        step *= 1.1
    return Fit("mle", x, ev_x.intensities, ev_x.log_likelihood, converged, it, stop_reason,
               time.perf_counter() - t0,
               {"optimality_residual": float(residual), "restarts": restarts,
                "projections": n_proj, "multiplier": mult, "history": history})


ESTIMATORS = {"lin": fit_lin, "pls": fit_pls, "mle": fit_mle}
METHODS = tuple(ESTIMATORS)


def estimate(model: MeasurementModel, method: str = "mle", **options) -> Fit:
    """Run the estimator named ``method`` (one of `METHODS`) on ``model``."""
    try:
        estimator = ESTIMATORS[method]
    except KeyError:
        raise ValueError(f"unknown method {method!r}; known: {', '.join(METHODS)}") from None
    return estimator(model, **options)


__all__ = ["Fit", "ESTIMATORS", "METHODS", "estimate", "fit_lin", "fit_pls", "fit_mle", "kernels"]
