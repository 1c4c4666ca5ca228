"""Figures of merit of a process estimate against its target (and without one).

For a Choi matrix J on d dimensions (README, "Conventions") and a unitary
target U:

* ``process_fidelity`` F_pro = <<U|J|U>>/d² (squared, Choi-state
  convention; 1 for a perfect gate, equal to Tr(χ χ_U));
* ``average_gate_fidelity`` F_avg = (d·F_pro + Tr J/d)/(d + 1), which is
  (d·F_pro + 1)/(d + 1) for a trace-preserving J (Horodecki, Horodecki &
  Horodecki, Phys. Rev. A 60, 1888 (1999); Nielsen, Phys. Lett. A 303, 249
  (2002));
* ``purity`` Tr ρ_J² of the normalised Choi state ρ_J = J/Tr J, which is
  Tr J²/d² for a trace-preserving J (1 for a unitary);
* ``trace`` Tr J/d (1 for trace preserving);
* ``min_eigenvalue`` the smallest eigenvalue of J itself (negative for an
  unphysical linear-inversion estimate);
* ``unitarity`` (:func:`unitarity`), ``nearest_unitary_fidelity``
  (:func:`nearest_unitary`), ``process_fidelity_local_phases``
  (:func:`local_phase_fidelity`) and ``truth_table_fidelity``
  (:func:`truth_table_fidelity`), each defined in its docstring.
"""

from __future__ import annotations

import numpy as np

from ..channels import choi_to_ptm, dim_of_choi, operator_vector
from ..conventions import n_qubits_of


def process_fidelity(choi: np.ndarray, unitary: np.ndarray) -> float:
    """<<U|J|U>>/d²."""
    d = dim_of_choi(choi)
    v = unitary.T.reshape(-1)
    return float(np.vdot(v, choi @ v).real / d**2)


def average_gate_fidelity(choi: np.ndarray, unitary: np.ndarray) -> float:
    """(d·F_pro + Tr J/d)/(d + 1)."""
    d = dim_of_choi(choi)
    return (d * process_fidelity(choi, unitary) + np.trace(choi).real / d) / (d + 1)


def purity(choi: np.ndarray) -> float:
    """Tr(J²)/(Tr J)², the purity of the normalised Choi state."""
    tr = np.trace(choi).real
    return float(np.vdot(choi, choi).real / tr**2)


def trace(choi: np.ndarray) -> float:
    """Tr J / d."""
    return float(np.trace(choi).real / dim_of_choi(choi))


def min_eigenvalue(choi: np.ndarray) -> float:
    """Smallest eigenvalue of the Hermitian part of J."""
    return float(np.linalg.eigvalsh(0.5 * (choi + choi.conj().T))[0])


# --------------------------------------------------------------------------
# Unitarity and the nearest unitary
# --------------------------------------------------------------------------

def unitarity(choi: np.ndarray) -> float:
    """u = Tr(R_u† R_u)/(d² − 1), R_u = PTM without its identity row and column.

    Wallman, Granade, Harper & Flammia, New J. Phys. 17, 113020 (2015), for
    trace-preserving maps: 1 exactly for unitary channels, (1 − p)² for
    ρ ↦ (1 − p)ρ + p I/d.
    """
    d = dim_of_choi(choi)
    block = choi_to_ptm(choi)[1:, 1:]
    return float(np.sum(block * block) / (d * d - 1))


def _polar_unitary(m: np.ndarray) -> np.ndarray:
    w, _, vh = np.linalg.svd(m)
    return w @ vh


def _choi_value(choi: np.ndarray, u: np.ndarray) -> float:
    v = operator_vector(u)
    return float(np.vdot(v, choi @ v).real)


def _fix_global_phase(u: np.ndarray, reference: np.ndarray | None) -> np.ndarray:
    """Global phase making Tr(reference† U) real positive, or else the largest entry."""
    d = u.shape[0]
    if reference is not None:
        overlap = np.vdot(reference, u)
        if abs(overlap) > 1e-6 * d:
            return u * (abs(overlap) / overlap)
    flat = u.reshape(-1)
    big = np.flatnonzero(np.abs(flat) >= np.abs(flat).max() - 1e-9)[0]
    return u * (abs(flat[big]) / flat[big])


def nearest_unitary(choi: np.ndarray, target: np.ndarray | None = None, *,
                    tol: float = 1e-11, maxiter: int = 2000) -> tuple[np.ndarray, float]:
    """The unitary U maximising <<U|J|U>>, and its process fidelity <<U|J|U>>/d² to J.

    Starts from the polar factor of the leading Kraus operator of J (the
    eigenvector of J with the largest eigenvalue, reshaped), of the second
    one when its eigenvalue exceeds a quarter of the first, and, when
    given, of the target, then iterates U ← polar(G), G the gradient
    matrix with |G>> = J|U>>: because U ↦ <<U|J|U>> is convex for J ⪰ 0,
    f(U') ≥ f(U) + 2 Re<<G|U' − U>> ≥ f(U) when U' is the polar factor of G
    (the unitary maximising the linear term), so every step climbs. Each
    start stops when a step changes U by less than ``tol`` (Frobenius norm)
    or after ``maxiter`` steps. The problem is not concave, so this is the
    best local maximum from these starts: for an estimate close to a
    unitary (the case of interest) the leading Kraus operator starts in the
    right basin, for one far from every unitary it may miss the global
    maximum by a little. The best of the starts is returned; its global
    phase is fixed so that Tr(target† U) is real and positive (with no
    usable target: the largest entry, first in row-major order, is real and
    positive).
    """
    d = dim_of_choi(choi)
    J = 0.5 * (choi + choi.conj().T)
    w, vecs = np.linalg.eigh(J)
    # the second Kraus operator only when it is not negligible beside the first
    second = w[-2] > 0.25 * w[-1]
    starts = [_polar_unitary(vecs[:, -1 - k].reshape(d, d).T) for k in range(1 + second)]
    if target is not None:
        starts.append(np.asarray(target, dtype=complex))
    best_u, best_f = None, -np.inf
    for u in starts:
        f = _choi_value(J, u)
        for _ in range(maxiter):
            g = (J @ operator_vector(u)).reshape(d, d).T
            u_next = _polar_unitary(g)
            f_next = _choi_value(J, u_next)
            if f_next < f:                    # rounding: never step down
                break
            u, f, step = u_next, f_next, np.linalg.norm(u_next - u)
            if step <= tol:
                break
        if f > best_f:
            best_u, best_f = u, f
    return _fix_global_phase(best_u, target), best_f / d**2


# --------------------------------------------------------------------------
# Local Z phases
# --------------------------------------------------------------------------

def _z_signs(n_qubits: int) -> np.ndarray:
    """z[x, k] = ±1, the eigenvalue of Z on qubit k (qubit 1 most significant) of |x>."""
    d = 2 ** n_qubits
    bits = (np.arange(d)[:, None] >> (n_qubits - 1 - np.arange(n_qubits))[None, :]) & 1
    return (1 - 2 * bits).astype(float)


def z_rotations(phases) -> np.ndarray:
    """⊗_k Rz(φ_k), Rz(φ) = diag(e^{−iφ/2}, e^{iφ/2}), qubit 1 leftmost (diagonal matrix)."""
    phases = np.asarray(phases, dtype=float)
    return np.diag(np.exp(-0.5j * (_z_signs(phases.size) @ phases)))


def _phase_null_space(target: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Directions (δa, δb) with (⊗Rz(δb))·U·(⊗Rz(δa)) = U: Σ δa_k U Z_k U† + Σ δb_k Z_k = 0."""
    n = z.shape[1]
    cols = []
    for k in range(n):
        zk = np.diag(z[:, k])
        cols.append((target @ zk @ target.conj().T).reshape(-1))
    for k in range(n):
        cols.append(np.diag(z[:, k]).astype(complex).reshape(-1))
    m = np.array(cols).T
    m = np.vstack([m.real, m.imag])
    _, s, vh = np.linalg.svd(m)
    rank = int(np.sum(s > 1e-9 * max(s[0], 1.0)))
    return vh[rank:].T                                   # (2n, nullity)


def _wrap_phase(x: np.ndarray) -> np.ndarray:
    """Into [−π, π)."""
    return (np.asarray(x) + np.pi) % (2 * np.pi) - np.pi


def _newton_ascent(parts, p, *, maxiter: int = 100, gtol: float = 1e-13):
    """Maximise f from p by Newton steps on |Hessian| (curvature of the wrong sign
    reflected, flat directions damped) with backtracking; returns (f, p)."""
    f, g, h = parts(p)
    for _ in range(maxiter):
        if np.max(np.abs(g)) <= gtol:
            break
        w, vecs = np.linalg.eigh(h)
        floor = 1e-6 * max(1.0, float(np.max(np.abs(w))))
        step = vecs @ ((vecs.T @ g) / np.maximum(np.abs(w), floor))
        t = 1.0
        for _ in range(40):
            f_new, g_new, h_new = parts(p + t * step)
            if f_new >= f:
                break
            t *= 0.5
        else:
            break                                   # no ascent left at rounding level
        converged = f_new - f <= 1e-16 * max(1.0, abs(f)) and t * np.max(np.abs(step)) < 1e-12
        p, f, g, h = p + t * step, f_new, g_new, h_new
        if converged:
            break
    return f, p


def local_phase_fidelity(choi: np.ndarray, target: np.ndarray, *, starts: int = 4,
                         seed: int = 0) -> tuple[float, np.ndarray, np.ndarray]:
    """max over a, b of F_pro(J, (⊗Rz(b_k)) · U · (⊗Rz(a_k))), and the maximising a, b.

    ``a`` are the Z rotations on each qubit before the target ("before",
    applied to the input), ``b`` those after it, in radians, each wrapped
    into [−π, π); Rz(φ) = diag(e^{−iφ/2}, e^{iφ/2}) (`conventions.rz`).

    With |V>> = e^{iθ}∘|U>> and θ = M·(a, b) linear in the phases, F =
    Σ_pq A_pq/d² with A_pq = conj(v_p) J_pq v_q; its gradient in θ is
    2 Im(s)/d² and its Hessian 2 Re(A − diag(s))/d², s_p = Σ_q A_pq. The
    maximisation is Newton's method on these from the same deterministic
    starts every time (zero phases and ``starts − 1`` draws from
    ``numpy.random.default_rng(seed)``), keeping the best.

    Ambiguity: rotations that pass through the target give the same
    channel — for a qubit whose Z the target leaves unchanged (both qubits
    of CZ, the control of CNOT), or a Z that it moves to another qubit
    (SWAP), only the combination matters. Of all equivalent phases the one
    with the smallest rotations *before* the gate is reported (so a CZ's
    local phases are all "after", a = 0). Discrete coincidences (for
    example a π rotation before CNOT's target equals π rotations after on
    both qubits) are resolved by taking, among the starts that reach the
    best fidelity to 1e−9, the phases of least norm.
    """
    d = dim_of_choi(choi)
    n = n_qubits_of(d)
    J = 0.5 * (choi + choi.conj().T)
    target = np.asarray(target, dtype=complex)
    u = operator_vector(target)                     # u[i*d + x] = U[x, i]
    z = _z_signs(n)
    # θ[(i, x)] = −½ Σ_k (a_k z_k(i) + b_k z_k(x)): input i, output x
    m = -0.5 * np.concatenate([np.repeat(z, d, axis=0), np.tile(z, (d, 1))], axis=1)

    def parts(p):
        v = np.exp(1j * (m @ p)) * u
        jv = J @ v
        s = v.conj() * jv
        b = v[:, None] * m
        hess = 2.0 * ((b.conj().T @ (J @ b)).real - m.T @ (s.real[:, None] * m))
        return s.sum().real / d**2, (m.T @ (2.0 * s.imag)) / d**2, hess / d**2

    null = _phase_null_space(target, z)
    rng = np.random.default_rng(seed)
    points = [np.zeros(2 * n)] + [rng.uniform(-np.pi, np.pi, 2 * n) for _ in range(starts - 1)]
    found = []
    for p0 in points:
        _, p = _newton_ascent(parts, p0)
        if null.shape[1]:
            # shift along the flat directions to the least rotation before the gate
            c, *_ = np.linalg.lstsq(null[:n], -p[:n], rcond=None)
            p = p + null @ c
        p = _wrap_phase(p)
        found.append((parts(p)[0], p))
    best = max(f for f, _ in found)
    f, p = min(((f, p) for f, p in found if f >= best - 1e-9), key=lambda fp: np.linalg.norm(fp[1]))
    return float(f), p[:n].copy(), p[n:].copy()


# --------------------------------------------------------------------------
# Classical truth table and entanglement
# --------------------------------------------------------------------------

def basis_permutation(target: np.ndarray, tol: float = 1e-9) -> np.ndarray | None:
    """π with U|i> ∝ |π(i)> for every basis state i, or None when U is not of that kind."""
    mags = np.abs(np.asarray(target))
    perm = np.argmax(mags, axis=0)
    ok = np.allclose(mags[perm, np.arange(mags.shape[1])], 1.0, atol=tol) and \
        len(set(perm.tolist())) == mags.shape[1]
    return perm if ok else None


def truth_table_fidelity(choi: np.ndarray, target: np.ndarray) -> float | None:
    """(1/d) Σ_i <π(i)|Φ(|i><i|)|π(i)> / Tr Φ(|i><i|), where U|i> ∝ |π(i)>.

    The mean, over the d computational-basis inputs i, of the probability
    that the estimate's output, measured in the computational basis, is the
    basis state the target maps i to (the probability is conditioned on
    the output, i.e. divided by Tr Φ(|i><i|), which is 1 for a
    trace-preserving estimate). Defined only for targets that map basis
    states to basis states up to phases (I, X, CNOT, CZ, SWAP, iSWAP, ...);
    None otherwise.
    """
    perm = basis_permutation(target)
    if perm is None:
        return None
    d = dim_of_choi(choi)
    J4 = choi.reshape(d, d, d, d)                     # J4[i, a, i, a] = <a|Φ(|i><i|)|a>
    diag = np.real(np.einsum("iaia->ia", J4))
    return float(np.mean(diag[np.arange(d), perm] / diag.sum(axis=1)))
