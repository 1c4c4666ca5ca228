"""Small numba kernels for the per-row hot loops, each with a NumPy twin.

The kernels take plain arrays only. Each ``name`` has a twin
``name_numpy`` that computes the same thing with whole-array NumPy
operations; the twin is the readable definition and the tests compare the
two on random inputs. Both are single-threaded.

Row model (CONTRACT §3): ``ν_k = λ_g · base_k + background_k`` where
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
