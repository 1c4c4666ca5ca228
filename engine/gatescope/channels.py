"""Representations of quantum channels and conversions between them.

Conventions (the README's Conventions), for a channel Φ on d = 2^n dimensions:

* Choi matrix ``J = Σ_ij |i><j| ⊗ Φ(|i><j|)``: input factor first, output
  second, ``Tr J = d``; trace preserving ⇔ ``Tr_out J = I_d``. In index
  form ``J[i*d + a, j*d + b] = <a|Φ(|i><j|)|b>``.
* Chi matrix: ``Φ(ρ) = Σ_mn χ_mn P_m ρ P_n`` over Pauli strings in the order
  of :func:`gatescope.conventions.pauli_labels`; ``Tr χ = 1`` when trace
  preserving. With ``|P>> = Σ_i |i> ⊗ P|i>`` one has ``J = Σ_mn χ_mn
  |P_m>><<P_n|`` and ``χ_mn = <<P_m|J|P_n>>/d²``.
* Pauli transfer matrix ``R_ij = Tr(P_i Φ(P_j))/d`` (real for a
  Hermiticity-preserving map); ``J = (1/d) Σ_ij R_ij P_j^T ⊗ P_i``.
* Superoperator ``S`` acts on column-stacked matrices:
  ``vec(Φ(ρ)) = S vec(ρ)`` with ``vec(X)[b*d + a] = X[a, b]``.
* Kraus operators ``Φ(ρ) = Σ_k K_k ρ K_k†``; ``J = Σ_k |K_k>><<K_k|``.
"""

from __future__ import annotations

import numpy as np

from .conventions import n_qubits_of, pauli_basis


def dim_of_choi(choi: np.ndarray) -> int:
    """d for a d²×d² Choi matrix."""
    d = int(round(np.sqrt(choi.shape[0])))
    if d * d != choi.shape[0] or choi.shape[0] != choi.shape[1]:
        raise ValueError(f"a Choi matrix must be d²×d², got {choi.shape}")
    return d


def operator_vector(op: np.ndarray) -> np.ndarray:
    """|K>> = Σ_i |i> ⊗ K|i>, i.e. entry (i, a) is K[a, i]."""
    return np.asarray(op).T.reshape(-1)


def choi_from_unitary(u: np.ndarray) -> np.ndarray:
    """Choi matrix |U>><<U| of ρ ↦ UρU†."""
    v = operator_vector(u)
    return np.outer(v, v.conj())


def choi_from_kraus(kraus) -> np.ndarray:
    """Choi matrix Σ_k |K_k>><<K_k| of ρ ↦ Σ_k K_k ρ K_k†."""
    vs = np.array([operator_vector(k) for k in kraus])
    return vs.T @ vs.conj()


def kraus_from_choi(choi: np.ndarray, tol: float = 1e-12) -> list[np.ndarray]:
    """Kraus operators from the eigen-decomposition of a positive Choi matrix.

    Eigenvalues below ``tol · λ_max`` are dropped; negative ones (an
    unphysical estimate) raise ValueError.
    """
    d = dim_of_choi(choi)
    w, v = np.linalg.eigh(0.5 * (choi + choi.conj().T))
    if w[0] < -max(tol, 1e-9) * max(1.0, abs(w[-1])):
        raise ValueError(f"Choi matrix is not positive (eigenvalue {w[0]:.3g}); no Kraus form")
    keep = w > tol * max(w[-1], 0.0)
    return [np.sqrt(wk) * vk.reshape(d, d).T for wk, vk in zip(w[keep], v[:, keep].T)]


def _choi_tensor(choi: np.ndarray) -> np.ndarray:
    d = dim_of_choi(choi)
    return choi.reshape(d, d, d, d)            # [i, a, j, b]


def choi_to_superop(choi: np.ndarray) -> np.ndarray:
    """Column-stacking superoperator S from the Choi matrix."""
    d = dim_of_choi(choi)
    # S[(b,a),(j,i)] = J[i,a,j,b]
    return _choi_tensor(choi).transpose(3, 1, 2, 0).reshape(d * d, d * d)


def superop_to_choi(superop: np.ndarray) -> np.ndarray:
    """Inverse of :func:`choi_to_superop`."""
    d = dim_of_choi(superop)
    return superop.reshape(d, d, d, d).transpose(3, 1, 2, 0).reshape(d * d, d * d)


def _pauli_vectors(d: int) -> np.ndarray:
    """Columns |P_m>> for every Pauli string, shape (d², d²)."""
    basis = pauli_basis(n_qubits_of(d))
    return basis.transpose(0, 2, 1).reshape(d * d, d * d).T


def choi_to_chi(choi: np.ndarray) -> np.ndarray:
    """χ_mn = <<P_m|J|P_n>>/d² (Pauli order of `conventions.pauli_labels`)."""
    d = dim_of_choi(choi)
    v = _pauli_vectors(d)
    return v.conj().T @ choi @ v / d**2


def chi_to_choi(chi: np.ndarray) -> np.ndarray:
    """J = Σ_mn χ_mn |P_m>><<P_n|."""
    d = dim_of_choi(chi)
    v = _pauli_vectors(d)
    return v @ chi @ v.conj().T


_P1 = pauli_basis(1)


def choi_qubit_axes(choi: np.ndarray, n: int) -> np.ndarray:
    """J as a tensor with one axis of size 16 per qubit: (x_k, a_k, y_k, b_k) grouped."""
    t = choi.reshape((2,) * (4 * n))                     # x1..xn a1..an y1..yn b1..bn
    order = [ax for k in range(n) for ax in (k, n + k, 2 * n + k, 3 * n + k)]
    return t.transpose(order).reshape((16,) * n)


def from_qubit_axes(t: np.ndarray, n: int) -> np.ndarray:
    """Inverse of :func:`choi_qubit_axes`."""
    t = t.reshape((2,) * (4 * n))                        # x1 a1 y1 b1 x2 a2 ...
    order = [4 * k + role for role in range(4) for k in range(n)]
    d = 2 ** n
    return t.transpose(order).reshape(d * d, d * d)


def apply_on_every_qubit(t: np.ndarray, op: np.ndarray, n: int) -> np.ndarray:
    """Contract the same 16 × 16 matrix with every qubit axis (cost 16·n·d⁴)."""
    for k in range(n):
        t = np.moveaxis(np.tensordot(op, t, axes=([1], [k])), 0, k)
    return t


# per qubit: Q[(i, j), (x, a, y, b)] = P_j[x, y] P_i[b, a]  (R_ij = Tr[(P_j^T ⊗ P_i) J]/d)
_TO_PTM = np.einsum("jxy,iba->ijxayb", _P1, _P1).reshape(16, 16)
# per qubit: Q[(x, a, y, b), (i, j)] = P_j[y, x] P_i[a, b]  (J = Σ R_ij P_j^T ⊗ P_i / d)
_FROM_PTM = np.einsum("jyx,iab->xaybij", _P1, _P1).reshape(16, 16)


def choi_to_ptm(choi: np.ndarray) -> np.ndarray:
    """R_ij = Tr(P_i Φ(P_j))/d = Tr[(P_j^T ⊗ P_i) J]/d, returned as float64.

    Computed qubit by qubit (the Pauli basis is a tensor product), O(n·d⁴).
    """
    d = dim_of_choi(choi)
    n = n_qubits_of(d)
    t = apply_on_every_qubit(choi_qubit_axes(choi, n), _TO_PTM, n) / d
    # axes (i_k, j_k) per qubit -> R[(i_1..i_n), (j_1..j_n)]
    t = t.reshape((4, 4) * n).transpose([2 * k for k in range(n)] + [2 * k + 1 for k in range(n)])
    return np.ascontiguousarray(t.reshape(d * d, d * d).real)


def ptm_to_choi(ptm: np.ndarray) -> np.ndarray:
    """J = (1/d) Σ_ij R_ij P_j^T ⊗ P_i, qubit by qubit."""
    d = int(round(np.sqrt(ptm.shape[0])))
    n = n_qubits_of(d)
    t = np.asarray(ptm, dtype=complex).reshape((4,) * (2 * n))
    t = t.transpose([ax for k in range(n) for ax in (k, n + k)]).reshape((16,) * n)
    return from_qubit_axes(apply_on_every_qubit(t, _FROM_PTM, n) / d, n)


def partial_trace_output(choi: np.ndarray) -> np.ndarray:
    """Tr_out J (a d×d matrix on the input space); I_d when trace preserving."""
    return np.einsum("iaja->ij", _choi_tensor(choi))


def apply_channel(choi: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """Φ(ρ) = Tr_in[(ρ^T ⊗ I) J]."""
    return np.einsum("ij,iajb->ab", rho, _choi_tensor(choi))


def compose(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Choi matrix of ρ ↦ second(first(ρ))."""
    return superop_to_choi(choi_to_superop(second) @ choi_to_superop(first))
