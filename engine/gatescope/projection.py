"""Euclidean projections onto the physical sets: CPTP maps {J ⪰ 0, Tr_out J = I}, trace
non-increasing CP maps, and density matrices (`project_density`, at the end).

For CPTP maps we solve the dual problem. For a Hermitian X, the projection
``argmin ½‖J − X‖_F²  s.t.  J ⪰ 0, Tr_out J = I`` is ``J(Y) = [X + Y ⊗ I]_+``
(positive part), where the Hermitian multiplier Y (d × d, acting on the
input factor) maximises the concave, once-differentiable dual

    θ(Y) = Tr Y − ½‖[X + Y ⊗ I]_+‖² + ½‖X‖²,   ∇θ(Y) = I − Tr_out J(Y).

The dual is solved by a semismooth Newton method with a line search: the
generalised Hessian of the positive part is known in closed form from the
eigen-decomposition (Qi & Sun, SIAM J. Matrix Anal. Appl. 28, 360 (2006);
Zhao, Sun & Toh, SIAM J. Optim. 20, 1737 (2010) for the regularised
Newton step; the dual formulation as in Boyd & Xiao, SIAM J. Matrix Anal.
Appl. 27, 532 (2005)). Each iteration costs one Hermitian eigen-decomposition
of size d² plus a d²-dimensional linear solve; a warm-started call (the
multiplier of a nearby point) typically needs 1–3 iterations. After a step
that cut the residual ‖∇θ‖ at least tenfold the next step reuses the same
matrix (a chord step: the eigenvectors have barely moved, and building the
matrix costs more than the eigen-decomposition at d ≥ 4); a step that
gains less brings a fresh matrix.

``J(Y)`` is positive by construction. A final congruence
``J ← (M ⊗ I) J (M ⊗ I)``, ``M = (Tr_out J)^{-1/2}``, removes the last
~1e−12 of trace-preservation error without leaving the positive cone; it
moves J by a distance of the order of that error.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels
from .channels import dim_of_choi, partial_trace_output

# Constants of the dual Newton method, shared by the compiled kernel (which receives
# them as arguments) and its NumPy twin.

#: Regularisation μ = DAMPING_SCALE·min(DAMPING_CAP, ‖∇θ‖) + DAMPING_FLOOR added to the
#: generalised Hessian (Zhao, Sun & Toh 2010): it vanishes with the residual, so the
#: local convergence stays fast, and the floor keeps the system positive definite.
DAMPING_SCALE = 1e-2
DAMPING_CAP = 1e-2
DAMPING_FLOOR = 1e-14
#: Armijo constant of the dual line search: a step must gain this fraction of the
#: predicted increase of θ, or cut the residual ‖∇θ‖ by this fraction of itself.
ARMIJO = 1e-4
#: The line search takes the step anyway once it has halved it below this length.
MIN_LINE_STEP = 1e-8
#: A Newton step that cut the dual residual by this factor or better lets the next
#: step reuse its matrix (a chord step: the eigenvectors have barely moved).
CHORD_RATE = 0.1
#: Conjugate gradients (d ≥ `MATRIX_FREE_DIM`) stop at this residual relative to the
#: right-hand side, or after CG_MAXITER iterations: an inexact Newton step is enough.
CG_TOL = 1e-4
CG_MAXITER = 100
#: The final congruence (M⊗I) J (M⊗I), M = (Tr_out J)^{-1/2}, is applied only when the
#: smallest eigenvalue of Tr_out J exceeds this: far from I it would distort J.
CONGRUENCE_MIN_EIGENVALUE = 0.5
#: From this d on the Newton system is solved by conjugate gradients (the explicit
#: d² × d² Jacobian would need O(d^8) work and memory).
MATRIX_FREE_DIM = 16
#: Above this d the loops of the compiled Newton matrix lose to BLAS: use the NumPy twin.
KERNEL_MAX_DIM = 4


@dataclass
class Projection:
    """Result of :func:`project_cptp`."""

    choi: np.ndarray
    multiplier: np.ndarray
    iterations: int
    tp_residual: float          # ‖Tr_out J − I‖_F before the final congruence
    converged: bool


def _positive_part(z: np.ndarray):
    w, q = np.linalg.eigh(z)
    pos = w > 0
    qp = q[:, pos]
    j = (qp * w[pos]) @ qp.conj().T
    return j, w, q


def _newton_matrix(w: np.ndarray, q: np.ndarray, d: int) -> np.ndarray:
    """Generalised Jacobian of Y ↦ Tr_out[X + Y⊗I]_+ as a d² × d² matrix.

    Acting on vec(ΔY) (row-major), it is Σ_rs Ω_rs t_rs t_rs^H with
    t_rs = vec(T_rs), T_rs = Tr_out |q_r><q_s|, and Ω_rs the first divided
    difference of max(·, 0) at the eigenvalues (1 for two positive
    eigenvalues, 0 for two non-positive ones, λ_r/(λ_r − λ_s) across the
    sign change).

    It is computed in three parts. The pairs of positive eigenvalues (Ω = 1)
    sum to Σ_ab Π[(i,a),(j,b)] conj(Π[(k,a),(l,b)]) at [(i,k),(j,l)], with
    Π = Q₊Q₊† the projector on the positive eigenvectors: one product of
    two d² × d² matrices. The pairs (r positive, s not) need their T_rs explicitly; the
    pairs (s, r) follow from them, since T_sr = T_rs† turns their sum into
    the same matrix with input and output indices swapped and conjugated.
    """
    n = d * d
    pos = w > 0
    n_pos = int(pos.sum())
    if n_pos == 0:
        return np.zeros((n, n), dtype=complex)
    qp = q[:, pos]
    proj = (qp @ qp.conj().T).reshape(d, d, d, d).transpose(0, 2, 1, 3).reshape(n, n)   # [(i,j),(a,b)]
    jac = (proj @ proj.conj().T).reshape(d, d, d, d).transpose(0, 2, 1, 3).reshape(n, n)
    neg = ~pos
    n_neg = n - n_pos
    if n_neg:
        q3 = q.reshape(d, d, n)                                                   # [k, o, r]
        a_pos = q3[:, :, pos].transpose(2, 0, 1).reshape(n_pos * d, d)           # [(r, k), o]
        b_neg = q3[:, :, neg].conj().transpose(1, 2, 0).reshape(d, n_neg * d)    # [o, (s, l)]
        t = (a_pos @ b_neg).reshape(n_pos, d, n_neg, d).transpose(0, 2, 1, 3)    # T_rs[k, l]
        omega = w[pos][:, None] / (w[pos][:, None] - w[neg][None, :])
        tw = (t * np.sqrt(omega)[:, :, None, None]).reshape(n_pos * n_neg, n)
        cross = tw.T @ tw.conj()
        mirror = cross.reshape(d, d, d, d).transpose(1, 0, 3, 2).conj().reshape(n, n)
        jac = jac + cross + mirror
    return jac


def _newton_apply(w: np.ndarray, q: np.ndarray, d: int, v: np.ndarray) -> np.ndarray:
    """The generalised Jacobian applied to a d × d matrix V, without forming it:
    Tr_out[Q (Ω ∘ (Q† (V⊗I) Q)) Q†], using only the columns of positive eigenvalues."""
    n = d * d
    pos = w > 0
    if not pos.any():
        return np.zeros((d, d), dtype=complex)
    qp = q[:, pos]
    hq = (v @ q.reshape(d, d * n)).reshape(n, n)               # (V ⊗ I) Q
    m = qp.conj().T @ hq                                       # [pos, all]
    omega = np.ones((int(pos.sum()), n))
    neg = ~pos
    if neg.any():
        omega[:, neg] = w[pos][:, None] / (w[pos][:, None] - w[neg][None, :])
    k = omega * m
    half = qp @ k @ q.conj().T                                 # pairs (pos, any)
    k_pp = k[:, pos]
    full = half + half.conj().T - qp @ k_pp @ qp.conj().T      # add (any, pos), count (pos, pos) once
    return partial_trace_output(full)


def _newton_step(w, q, d, grad, mu, matrix_free: bool, jac=None):
    """Solve (Jacobian + μ) ΔY = ∇θ, directly or by conjugate gradients.

    Returns (ΔY, the regularised matrix or None). A matrix passed as ``jac``
    (from the previous step) is used instead of a new one: a chord step.
    """
    if not matrix_free:
        if jac is None:
            jac = _newton_matrix(w, q, d) + mu * np.eye(d * d)
        return np.linalg.solve(jac, grad.reshape(-1)).reshape(d, d), jac
    x = np.zeros_like(grad)
    r = grad.copy()
    p = r.copy()
    rr = np.vdot(r, r).real
    target = CG_TOL * np.sqrt(rr)
    for _ in range(CG_MAXITER):
        ap = _newton_apply(w, q, d, p) + mu * p
        alpha = rr / np.vdot(p, ap).real
        x += alpha * p
        r -= alpha * ap
        rr_new = np.vdot(r, r).real
        if np.sqrt(rr_new) <= target:
            break
        p = r + (rr_new / rr) * p
        rr = rr_new
    return x, None


def project_cptp_numpy(x: np.ndarray, *, multiplier: np.ndarray | None = None, tol: float = 1e-12,
                       maxiter: int = 100) -> Projection:
    """Euclidean (Frobenius) projection onto CPTP maps, in NumPy: the twin of the
    compiled kernel and the path used from d = 8 on. Same parameters and result as
    :func:`project_cptp`."""
    n = x.shape[0]
    d = dim_of_choi(x)
    x4 = (0.5 * (x + x.conj().T)).reshape(d, d, d, d)
    eye = np.eye(d)
    y = np.zeros((d, d), dtype=complex) if multiplier is None else multiplier.astype(complex)

    def dual(y):
        # X + Y ⊗ I without forming the Kronecker product
        z = (x4 + y[:, None, :, None] * eye[None, :, None, :]).reshape(n, n)
        j, w, q = _positive_part(z)
        theta = np.trace(y).real - 0.5 * np.dot(np.maximum(w, 0.0), np.maximum(w, 0.0))
        grad = eye - partial_trace_output(j)
        return theta, j, w, q, grad

    theta, j, w, q, grad = dual(y)
    res = np.linalg.norm(grad)
    it = 0
    jac = None
    while res > tol and it < maxiter:
        it += 1
        mu = DAMPING_SCALE * min(DAMPING_CAP, res) + DAMPING_FLOOR
        res_before = res
        step, jac = _newton_step(w, q, d, grad, mu, matrix_free=d >= MATRIX_FREE_DIM, jac=jac)
        step = 0.5 * (step + step.conj().T)
        slope = np.vdot(grad, step).real
        if slope <= 0:                                 # not an ascent direction: use the gradient
            step, slope = grad / d, np.vdot(grad, grad).real / d
        s = 1.0
        while True:
            cand = dual(y + s * step)
            res_new = np.linalg.norm(cand[4])
            # Armijo on θ; near the solution θ's increase drowns in rounding, so a
            # decrease of the residual ‖∇θ‖ is accepted as well.
            if (cand[0] >= theta + ARMIJO * s * slope or res_new <= (1 - ARMIJO * s) * res
                    or s < MIN_LINE_STEP):
                break
            s *= 0.5
        y = y + s * step
        theta, j, w, q, grad = cand
        res = res_new
        if res > CHORD_RATE * res_before:
            jac = None                # the old matrix no longer pays: a new one next step
    return _finish(j, y, it, res, tol, d)


def _finish(j, y, it, res, tol, d) -> Projection:
    """Final congruence (exact trace preservation) and the result record."""
    eye = np.eye(d)
    tr_out = partial_trace_output(j)
    tw, tv = np.linalg.eigh(0.5 * (tr_out + tr_out.conj().T))
    if tw.min() > CONGRUENCE_MIN_EIGENVALUE:
        m = (tv / np.sqrt(tw)) @ tv.conj().T
        big = np.kron(m, eye)
        j = big @ j @ big.conj().T
    j = 0.5 * (j + j.conj().T)
    return Projection(choi=j, multiplier=y, iterations=it, tp_residual=float(res),
                      converged=bool(res <= tol))


def project_cptp(x: np.ndarray, *, multiplier: np.ndarray | None = None, tol: float = 1e-12,
                 maxiter: int = 100) -> Projection:
    """Euclidean (Frobenius) projection of a Hermitian d² × d² matrix onto CPTP maps.

    Parameters
    ----------
    x : (d², d²) complex array
        Matrix to project; its Hermitian part is used.
    multiplier : (d, d) complex array, optional
        Warm start for the dual variable (``Projection.multiplier`` of a
        previous, nearby call).
    tol : float
        Stop when ‖Tr_out J − I‖_F ≤ tol.
    maxiter : int
        Maximum number of Newton iterations.

    Returns
    -------
    Projection
        ``choi`` is positive semidefinite and trace preserving to rounding
        error; ``tp_residual`` is the trace-preservation error the Newton
        iteration left before the final congruence removed it.
    """
    d = dim_of_choi(x)
    xh = np.ascontiguousarray(0.5 * (x + x.conj().T), dtype=np.complex128)
    y0 = (np.zeros((d, d), dtype=np.complex128) if multiplier is None
          else np.ascontiguousarray(multiplier, dtype=np.complex128))
    if d > KERNEL_MAX_DIM:
        return project_cptp_numpy(xh, multiplier=y0, tol=tol, maxiter=maxiter)
    j, y, it, res = kernels.project_cptp_kernel(
        xh, y0, float(tol), int(maxiter), CHORD_RATE, DAMPING_SCALE, DAMPING_CAP, DAMPING_FLOOR,
        ARMIJO, MIN_LINE_STEP, CONGRUENCE_MIN_EIGENVALUE)
    return Projection(choi=j, multiplier=y, iterations=it, tp_residual=float(res),
                      converged=bool(res <= tol))


# --------------------------------------------------------------------------
# Trace non-increasing maps: {J ⪰ 0, Tr_out J ⪯ I}
# --------------------------------------------------------------------------

def _project_psd(m: np.ndarray) -> np.ndarray:
    return _positive_part(0.5 * (m + m.conj().T))[0]


def _project_trace_nonincreasing(m: np.ndarray, d: int) -> np.ndarray:
    """Projection onto the convex set {J : Tr_out J ⪯ I} (not necessarily positive).

    Tr_out has Tr_out(Tr_out)* = d·id, so the projection moves J by
    −(1/d)·[Tr_out J − I]_+ ⊗ I, [·]_+ the positive part.
    """
    t = partial_trace_output(m)
    w, q = np.linalg.eigh(0.5 * (t + t.conj().T) - np.eye(d))
    excess = (q[:, w > 0] * w[w > 0]) @ q[:, w > 0].conj().T
    return m - np.kron(excess, np.eye(d)) / d


def project_cptni(x: np.ndarray, *, tol: float = 1e-12, maxiter: int = 20000) -> Projection:
    """Euclidean projection onto completely positive, trace non-increasing maps.

    Dykstra's alternating projections (Boyle & Dykstra, in Advances in Order
    Restricted Statistical Inference, Springer (1986); Bauschke & Borwein,
    J. Approx. Theory 79, 418 (1994)) between the positive cone and the convex
    set {Tr_out J ⪯ I}, both with closed-form projections, converge to the
    Euclidean projection onto their intersection. The last iterate is made
    feasible exactly by the congruence J ← (M⊗I) J (M⊗I) with
    M = V diag(min(1, τ^{-1/2})) V† from Tr_out J = V diag(τ) V†, which
    changes it by the order of the remaining infeasibility.

    Returns a `Projection` (``multiplier`` is unused and None).
    """
    d = dim_of_choi(x)
    x = 0.5 * (x + x.conj().T)
    j = x
    p = np.zeros_like(x)
    q = np.zeros_like(x)
    it = 0
    change = np.inf
    while it < maxiter:
        it += 1
        a = _project_psd(j + p)
        p = j + p - a
        j_new = _project_trace_nonincreasing(a + q, d)
        q = a + q - j_new
        change = np.linalg.norm(j_new - j)
        j = j_new
        if change <= tol * max(1.0, np.linalg.norm(j)):
            break
    j = _project_psd(j)
    t = partial_trace_output(j)
    tau, v = np.linalg.eigh(0.5 * (t + t.conj().T))
    if tau.max() > 1.0:
        m = (v * np.minimum(1.0, 1.0 / np.sqrt(np.maximum(tau, 1e-300)))) @ v.conj().T
        big = np.kron(m, np.eye(d))
        j = big @ j @ big.conj().T
    excess = max(0.0, float(tau.max()) - 1.0)
    return Projection(choi=0.5 * (j + j.conj().T), multiplier=None, iterations=it,
                      tp_residual=excess, converged=bool(change <= tol * max(1.0, np.linalg.norm(j))))


# --------------------------------------------------------------------------
# Density matrices: {ρ ⪰ 0, Tr ρ = 1}
# --------------------------------------------------------------------------

def project_simplex(v: np.ndarray, total: float = 1.0) -> np.ndarray:
    """Euclidean projection of a real vector onto {x ≥ 0, Σ x = total}.

    Sort-based algorithm (Held, Wolfe & Crowder, Math. Program. 6, 62
    (1974); Duchi, Shalev-Shwartz, Singer & Chandra, ICML 2008; Condat,
    Math. Program. 158, 575 (2016)): with u the entries in decreasing order,
    the threshold is θ = (Σ_{i≤r} u_i − total)/r for the largest r with
    u_r > θ_r, and x = max(v − θ, 0).
    """
    v = np.asarray(v, dtype=float)
    u = np.sort(v)[::-1]
    css = np.cumsum(u) - total
    idx = np.arange(1, u.size + 1)
    r = int(np.nonzero(u - css / idx > 0)[0][-1]) + 1
    theta = css[r - 1] / r
    return np.maximum(v - theta, 0.0)


#: Up to this d the density projection runs in the compiled kernel; above it the NumPy
#: twin, whose BLAS products win from about d = 64 (benchmarks/README.md, "States").
DENSITY_KERNEL_MAX_DIM = 32


def project_density_numpy(x: np.ndarray) -> np.ndarray:
    """The projection of `project_density` in NumPy (the twin of
    `gatescope.kernels.project_density_kernel`, and the path from d = 64): the
    Hermitian density matrix nearest to the Hermitian part of ``x``."""
    x = np.asarray(x, dtype=complex)
    w, v = np.linalg.eigh(0.5 * (x + x.conj().T))
    mu = project_simplex(w)
    keep = mu > 0
    vk = v[:, keep]
    rho = (vk * mu[keep]) @ vk.conj().T
    return 0.5 * (rho + rho.conj().T)


def project_density(x: np.ndarray) -> Projection:
    """Exact Euclidean (Frobenius) projection of a matrix onto density matrices.

    The Hermitian part X = V diag(λ) V† is projected to V diag(μ) V†, μ the
    Euclidean projection of λ onto the probability simplex (`project_simplex`).
    This is the projection onto {ρ ⪰ 0, Tr ρ = 1}: the set is unitarily
    invariant, so its nearest point shares X's eigenvectors, and the distance
    then reduces to that of the eigenvalue vectors (the same step as in
    Smolin, Gambetta & Smith, Phys. Rev. Lett. 108, 070502 (2012)). One
    Hermitian eigen-decomposition; exact up to rounding. The compiled kernel
    up to `DENSITY_KERNEL_MAX_DIM`, its NumPy twin above.

    Returns a `Projection` whose ``choi`` is the density matrix, ``multiplier``
    None, ``iterations`` 1, ``tp_residual`` |Tr ρ − 1| (rounding) and
    ``converged`` True.
    """
    x = np.asarray(x, dtype=complex)
    if x.shape[0] <= DENSITY_KERNEL_MAX_DIM:
        rho = kernels.project_density_kernel(np.ascontiguousarray(0.5 * (x + x.conj().T)))
    else:
        rho = project_density_numpy(x)
    return Projection(choi=rho, multiplier=None, iterations=1,
                      tp_residual=float(abs(np.trace(rho).real - 1.0)), converged=True)


def project_physical(model, x: np.ndarray, *, multiplier=None,
                     tol: float = 1e-12, maxiter: int = 100):
    """Euclidean projection onto the model's physical set: CPTP maps, completely
    positive trace non-increasing maps for ``trace = "decreasing"``, density matrices
    for a state model (``model.kind == "state"``; exact in one step, so ``multiplier``,
    ``tol`` and ``maxiter`` do not apply)."""
    if model.kind == "state":
        return project_density(x)
    if model.trace_decreasing:
        return project_cptni(x, tol=tol)
    return project_cptp(x, multiplier=multiplier, tol=tol, maxiter=maxiter)
