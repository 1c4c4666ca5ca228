"""Small numba kernels for the per-row hot loops, each with a NumPy twin.

The kernels take plain arrays only. Each ``name`` has a twin
``name_numpy`` that computes the same thing with whole-array NumPy
operations; the twin is the readable definition and the tests compare the
two on random inputs. Both are single-threaded.

Row model (docs/file-formats.md, "Input"): ``ν_k = λ_g · base_k + background_k`` where
``base_k = seconds_k · efficiency_k · p_k`` and g = ``group_index[k]``.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True)
def group_intensities(counts, base, background, group_index, n_groups, max_iter=100):
    """Maximum-likelihood intensity λ_g of every group for fixed ``base``.

    Without background, λ_g = Σ n / Σ base over the group. With background
    the stationarity condition Σ n·base/(λ·base + b) = Σ base is solved by a
    safeguarded Newton iteration (the left side decreases in λ).
    """
    n_rows = counts.shape[0]
    sum_n = np.zeros(n_groups)
    sum_a = np.zeros(n_groups)
    has_bg = np.zeros(n_groups, dtype=np.bool_)
    for k in range(n_rows):
        g = group_index[k]
        sum_n[g] += counts[k]
        sum_a[g] += base[k]
        if background[k] > 0.0:
            has_bg[g] = True
    lam = np.zeros(n_groups)
    for g in range(n_groups):
        if sum_a[g] > 0.0:
            lam[g] = sum_n[g] / sum_a[g]
    if not has_bg.any():
        return lam
    # Start at the background-subtracted moment estimate, kept positive.
    sum_b = np.zeros(n_groups)
    for k in range(n_rows):
        sum_b[group_index[k]] += background[k]
    for g in range(n_groups):
        if has_bg[g] and sum_a[g] > 0.0:
            lam[g] = max((sum_n[g] - sum_b[g]) / sum_a[g], 1e-3 * lam[g] + 1e-300)
    h = np.zeros(n_groups)
    dh = np.zeros(n_groups)
    for _ in range(max_iter):
        h[:] = 0.0
        dh[:] = 0.0
        for k in range(n_rows):
            g = group_index[k]
            if not has_bg[g]:
                continue
            nu = lam[g] * base[k] + background[k]
            if nu > 0.0:
                h[g] += counts[k] * base[k] / nu
                dh[g] -= counts[k] * base[k] * base[k] / (nu * nu)
        done = True
        for g in range(n_groups):
            if not has_bg[g] or sum_a[g] <= 0.0:
                continue
            f = h[g] - sum_a[g]
            if dh[g] < 0.0:
                step = -f / dh[g]
            else:
                step = 0.0
            new = lam[g] + step
            if new <= 0.0:
                new = 0.5 * lam[g]          # optimum is at λ ≥ 0: halve towards it
            if abs(new - lam[g]) > 1e-14 * max(lam[g], 1e-300):
                done = False
            lam[g] = new
        if done:
            break
    return lam


def group_intensities_numpy(counts, base, background, group_index, n_groups, max_iter=100):
    """NumPy twin of :func:`group_intensities`."""
    sum_n = np.bincount(group_index, weights=counts, minlength=n_groups)
    sum_a = np.bincount(group_index, weights=base, minlength=n_groups)
    sum_b = np.bincount(group_index, weights=background, minlength=n_groups)
    has_bg = np.bincount(group_index, weights=(background > 0).astype(float), minlength=n_groups) > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = np.where(sum_a > 0, sum_n / sum_a, 0.0)
    if not has_bg.any():
        return lam
    with np.errstate(divide="ignore", invalid="ignore"):
        start = np.maximum((sum_n - sum_b) / sum_a, 1e-3 * lam + 1e-300)
    lam = np.where(has_bg & (sum_a > 0), start, lam)
    active_rows = has_bg[group_index]
    for _ in range(max_iter):
        nu = lam[group_index] * base + background
        ok = active_rows & (nu > 0)
        safe_nu = np.where(ok, nu, 1.0)
        h = np.bincount(group_index, weights=np.where(ok, counts * base / safe_nu, 0.0),
                        minlength=n_groups)
        dh = -np.bincount(group_index, weights=np.where(ok, counts * base**2 / safe_nu**2, 0.0),
                          minlength=n_groups)
        f = h - sum_a
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.where(dh < 0, -f / dh, 0.0)
        new = lam + step
        new = np.where(new <= 0, 0.5 * lam, new)
        upd = has_bg & (sum_a > 0)
        changed = upd & (np.abs(new - lam) > 1e-14 * np.maximum(lam, 1e-300))
        lam = np.where(upd, new, lam)
        if not changed.any():
            break
    return lam


@njit(cache=True)
def poisson_terms(counts, base, background, lam, group_index, exposure, weights):
    """Poisson log-likelihood without the constant Σ log n! and its weights.

    Returns Σ_k [n_k log ν_k − ν_k] (−inf if some ν_k ≤ 0 with n_k > 0) and
    fills ``weights[k] = (n_k/ν_k − 1) · λ_g · exposure_k``, the derivative of
    the log-likelihood with respect to the probability p_k at fixed λ
    (``exposure_k = seconds_k · efficiency_k``).
    """
    total = 0.0
    for k in range(counts.shape[0]):
        lg = lam[group_index[k]]
        nu = lg * base[k] + background[k]
        n = counts[k]
        if nu > 0.0:
            if n > 0:
                total += n * np.log(nu) - nu
            else:
                total -= nu
            weights[k] = (n / nu - 1.0) * lg * exposure[k]
        else:
            weights[k] = -lg * exposure[k]
            if n > 0:
                total = -np.inf
    return total


def poisson_terms_numpy(counts, base, background, lam, group_index, exposure, weights):
    """NumPy twin of :func:`poisson_terms`."""
    lg = lam[group_index]
    nu = lg * base + background
    positive = nu > 0
    if np.any(~positive & (counts > 0)):
        total = -np.inf
    else:
        safe = np.where(positive, nu, 1.0)
        total = float(np.sum(np.where(counts > 0, counts * np.log(safe), 0.0) - np.where(positive, nu, 0.0)))
    with np.errstate(divide="ignore", invalid="ignore"):
        weights[:] = np.where(positive, (counts / np.where(positive, nu, 1.0) - 1.0) * lg * exposure,
                              -lg * exposure)
    return total


# --------------------------------------------------------------------------
# CPTP projection: the dual semismooth Newton method of gatescope.projection,
# compiled. `projection.project_cptp_numpy` is its twin.
# --------------------------------------------------------------------------

@njit(cache=True)
def _dual_point(x, y, d):
    """Positive part of X + Y⊗I, the dual value θ(Y) and its gradient I − Tr_out J."""
    n = d * d
    z = x.copy()
    for i in range(d):
        for k in range(d):
            yik = y[i, k]
            for a in range(d):
                z[i * d + a, k * d + a] += yik
    w, q = np.linalg.eigh(z)
    j = np.zeros((n, n), dtype=np.complex128)
    theta = 0.0
    for i in range(d):
        theta += y[i, i].real
    for r in range(n):
        if w[r] > 0.0:
            theta -= 0.5 * w[r] * w[r]
            for a in range(n):
                qa = w[r] * q[a, r]
                for b in range(n):
                    j[a, b] += qa * np.conj(q[b, r])
    grad = np.zeros((d, d), dtype=np.complex128)
    for i in range(d):
        for k in range(d):
            s = 0.0 + 0.0j
            for a in range(d):
                s += j[i * d + a, k * d + a]
            grad[i, k] = (1.0 if i == k else 0.0) - s
    return theta, w, q, j, grad


@njit(cache=True)
def _newton_matrix_kernel(w, q, d):
    """Σ_rs Ω_rs t_rs t_rs^H, t_rs = vec(Tr_out |q_r><q_s|), in the three parts of its
    twin `projection._newton_matrix`: positive pairs through the projector Π = Q₊Q₊†,
    (positive, non-positive) pairs explicitly, their mirror pairs by an index swap."""
    n = d * d
    n_pos = 0
    for r in range(n):
        if w[r] > 0.0:
            n_pos += 1
    n_neg = n - n_pos
    jac = np.zeros((n, n), dtype=np.complex128)
    if n_pos == 0:
        return jac
    proj = np.zeros((n, n), dtype=np.complex128)
    for r in range(n):
        if w[r] > 0.0:
            for a in range(n):
                qa = q[a, r]
                for b in range(n):
                    proj[a, b] += qa * np.conj(q[b, r])
    # pm[(i,j),(a,b)] = Π[(i,a),(j,b)]; (pm pm†)[(i,j),(k,l)] is the positive-pair part at [(i,k),(j,l)]
    pm = np.empty((n, n), dtype=np.complex128)
    for i in range(d):
        for j in range(d):
            for a in range(d):
                for b in range(d):
                    pm[i * d + j, a * d + b] = proj[i * d + a, j * d + b]
    pp = pm @ np.ascontiguousarray(np.conj(pm).T)
    for i in range(d):
        for j in range(d):
            for k in range(d):
                for l in range(d):
                    jac[i * d + k, j * d + l] = pp[i * d + j, k * d + l]
    if n_neg == 0:
        return jac
    tw = np.empty((n_pos * n_neg, n), dtype=np.complex128)
    row = 0
    for r in range(n):
        if w[r] <= 0.0:
            continue
        for s_ in range(n):
            if w[s_] > 0.0:
                continue
            weight = np.sqrt(w[r] / (w[r] - w[s_]))
            for k in range(d):
                for l in range(d):
                    acc = 0.0 + 0.0j
                    for o in range(d):
                        acc += q[k * d + o, r] * np.conj(q[l * d + o, s_])
                    tw[row, k * d + l] = weight * acc
            row += 1
    cross = np.ascontiguousarray(tw.T) @ np.conj(tw)
    for i in range(d):
        for k in range(d):
            for j in range(d):
                for l in range(d):
                    jac[i * d + k, j * d + l] += (cross[i * d + k, j * d + l]
                                                  + np.conj(cross[k * d + i, l * d + j]))
    return jac


@njit(cache=True)
def hermitian_solve(a, b):
    """Solve A x = b for Hermitian positive-definite A by Cholesky (A = L L†).

    Written out instead of calling np.linalg.solve, whose compiled LAPACK
    wrapper costs seconds of JIT time on first use. Twin: numpy.linalg.solve.
    """
    n = a.shape[0]
    low = np.zeros((n, n), dtype=np.complex128)
    for j in range(n):
        acc = a[j, j].real
        for k in range(j):
            acc -= (low[j, k] * np.conj(low[j, k])).real
        if acc <= 0.0:
            acc = 1e-300
        ljj = np.sqrt(acc)
        low[j, j] = ljj
        for i in range(j + 1, n):
            v = a[i, j]
            for k in range(j):
                v -= low[i, k] * np.conj(low[j, k])
            low[i, j] = v / ljj
    y = np.zeros(n, dtype=np.complex128)
    for i in range(n):
        v = b[i]
        for k in range(i):
            v -= low[i, k] * y[k]
        y[i] = v / low[i, i]
    x = np.zeros(n, dtype=np.complex128)
    for i in range(n - 1, -1, -1):
        v = y[i]
        for k in range(i + 1, n):
            v -= np.conj(low[k, i]) * x[k]
        x[i] = v / low[i, i].real
    return x


@njit(cache=True)
def project_cptp_kernel(x, y0, tol, maxiter, chord_rate, damping_scale, damping_cap,
                        damping_floor, armijo, min_line_step, congruence_min):
    """Dual semismooth Newton projection onto CPTP maps (see gatescope.projection);
    the constants after ``maxiter`` are those of `gatescope.projection`
    (CHORD_RATE, DAMPING_SCALE, DAMPING_CAP, DAMPING_FLOOR, ARMIJO, MIN_LINE_STEP,
    CONGRUENCE_MIN_EIGENVALUE), shared with the NumPy twin.

    Returns (J, Y, iterations, r) with J after the final congruence
    (:func:`tp_congruence`) and r = ‖Tr_out J − I‖_F before it.
    """
    n = x.shape[0]
    d = int(np.rint(np.sqrt(n)))
    y = y0.copy()
    theta, w, q, j, grad = _dual_point(x, y, d)
    res = np.sqrt(np.sum(np.abs(grad) ** 2))
    it = 0
    eye_n = np.eye(n).astype(np.complex128)
    jac = eye_n
    fresh = True
    while res > tol and it < maxiter:
        it += 1
        if fresh:
            mu = damping_scale * min(damping_cap, res) + damping_floor
            jac = _newton_matrix_kernel(w, q, d) + mu * eye_n
        res_before = res
        step = hermitian_solve(jac, grad.reshape(n).copy()).reshape(d, d)
        step = 0.5 * (step + step.conj().T)
        slope = np.sum(np.conj(grad) * step).real
        if slope <= 0.0:
            step = grad / d
            slope = np.sum(np.abs(grad) ** 2) / d
        s = 1.0
        while True:
            theta_new, w_new, q_new, j_new, grad_new = _dual_point(x, y + s * step, d)
            res_new = np.sqrt(np.sum(np.abs(grad_new) ** 2))
            if (theta_new >= theta + armijo * s * slope or res_new <= (1.0 - armijo * s) * res
                    or s < min_line_step):
                break
            s *= 0.5
        y = y + s * step
        theta, w, q, j, grad, res = theta_new, w_new, q_new, j_new, grad_new, res_new
        # chord: keep the matrix while a step cuts the residual by chord_rate or better
        fresh = res > chord_rate * res_before
    return tp_congruence(j, d, congruence_min), y, it, res


@njit(cache=True)
def tp_congruence(j, d, min_eigenvalue):
    """(M⊗I) J (M⊗I)† with M = (Tr_out J)^{-1/2}: exact trace preservation, positivity kept.

    Left unchanged when Tr_out J is far from I (smallest eigenvalue ≤ ``min_eigenvalue``).
    """
    n = d * d
    t = np.zeros((d, d), dtype=np.complex128)
    for i in range(d):
        for k in range(d):
            for a in range(d):
                t[i, k] += j[i * d + a, k * d + a]
    t = 0.5 * (t + t.conj().T)
    tw, tv = np.linalg.eigh(t)
    if tw.min() <= min_eigenvalue:
        out = 0.5 * (j + j.conj().T)
        return out
    m = np.zeros((d, d), dtype=np.complex128)
    for r in range(d):
        s = 1.0 / np.sqrt(tw[r])
        for i in range(d):
            for k in range(d):
                m[i, k] += tv[i, r] * s * np.conj(tv[k, r])
    # (M⊗I) J (M⊗I)†: entry [(i,a),(k,b)] = Σ_{i',k'} M[i,i'] J[(i',a),(k',b)] conj(M[k,k'])
    tmp = np.zeros((n, n), dtype=np.complex128)
    for i in range(d):
        for ip in range(d):
            mi = m[i, ip]
            for a in range(d):
                for col in range(n):
                    tmp[i * d + a, col] += mi * j[ip * d + a, col]
    out = np.zeros((n, n), dtype=np.complex128)
    for k in range(d):
        for kp in range(d):
            mk = np.conj(m[k, kp])
            for b in range(d):
                for row in range(n):
                    out[row, k * d + b] += tmp[row, kp * d + b] * mk
    return 0.5 * (out + out.conj().T)


# --------------------------------------------------------------------------
# Riemannian L-BFGS on the Stiefel manifold (gatescope.estimators.factored): Z is a
# d × n matrix with orthonormal rows; <A, B> = Re Tr A†B.
# --------------------------------------------------------------------------

@njit(cache=True)
def _re_inner(a, b):
    """Re Tr a†b for two complex arrays of one shape (contiguous)."""
    fa = a.reshape(-1)
    fb = b.reshape(-1)
    acc = 0.0
    for i in range(fa.shape[0]):
        acc += fa[i].real * fb[i].real + fa[i].imag * fb[i].imag
    return acc


@njit(cache=True)
def _tangent_nb(z, x):
    """X − sym(X Z†) Z with explicit loops (small d: no BLAS call, quick to compile)."""
    d, n = z.shape
    a = np.zeros((d, d), dtype=np.complex128)
    for i in range(d):
        for j in range(d):
            acc = 0.0 + 0.0j
            for c in range(n):
                acc += x[i, c] * np.conj(z[j, c])
            a[i, j] = acc
    out = x.copy()
    for i in range(d):
        for j in range(d):
            h = 0.5 * (a[i, j] + np.conj(a[j, i]))
            for c in range(n):
                out[i, c] -= h * z[j, c]
    return out


@njit(cache=True)
def _gram_apply(x, z, cinv, d, cols):
    """P_Z(M x): the Kraus columns of x (its first ``cols`` columns, as d² × r) times
    ``cinv`` on the right, the completion block unchanged, then the tangent projection."""
    r = cols // d
    out = x.copy()
    for i in range(d):
        for a in range(d):
            base = a * r
            for k in range(r):
                acc = 0.0 + 0.0j
                for l in range(r):
                    acc += x[i, base + l] * cinv[l, k]
                out[i, base + k] = acc
    return _tangent_nb(z, out)


@njit(cache=True)
def lbfgs_direction(g, z, s_mem, y_mem, rho, order, d, cols, cinv):
    """Descent direction −P_Z(H g) of L-BFGS on the Stiefel manifold.

    Two-loop recursion (Nocedal & Wright, Algorithm 7.4) over the stored pairs
    s_mem[k], y_mem[k] (complex, Z-shaped; ``order`` lists the rows in use oldest
    first; rho[k] = 1/<s_k, y_k>, <A, B> = Re Tr A†B), with the initial matrix
    H₀ = γ·P_Z∘M∘P_Z, M(X) = X_W·cinv acting on the Kraus columns X_W (the first
    ``cols`` columns of X as a d² × r matrix; identity on the completion block),
    ``cinv`` = (W†W + δ·Tr(W†W)·I)^{-1} from :func:`gram_inverse`, and
    γ = <s, y>/<y, H₀y> for the newest pair. Returns (direction, <g, direction>);
    the caller checks the sign.
    """
    m = order.shape[0]
    q = g.copy()
    alpha = np.empty(m)
    for idx in range(m - 1, -1, -1):
        k = order[idx]
        a = rho[k] * _re_inner(s_mem[k], q)
        alpha[idx] = a
        q -= a * y_mem[k]
    k = order[m - 1]
    hy = _gram_apply(_tangent_nb(z, y_mem[k]), z, cinv, d, cols)
    gamma = 1.0 / (rho[k] * _re_inner(y_mem[k], hy))
    out = gamma * _gram_apply(_tangent_nb(z, q), z, cinv, d, cols)
    for idx in range(m):
        k = order[idx]
        b = rho[k] * _re_inner(y_mem[k], out)
        out += (alpha[idx] - b) * s_mem[k]
    p = -_tangent_nb(z, out)
    return p, _re_inner(g, p)


def lbfgs_direction_numpy(g, z, s_mem, y_mem, rho, order, d, cols, cinv):
    """NumPy twin of :func:`lbfgs_direction`."""
    def inner(a, b):
        return float(np.vdot(a, b).real)

    def metric(x):
        x = tangent_project_numpy(z, x)
        out = x.copy()
        out[:, :cols] = (x[:, :cols].reshape(d * d, -1) @ cinv).reshape(d, cols)
        return tangent_project_numpy(z, out)

    q = g.copy()
    alpha = np.empty(len(order))
    for idx in range(len(order) - 1, -1, -1):
        k = order[idx]
        alpha[idx] = rho[k] * inner(s_mem[k], q)
        q = q - alpha[idx] * y_mem[k]
    k = order[-1]
    gamma = 1.0 / (rho[k] * inner(y_mem[k], metric(y_mem[k])))
    out = gamma * metric(q)
    for idx in range(len(order)):
        k = order[idx]
        out = out + (alpha[idx] - rho[k] * inner(y_mem[k], out)) * s_mem[k]
    p = -tangent_project_numpy(z, out)
    return p, inner(g, p)


def gram_inverse(z, d: int, cols: int, shift: float) -> np.ndarray:
    """(W†W + shift·Tr(W†W)·I)^{-1}, W the Kraus columns (first ``cols`` columns of Z as
    a d² × r matrix). Kept out of the kernel: a compiled inverse adds seconds of JIT."""
    w = z[:, :cols].reshape(d * d, -1)
    c = w.conj().T @ w
    c[np.diag_indices(c.shape[0])] += shift * np.trace(c).real
    return np.linalg.inv(c)


@njit(cache=True)
def lbfgs_pair(z, step, g_old, rgrad):
    """The new L-BFGS pair at Z (after the step): s = P_Z(step), y = −rgrad − P_Z(g_old)
    (``rgrad`` the Riemannian gradient of ℓ at Z, ``g_old`` the previous gradient of −ℓ),
    with <s, y>, <s, s>, <y, y> (vector transport by projection)."""
    s = _tangent_nb(z, step)
    y = -rgrad - _tangent_nb(z, g_old)
    return s, y, _re_inner(s, y), _re_inner(s, s), _re_inner(y, y)


def lbfgs_pair_numpy(z, step, g_old, rgrad):
    """NumPy twin of :func:`lbfgs_pair`."""
    s = tangent_project_numpy(z, step)
    y = -rgrad - tangent_project_numpy(z, g_old)
    return (s, y, float(np.vdot(s, y).real), float(np.vdot(s, s).real),
            float(np.vdot(y, y).real))


@njit(cache=True)
def polar_rows(x):
    """(X X†)^{-1/2} X: the matrix with orthonormal rows nearest to X (X of full row rank)."""
    h = x @ np.ascontiguousarray(x.conj().T)
    h = 0.5 * (h + np.ascontiguousarray(h.conj().T))
    w, q = np.linalg.eigh(h)
    m = (q / np.sqrt(w)) @ np.ascontiguousarray(q.conj().T)
    return m @ x


def polar_rows_numpy(x):
    """NumPy twin of :func:`polar_rows`."""
    h = x @ x.conj().T
    w, q = np.linalg.eigh(0.5 * (h + h.conj().T))
    return ((q / np.sqrt(w)) @ q.conj().T) @ x


@njit(cache=True)
def tangent_project(z, x):
    """P_Z(X) = X − sym(X Z†) Z, the orthogonal projection onto the tangent space
    {ξ : Zξ† + ξZ† = 0} of the Stiefel manifold at Z (Z Z† = I)."""
    return _tangent_nb(z, x)


def tangent_project_numpy(z, x):
    """NumPy twin of :func:`tangent_project`."""
    a = x @ z.conj().T
    return x - 0.5 * (a + a.conj().T) @ z
@njit(cache=True)
def project_density_kernel(x):
    """Euclidean projection of a Hermitian matrix onto density matrices: the eigenvalues
    projected onto the probability simplex, the eigenvectors kept.

    Twin: `gatescope.projection.project_density_numpy` (the definition is there).
    Returns the Hermitian density matrix.
    """
    d = x.shape[0]
    w, v = np.linalg.eigh(x)
    # eigh returns increasing eigenvalues: walk them in decreasing order for the threshold
    css = 0.0
    theta = 0.0
    for i in range(d):
        css += w[d - 1 - i]
        t = (css - 1.0) / (i + 1)
        if w[d - 1 - i] - t > 0.0:
            theta = t
    rho = np.zeros((d, d), dtype=np.complex128)
    for k in range(d):
        mu = w[k] - theta
        if mu <= 0.0:
            continue
        for a in range(d):
            va = mu * v[a, k]
            for b in range(a, d):
                rho[a, b] += va * np.conj(v[b, k])
    for a in range(d):
        rho[a, a] = rho[a, a].real
        for b in range(a + 1, d):
            rho[b, a] = np.conj(rho[a, b])
    return rho


# --------------------------------------------------------------------------
# Compilation: the first run compiles, later processes load numba's cache
# --------------------------------------------------------------------------

def compiled_kernels() -> list:
    """Every compiled kernel of this module (numba compiles each at its first call, then
    caches it on disk)."""
    from numba.core.registry import CPUDispatcher

    return [v for v in globals().values() if isinstance(v, CPUDispatcher)]


def compiled_in_this_process() -> int:
    """Kernel signatures compiled (not loaded from the cache) by this process so far."""
    return sum(sum(kernel.stats.cache_misses.values()) for kernel in compiled_kernels())
