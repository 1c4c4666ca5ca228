"""Factored maximum likelihood over CPTP maps: Riemannian L-BFGS on the Stiefel manifold.

The ``mle`` estimator of processes. The same estimate as the accelerated
projected gradient of :mod:`gatescope.estimators.mle` (``mle-pg``: the Poisson
log-likelihood of docs/file-formats.md maximised over CPTP maps, intensities profiled
out, through `likelihood.PoissonLikelihood`, so backgrounds, normalisation
groups and known input rates work unchanged), reached through a different
parameterisation that needs no d² × d² eigen-decomposition per iteration.

Parameterisation (Burer & Monteiro, Math. Program. 95, 329 (2003))
------------------------------------------------------------------
A completely positive map with Kraus operators K_1 … K_r has the Choi matrix
(README, Conventions: input factor first)

    J = Σ_k |K_k>><<K_k| = W W†,   W = [|K_1>>, …, |K_r>>]  (d² × r),
    W[(i, a), k] = <<(i, a)|K_k>> = K_k[a, i].

The solver holds the same numbers as the d × (d·r) matrix U = W.reshape(d, d·r)
(row i: input index; column (a, k)). U is, up to the order of its columns, the
transpose of the stacked Kraus isometry V = [K_1; …; K_r] (d·r × d), and

    U U† = Tr_out J = (Σ_k K_k† K_k)ᵀ = (V†V)ᵀ,

so the map is trace preserving exactly when U has orthonormal rows: the
feasible set is the complex Stiefel manifold {U : U U† = I_d}. For a trace
non-increasing model (``model.trace_decreasing``) the variable is the
completed isometry Z = [U | C] (C a d × d block, Cᵀ = L of [V; L] with
Σ K†K + L†L = I): Z Z† = I, and U U† = I − C C† ⪯ I is exactly the trace
non-increasing condition. Without a completion block Z = U.

Geometry (Edelman, Arias & Smith, SIAM J. Matrix Anal. Appl. 20, 303 (1998);
Absil, Mahony & Sepulchre, *Optimization Algorithms on Matrix Manifolds*,
Princeton (2008))
-----------------------------------------------------------------------------
Real inner product <A, B> = Re Tr A†B on complex matrices (the embedded
metric). With G = ∂ℓ/∂J (Hermitian, `PoissonLikelihood.gradient`),
dℓ = Re Tr(G dJ) = <2GW, dW>, so the Euclidean gradient with respect to Z
is E = [2(GW).reshape(d, d·r) | 0]. Tangent space at Z: {ξ : Zξ† + ξZ† = 0};
orthogonal projection P_Z(X) = X − sym(XZ†) Z, sym(A) = (A + A†)/2; the
Riemannian gradient is P_Z(E). Retraction: the polar factor
R_Z(ξ) = ((Z+ξ)(Z+ξ)†)^{-1/2}(Z + ξ) = (I + ξξ†)^{-1/2}(Z + ξ) (Absil et al.,
§4.1.1, Example 4.1.3 and its complex analogue). Vector transport: projection
onto the new tangent space (Absil et al., §8.1.3).

Algorithm
---------
L-BFGS (Nocedal & Wright, *Numerical Optimization*, 2nd ed., Springer (2006),
Algorithm 7.4 two-loop recursion, Algorithm 7.5) on −ℓ, with the stored
pairs (s, y) transported by projection and kept only when <s, y> > 0. The
initial matrix H₀ = γ·P_Z ∘ M is the inverse of the "Gram metric" on the
Kraus columns, M(X) = X_W (W†W + δ·Tr(W†W)·I)^{-1}, δ = ``shift`` (chosen
from the effective rank of the start unless given), scaled by
γ = <s, y>/<y, H₀y> (Nocedal & Wright, eq. (7.20)) — the scaled gradient
of Tong, Ma & Chi (J. Mach. Learn. Res. 22, 150 (2021)) with a shift that
keeps it from undoing the factored form's insensitivity to rows predicted
near zero. Step: Armijo backtracking along the retraction curve
(Nocedal & Wright, Algorithm 3.1; Absil et al., Definition 4.2.2), sufficient
decrease c₁ = 1e−4, halving, with an allowance of 4 ulp of ℓ. Where ℓ is flat
to its rounding error ε_ℓ (`rounding_noise`: 2·eps·Σ(|n log ν| + ν), about
1e−9 at 1000 counts per basis on two qubits, 1e−4 at 1e8) a step with
ℓ(new) ≤ ℓ + ε_ℓ is accepted on the approximate Wolfe conditions
(2c₁ − 1)φ'(0) ≥ φ'(t) ≥ 0.9 φ'(0) of Hager & Zhang (SIAM J. Optim. 16, 170
(2005)), φ(t) = −ℓ along the curve, so that the gradient can still be reduced
where differences of ℓ are only rounding.

Rank. The solver starts at full rank (r = d²; the starting Choi matrix mixed
with a fraction ``mix`` of the completely depolarising channel, as
``fit_mle`` does) or, warm started, at the numerical rank of the start. Every
``prune_every`` iterations the columns are rotated to the eigenbasis of W†W
(the nonzero eigenvalues μ_k of J; the rotation W ↦ WP with P unitary
leaves J unchanged) and a column is dropped when μ_k < ``prune_tol``·μ_max,
or μ_k < ``drop_tol``·μ_max while the dual slack along it is positive (the
likelihood pushes it to zero); a drop is kept only if ℓ does not decrease
beyond rounding. Columns come back through the certificate below.

Certificate and stopping rule
-----------------------------
The convex problem max ℓ(J) s.t. J ⪰ 0, Tr_out J = I has the Lagrangian
optimality conditions S = Y⊗I − G ⪰ 0, S J = 0 for a Hermitian d × d
multiplier Y (Y ⪰ 0 as well for Tr_out J ⪯ I). At a critical point of the
factored problem E = Λ Z with Λ = sym(E Z†) (the tangent-space projection
of E vanishes), and (Y⊗I)W = GW holds with Y = Λ/2 (in the stacked-isometry
convention of V this is the Mᵀ⊗I of the dual slack). So S W = 0 at every
critical point, and such a point is the global maximum exactly when S ⪰ 0.
For a concave ℓ every Hermitian Y' with Y'⊗I ⪰ G (and Y' ⪰ 0 for trace
non-increasing maps) bounds the gap: ℓ* − ℓ(J) ≤ Tr Y' − Tr(GJ). The solver
reports this bound with Y' = Y + c·I, c = max(0, −λ_min(S)) (``gap_bound``;
conservative: λ_min(S) also contains the residual gradient along the small
Kraus columns). The profiled ℓ is concave on the physical set when the
intensities are known, or when every group's rows sum to the same
probability for every physical map (complete analyser bases with equal
exposure, no background); otherwise the bound is indicative only.

The iteration pauses for the checks when the relative change of ℓ over the
last step is at most ``tol`` and ‖P_Z(E)‖ ≤ g·2‖G‖_F‖W‖_F (g starts at
``opt_tol`` and is cut tenfold each time the checks send the iteration back),
or when no step along the search direction changes ℓ beyond rounding. The
checks then take one step of ``fit_mle`` from J — J⁺ = Π(J + t∇ℓ), Π the
exact CPTP (or trace non-increasing) projection, t the first of 1/N, 1/2N, …
(N the total counts) passing ``fit_mle``'s ascent test, with the rounding
allowance max(1e−12|ℓ|, ε_ℓ) — and the fit has ``converged`` when

1. that step changes ℓ by at most ``tol`` relative and its optimality residual
   ‖J⁺ − J‖/(t‖∇ℓ‖) is at most ``opt_tol``: ``fit_mle``'s own stopping rule,
   in its units, at least as strictly applied (``fit_mle`` starts at t = 1/N
   and lets t grow, and the residual does not increase with t); or, as in
   ``fit_mle``, neither that step nor the manifold step changes ℓ beyond its
   rounding error ε_ℓ (ℓ at its maximum to working precision); and
2. the certificate holds: S compressed to the orthogonal complement of the
   range of J (eigenvalues of W†W above ``range_tol``·μ_max) has
   d·max(0, −λ_min) ≤ ``gap_tol``·max(1, |ℓ|). Otherwise its eigenvectors of
   negative eigenvalue become new Kraus columns (weight chosen by comparing ℓ
   at a few trial weights) and the iteration resumes, at most ``max_rounds``
   times; if no trial weight raises ℓ beyond ε_ℓ, the negative slack is
   rounding and the certificate counts as holding (``stop_reason`` says so).

When the manifold iteration can no longer change ℓ beyond rounding but the
projected step still raises it, the iteration continues from the projected
step's point, factored afresh. ``converged`` is False when ``maxiter`` or
``max_rounds`` is exhausted before the checks pass; ``stop_reason`` says which. ``info`` reports the
optimality residual, the gap bound and every check.
"""

from __future__ import annotations

import time

import numpy as np

from ..kernels import (gram_inverse, lbfgs_direction, lbfgs_direction_numpy, lbfgs_pair,
                       lbfgs_pair_numpy, polar_rows, polar_rows_numpy, tangent_project,
                       tangent_project_numpy)
from ..likelihood import PoissonLikelihood
from ..model import MeasurementModel
from ..projection import project_physical
from .base import Fit
from .linear import fit_pls
from .mle import fit_mle

#: The compiled kernels are used up to this input dimension d; from d = 8 the NumPy twins
#: (benchmarks/factored_speed.py, "kernels": the kernels make the whole fit 1.4–2× faster
#: at d = 4; at d = 8 runs ranged from 0.76× to 1.1×, the products being large enough for
#: NumPy's own BLAS calls to cost as little).
KERNEL_MAX_DIM = 4


def _tangent(z, x):
    if z.shape[0] <= KERNEL_MAX_DIM:
        return tangent_project(z, x)
    return tangent_project_numpy(z, x)


def _polar(x):
    if x.shape[0] <= KERNEL_MAX_DIM:
        return polar_rows(np.ascontiguousarray(x))
    return polar_rows_numpy(x)


def _direction(*args):
    return (lbfgs_direction if args[6] <= KERNEL_MAX_DIM else lbfgs_direction_numpy)(*args)


def _pair(z, step, g_old, rgrad):
    return (lbfgs_pair if z.shape[0] <= KERNEL_MAX_DIM else lbfgs_pair_numpy)(z, step, g_old,
                                                                              rgrad)


def _inner(a, b) -> float:
    return float(np.vdot(a, b).real)


def _herm(a):
    return 0.5 * (a + a.conj().T)


def _real(x):
    return np.ascontiguousarray(x).view(np.float64).reshape(-1)


# --------------------------------------------------------------------------
# The problem in the factored variables
# --------------------------------------------------------------------------

class _Point:
    """Z with its Choi matrix, likelihood evaluation and (after `differentiate`) gradients."""

    __slots__ = ("z", "rank", "choi", "ev", "f", "grad", "egrad", "rgrad")


class _Problem:
    def __init__(self, lik: PoissonLikelihood, d: int, slack: int):
        self.lik = lik
        self.d = d
        self.slack = slack          # columns of the completion block C (d, or 0)

    def kraus(self, z):
        """W (d² × r), the columns |K_k>>, from Z = [U | C]."""
        u = z[:, :z.shape[1] - self.slack] if self.slack else z
        return u.reshape(self.d * self.d, -1)

    def assemble(self, w, like):
        """Z from Kraus columns W and the completion block of ``like``."""
        u = w.reshape(self.d, -1)
        if self.slack:
            u = np.hstack([u, like[:, -self.slack:]])
        return np.ascontiguousarray(u)

    def point(self, z) -> _Point:
        pt = _Point()
        pt.z = z
        w = self.kraus(z)
        pt.rank = w.shape[1]
        pt.choi = w @ w.conj().T
        pt.ev = self.lik.evaluate(pt.choi)
        pt.f = -pt.ev.log_likelihood
        pt.grad = None
        return pt

    def differentiate(self, pt: _Point) -> _Point:
        d = self.d
        g = self.lik.gradient(pt.ev)
        e = 2.0 * (g @ self.kraus(pt.z)).reshape(d, -1)
        if self.slack:
            e = np.hstack([e, np.zeros((d, self.slack), dtype=complex)])
        pt.grad = g
        pt.egrad = np.ascontiguousarray(e)
        pt.rgrad = _tangent(pt.z, pt.egrad)
        return pt

    def multiplier(self, pt: _Point) -> np.ndarray:
        """Y = sym(E_U U†)/2: the multiplier of Tr_out J = I at a critical point."""
        cols = pt.z.shape[1] - self.slack
        return 0.5 * _herm(pt.egrad[:, :cols] @ pt.z[:, :cols].conj().T)

    def gauge(self, z):
        """Eigenvalues μ (ascending) and unitary P of W†W: the columns of WP are orthogonal."""
        w = self.kraus(z)
        mu, p = np.linalg.eigh(_herm(w.conj().T @ w))
        return mu, p

    def rotate(self, x, p):
        """Kraus columns of a Z-shaped matrix times P (a rotation and/or a selection)."""
        return self.assemble(self.kraus(x) @ p, x)


def factor_choi(choi: np.ndarray, d: int, slack: int, floor: float = 0.0) -> np.ndarray:
    """Z for a CP Choi matrix: W from its eigenvectors with eigenvalues above
    ``floor``·max (and above 0), the completion block C = (I − U U†)^{1/2} for a trace
    non-increasing model, rows made orthonormal by the polar factor."""
    w, q = np.linalg.eigh(_herm(choi))
    keep = (w > floor * max(w[-1], 0.0)) & (w > 0)
    u = (q[:, keep] * np.sqrt(w[keep])).reshape(d, -1)
    if slack:
        tw, tv = np.linalg.eigh(_herm(u @ u.conj().T))
        if tw[-1] > 1.0:                           # scale back a start that is not TNI
            u = ((tv / np.sqrt(np.maximum(tw, 1.0))) @ tv.conj().T) @ u
            tw, tv = np.linalg.eigh(_herm(u @ u.conj().T))
        c = (tv * np.sqrt(np.clip(1.0 - tw, 0.0, None))) @ tv.conj().T
        u = np.hstack([u, c])
    return _polar(np.ascontiguousarray(u))


class _Memory:
    """The L-BFGS pairs (complex, Z-shaped) in a ring buffer."""

    def __init__(self, m: int):
        self.m = m
        self.s = self.y = None
        self.rho = np.zeros(m)
        self.order: list[int] = []

    def reset(self):
        self.s = self.y = None
        self.order = []

    def add(self, s, y, sy):
        if self.s is None or self.s.shape[1:] != s.shape:
            self.s = np.zeros((self.m,) + s.shape, dtype=complex)
            self.y = np.zeros((self.m,) + s.shape, dtype=complex)
            self.order = []
        k = len(self.order) if len(self.order) < self.m else self.order.pop(0)
        self.s[k] = s
        self.y[k] = y
        self.rho[k] = 1.0 / sy
        self.order.append(k)

    def direction(self, g, z, d, cols, shift):
        return _direction(g, z, self.s, self.y, self.rho, np.array(self.order, dtype=np.int64),
                          d, cols, gram_inverse(z, d, cols, shift))

    def transform(self, fn):
        """Replace every stored pair by (fn(s), fn(y)); pairs with <s, y> ≤ 0 are dropped."""
        if not self.order:
            return
        pairs = [(fn(self.s[k]), fn(self.y[k])) for k in self.order]
        self.reset()
        for s, y in pairs:
            sy = _inner(s, y)
            if sy > 0:
                self.add(s, y, sy)


def _prune(prob: _Problem, pt: _Point, prune_tol: float, drop_tol: float):
    """Candidate with negligible or shrinking Kraus directions removed, or None.

    Returns (candidate point, kept columns mask, rotation P)."""
    d = prob.d
    mu, p = prob.gauge(pt.z)
    top = max(mu[-1], 1e-300)
    small = mu < drop_tol * top
    if not small.any() or small.all():
        return None, None, None
    drop = mu < prune_tol * top
    idx = np.nonzero(small & ~drop)[0]
    if idx.size:
        # dual slack along each small column: ŵ†(Y⊗I − G)ŵ·μ > 0 means ℓ pushes it to zero
        cols = pt.z.shape[1] - prob.slack
        y = prob.multiplier(pt)
        wt = prob.kraus(pt.z) @ p[:, idx]
        gw = (0.5 * pt.egrad[:, :cols]).reshape(d * d, -1) @ p[:, idx]
        yw = (y @ wt.reshape(d, -1)).reshape(d * d, -1)
        drop[idx] = np.einsum("ij,ij->j", wt.conj(), yw - gw).real > 0
    if not drop.any():
        return None, None, None
    keep = ~drop
    return prob.point(_polar(prob.rotate(pt.z, p[:, keep]))), keep, p


def certificate(prob: _Problem, pt: _Point, range_tol: float = 1e-8):
    """(gap bound, λ_min of S outside the range of J, eigenvectors of negative eigenvalue).

    S = Y⊗I − G with Y the multiplier (its positive part for a trace
    non-increasing model). The gap bound is Tr Y' − Tr(GJ) with
    Y' = Y + max(0, −λ_min(S))·I (see the module docstring). The range of J
    is spanned by the Kraus directions with eigenvalues above range_tol·max;
    the eigenvectors returned are those of S compressed to its orthogonal
    complement, as d²-vectors.
    """
    d = prob.d
    y = prob.multiplier(pt)
    if prob.slack:
        yw, yv = np.linalg.eigh(y)
        y = (yv * np.maximum(yw, 0.0)) @ yv.conj().T
    s = _herm(np.kron(y, np.eye(d)) - pt.grad)
    smin = float(np.linalg.eigvalsh(s)[0])
    gap = float(np.trace(y).real + max(0.0, -smin) * d - np.vdot(pt.grad, pt.choi).real)
    mu, p = prob.gauge(pt.z)
    big = mu > range_tol * max(mu[-1], 1e-300)
    basis_range = (prob.kraus(pt.z) @ p[:, big]) / np.sqrt(mu[big])
    if basis_range.shape[1] >= d * d:
        return gap, np.inf, np.zeros((d * d, 0), dtype=complex)
    pw, pv = np.linalg.eigh(np.eye(d * d) - basis_range @ basis_range.conj().T)
    comp = pv[:, pw > 0.5]
    sw, sv = np.linalg.eigh(_herm(comp.conj().T @ s @ comp))
    return gap, float(sw[0]), comp @ sv[:, sw < 0]


def rounding_noise(model: MeasurementModel, lik: PoissonLikelihood, ev) -> float:
    """Rounding error to expect in a computed ℓ: 2·eps·Σ_k (|n_k log ν_k| + ν_k).

    ℓ is a sum of terms n log ν − ν whose partial sums can be far larger than
    the total (large counts). Measured against an extended-precision sum and
    against the spread over summation orders, this estimate is within a factor
    of a few of the error (1e−9 at 1000 counts per basis, 1e−4 at 1e8, two qubits).
    """
    nu = ev.intensities[model.group_index] * model.exposure * ev.probabilities + model.background
    nu = np.maximum(nu, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(lik.counts > 0, lik.counts * np.abs(np.log(np.where(nu > 0, nu, 1.0))), 0.0)
    return float(2.0 * np.finfo(float).eps * (terms.sum() + nu.sum()))


def gradient_mapping_residual(model: MeasurementModel, lik: PoissonLikelihood, pt: _Point,
                              step: float, noise: float = 0.0):
    """``fit_mle``'s optimality residual at J: ‖Π(J + t∇ℓ) − J‖_F/(t‖∇ℓ‖_F).

    t is the first of ``step``, step/2, … (shortened further, never lengthened, by the
    curvature seen in a failed trial) at which Π(J + t∇ℓ) passes ``fit_mle``'s ascent
    test ℓ(J⁺) ≥ ℓ(J) + <∇ℓ, J⁺ − J> − ‖J⁺ − J‖²/(2t) − max(1e−12|ℓ|, noise), ``noise``
    the rounding error of ℓ (`rounding_noise`; below 1e−12|ℓ| at ordinary counts, where
    the test is ``fit_mle``'s).
    Returns (residual, t, projections made, ℓ at J⁺ = Π(J + t∇ℓ), J⁺).
    """
    g = pt.grad
    gnorm = max(float(np.linalg.norm(g)), 1e-300)
    t = step
    n = 0
    while True:
        cand = project_physical(model, pt.choi + t * g, tol=1e-12).choi
        n += 1
        ev = lik.evaluate(cand)
        delta = cand - pt.choi
        dist2 = float(np.vdot(delta, delta).real)
        lin = pt.ev.log_likelihood + float(np.vdot(g, delta).real)
        if ev.finite and ev.log_likelihood >= lin - dist2 / (2 * t) - max(1e-12 * abs(lin), noise):
            break
        if ev.finite and dist2 > 0 and lin > ev.log_likelihood:
            t = min(0.5 * t, 0.9 * dist2 / (2.0 * (lin - ev.log_likelihood)))
        else:
            t *= 0.5
        if t < 1e-300:
            break
    return float(np.sqrt(dist2) / t / gnorm), t, n, float(ev.log_likelihood), cand


def effective_rank(choi: np.ndarray) -> float:
    """exp of the entropy of the normalised positive eigenvalues of a Choi matrix (1 for a
    unitary channel, d² for the completely depolarising one)."""
    w = np.linalg.eigvalsh(_herm(np.asarray(choi, dtype=complex)))
    w = w[w > 0]
    p = w / w.sum()
    return float(np.exp(-np.sum(p * np.log(p))))


def auto_shift(start: np.ndarray) -> float:
    """The shift δ of the Gram metric for a start of this effective rank (see ``shift``)."""
    r_eff = effective_rank(start)
    if r_eff < 1.2:
        return 0.1
    return 0.003 if r_eff < 2.0 else 0.001


def fit_mle_factored(model: MeasurementModel, *, counts=None, start=None, tol: float = 1e-10,
                     maxiter: int = 3000, opt_tol: float = 1e-4, memory: int = 10,
                     shift="auto", mix: float = 1e-3, warm: str = "mix",
                     prune_tol: float = 1e-14, drop_tol: float = 1e-5, prune_every: int = 10,
                     range_tol: float = 1e-8, gap_tol: float = 1e-9, max_rounds: int = 8,
                     record: bool = False) -> Fit:
    """Poisson maximum likelihood over CPTP maps by Riemannian L-BFGS on the Kraus isometry.

    Parameters
    ----------
    model : MeasurementModel
    counts : array, optional
        Counts per row (default: the experiment's).
    start : (d², d²) array, optional
        Starting Choi matrix (physical); default the ``pls`` estimate.
    tol, opt_tol : float
        Relative likelihood change and gradient-mapping residual, in the units
        of :func:`gatescope.estimators.fit_mle` (see the module docstring).
        Defaults as in ``fit_mle``.
    maxiter : int
        Maximum number of L-BFGS iterations.
    memory : int
        L-BFGS pairs kept.
    shift : float or "auto"
        δ > 0 of the Gram metric H₀ (see the module docstring); "auto" chooses
        it from the effective rank r_eff = exp(−Σ p log p), p the normalised
        eigenvalues of the starting Choi matrix: 0.1 for r_eff < 1.2 (near
        pure), 0.003 up to 2, 0.001 beyond (measured on 2- and 3-qubit data:
        near-pure fits need the damping against rows predicted near zero,
        mixed ones converge several times faster without it).
    mix : float
        Fraction of the completely depolarising channel mixed into the start
        (more, up to all of it, if a row with counts still has rate zero).
    warm : {"mix", "rank"}
        With ``start`` given: "mix" treats it like a cold start (mixing, full
        rank); "rank" starts at the numerical rank of ``start`` (eigenvalues
        above 1e−12·max) when every row with counts has a positive rate there,
        and lets the certificate add directions.
    prune_tol, drop_tol, prune_every, range_tol, gap_tol, max_rounds
        Rank handling and certificate, see the module docstring.
    record : bool
        Keep (ℓ, step, relative change, ‖grad‖ ratio, rank) per iteration in
        ``info["history"]``.

    Returns
    -------
    Fit
        ``method = "mle"``; ``info`` holds ``solver = "factored"``,
        ``optimality_residual`` (of the last check's projected step),
        ``gap_bound``, ``min_slack_outside`` (λ_min of the compressed S),
        ``rank``, ``evaluations``, ``gradients``, ``projections``, ``pruned``,
        ``grown``, ``flat_steps`` (steps taken on the approximate Wolfe
        conditions), ``checks`` (one dict per check) and ``history``.
    """
    if model.kind == "state":
        # A density matrix is fitted by the accelerated projected gradient (its projection,
        # onto the simplex of eigenvalues, is cheap; the factored form is for processes):
        # the same maximum, reported as mle.
        fit = fit_mle(model, counts=counts, start=start, tol=tol, maxiter=maxiter,
                      opt_tol=opt_tol, mix=mix)
        fit.method = "mle"
        fit.info["solver"] = "projected gradient"
        return fit
    t0 = time.perf_counter()
    lik = PoissonLikelihood(model, counts)
    d = model.dim
    d2 = d * d
    slack = d if model.trace_decreasing else 0
    prob = _Problem(lik, d, slack)
    pt = None
    if start is None:
        start = fit_pls(model, counts=counts).choi
    elif warm == "rank":
        cand = prob.point(factor_choi(np.asarray(start, dtype=complex), d, slack, floor=1e-12))
        if cand.ev.finite:
            pt = cand
    elif warm != "mix":
        raise ValueError(f"warm must be 'mix' or 'rank', got {warm!r}")
    if shift == "auto":
        shift = auto_shift(start)
    if pt is None:
        depolarized = np.eye(d2, dtype=complex) / d
        for amount in (mix, 1e-2, 1e-1, 1.0):
            x = (1.0 - amount) * np.asarray(start, dtype=complex) + amount * depolarized
            pt = prob.point(factor_choi(x, d, slack))
            if pt.ev.finite:
                break
    prob.differentiate(pt)
    noise = rounding_noise(model, lik, pt.ev)
    n_evals = n_grads = 1
    n_proj = n_pruned = n_grown = n_flat = n_restarts = 0
    mem = _Memory(memory)
    history = []
    checks = []
    it = 0
    rounds = 0
    inner_gtol = opt_tol
    converged = False
    stop_reason = "maximum number of iterations reached"
    last_change = np.inf

    def try_prune(pt, keep_memory):
        nonlocal n_evals, n_grads, n_pruned
        trial, keep, rot = _prune(prob, pt, prune_tol, drop_tol)
        if trial is None:
            return pt
        n_evals += 1
        if not (trial.ev.finite and trial.f <= pt.f + 4e-16 * abs(pt.f)):
            return pt
        new = prob.differentiate(trial)
        n_grads += 1
        n_pruned += int((~keep).sum())
        if keep_memory:
            zn = new.z
            mem.transform(lambda v: _tangent(zn, prob.rotate(v.reshape(d, -1), rot[:, keep])))
        else:
            mem.reset()
        return new

    while True:
        inner = "maxiter"
        while it < maxiter:
            it += 1
            z = pt.z
            g = -pt.rgrad                                   # gradient of −ℓ on the manifold
            if mem.order:
                p, slope = mem.direction(g, z, d, z.shape[1] - slack, shift)
            else:
                p = -g * (1e-2 / max(float(np.linalg.norm(g)), 1e-300))
                slope = _inner(g, p)
            if slope >= 0:                                  # not a descent direction: restart
                mem.reset()
                p = -g * (1e-2 / max(float(np.linalg.norm(g)), 1e-300))
                slope = _inner(g, p)
            t = 1.0
            tight = 4e-16 * abs(pt.f)
            ok = False
            while True:
                cand = prob.point(_polar(z + t * p))
                n_evals += 1
                if cand.ev.finite and cand.f <= pt.f + 1e-4 * t * slope + tight:
                    ok = True
                    break
                if cand.ev.finite and cand.f <= pt.f + noise:
                    # ℓ flat to rounding: accept on the approximate Wolfe conditions
                    prob.differentiate(cand)
                    n_grads += 1
                    dphi = -_inner(cand.rgrad, _tangent(cand.z, p))
                    if 0.9 * slope <= dphi <= (2e-4 - 1.0) * slope:
                        ok = True
                        n_flat += 1
                        break
                    cand.grad = None
                if -t * slope < max(noise, tight) or t < 1e-20:
                    break
                t *= 0.5
            if not ok:
                inner = "rounding"
                break
            if cand.grad is None:
                prob.differentiate(cand)
                n_grads += 1
            s, y, sy, ss, yy = _pair(cand.z, t * p, g, cand.rgrad)
            if sy > 1e-12 * np.sqrt(ss * yy):
                mem.add(s, y, sy)
            last_change = (pt.f - cand.f) / max(1.0, abs(pt.f))
            pt = cand
            gratio = float(np.linalg.norm(pt.rgrad)
                           / max(2.0 * np.linalg.norm(pt.grad) * np.sqrt(np.trace(pt.choi).real),
                                 1e-300))
            if record:
                history.append((-pt.f, t, last_change, gratio, pt.rank))
            if it % prune_every == 0 and pt.rank > 1:
                pt = try_prune(pt, keep_memory=True)
            if abs(last_change) <= tol and gratio <= inner_gtol:
                inner = "small"
                break
        if pt.rank > 1:
            pt = try_prune(pt, keep_memory=False)
        noise = rounding_noise(model, lik, pt.ev)
        gap, smin, grow = certificate(prob, pt, range_tol)
        cert_ok = d * max(0.0, -smin) <= gap_tol * max(1.0, abs(pt.f))
        cert_note = "dual certificate holds"
        if not cert_ok and rounds < max_rounds and it < maxiter:
            # grow: the eigenvectors of negative dual slack become new Kraus columns
            best = None
            for weight in (1e-2, 1e-4, 1e-6, 1e-8, 1e-10):
                w = np.hstack([prob.kraus(pt.z), np.sqrt(weight) * grow])
                trial = prob.point(_polar(prob.assemble(w, pt.z)))
                n_evals += 1
                if trial.ev.finite and (best is None or trial.f < best.f):
                    best = trial
            checks.append({"iteration": it, "log_likelihood": -pt.f, "gap_bound": gap,
                           "min_slack_outside": smin, "rank": pt.rank, "inner": inner,
                           "growth_gain": None if best is None else pt.f - best.f,
                           "noise": noise})
            rounds += 1
            if best is not None and best.f < pt.f - noise:
                pt = prob.differentiate(best)
                n_grads += 1
                n_grown += grow.shape[1]
                mem.reset()
                continue
            # no step along those directions changes ℓ beyond its rounding error
            cert_ok = True
            cert_note = ("dual slack negative outside the range of J only at rounding level "
                         "(adding those directions does not change the likelihood measurably)")
        residual, t_res, n, ll_step, choi_step = gradient_mapping_residual(
            model, lik, pt, 1.0 / max(lik.total_counts, 1.0), noise)
        n_proj += n
        checks.append({"iteration": it, "log_likelihood": -pt.f, "residual": residual,
                       "projected_step_gain": ll_step + pt.f, "noise": noise, "step": t_res,
                       "gap_bound": gap, "min_slack_outside": smin, "rank": pt.rank,
                       "inner": inner})
        step_change = (ll_step + pt.f) / max(1.0, abs(pt.f))
        if cert_ok and residual <= opt_tol and step_change <= tol:
            converged = True
            stop_reason = ("relative likelihood change and optimality residual below tolerance; "
                           + cert_note)
            break
        if cert_ok and inner == "rounding" and ll_step <= -pt.f + noise:
            # As in fit_mle: neither the manifold step nor the projected-gradient step changes ℓ
            # beyond its rounding error, so ℓ is at its maximum to working precision.
            converged = True
            stop_reason = ("log-likelihood at its maximum to rounding precision (no step changes "
                           "it beyond rounding); " + cert_note)
            break
        if it >= maxiter:
            break
        if rounds >= max_rounds:
            stop_reason = "optimality checks still failing after the last rank/tolerance round"
            break
        rounds += 1
        inner_gtol *= 0.1
        if inner == "rounding" and ll_step > -pt.f + noise:
            # The manifold iteration cannot raise ℓ beyond rounding but the projected step
            # does: continue from that step's point, factored afresh.
            restart = prob.point(factor_choi(choi_step, d, slack, floor=prune_tol))
            n_evals += 1
            if restart.ev.finite and restart.f < pt.f:
                pt = prob.differentiate(restart)
                n_grads += 1
                n_restarts += 1
                mem.reset()
                continue
            stop_reason = ("no step changes the likelihood beyond rounding, but the "
                           "projected-gradient step still does: optimality residual above opt_tol")
            break
    last = checks[-1]
    info = {"solver": "factored", "shift": shift,
            "optimality_residual": last.get("residual", np.nan),
            "gap_bound": last["gap_bound"],
            "min_slack_outside": last["min_slack_outside"], "rank": pt.rank,
            "evaluations": n_evals, "gradients": n_grads, "projections": n_proj,
            "pruned": n_pruned, "grown": n_grown, "flat_steps": n_flat,
            "restarts_from_projected_step": n_restarts, "checks": checks,
            "history": history}
    return Fit("mle", pt.choi, pt.ev.intensities, pt.ev.log_likelihood, bool(converged), it,
               stop_reason, time.perf_counter() - t0, info)


__all__ = ["fit_mle_factored", "certificate", "gradient_mapping_residual", "factor_choi",
           "effective_rank", "auto_shift", "rounding_noise"]
