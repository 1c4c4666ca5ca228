"""Figures of merit of a reconstructed state (README, "State tomography").

Conventions (README, Conventions): qubit 1 is the leftmost tensor factor,
H = |0>, Bloch vectors are (<X>, <Y>, <Z>). Every figure takes the density
matrix as given (its Hermitian part); estimates have Tr ρ = 1. Entropies
are in bits.

* ``state_fidelity`` F(ρ, σ) = (Tr √(√ρ σ √ρ))² (squared convention; 1 for
  equal states). For a pure target σ = |ψ><ψ| it is <ψ|ρ|ψ>.
* ``purity`` Tr ρ²; ``von_neumann_entropy`` −Tr ρ log₂ ρ;
  ``linear_entropy`` d/(d−1) · (1 − Tr ρ²) (0 for a pure state, 1 for I/d).
* Two qubits: ``concurrence`` C (Wootters, Phys. Rev. Lett. 80, 2245
  (1998)), ``tangle`` C² (Coffman, Kundu & Wootters, Phys. Rev. A 61,
  052306 (2000)), ``entanglement_of_formation`` h((1 + √(1 − C²))/2) with h
  the binary entropy in bits (Wootters 1998), ``negativity``
  (‖ρ^{T_B}‖₁ − 1)/2 and ``log_negativity`` log₂ ‖ρ^{T_B}‖₁ (Vidal & Werner,
  Phys. Rev. A 65, 032314 (2002)), T_B the partial transpose on qubit 2,
  and ``chsh_max``, the largest CHSH value over measurement settings,
  2√(t₁² + t₂²) with t₁ ≥ t₂ the two largest singular values of the
  correlation matrix T_ij = Tr[ρ σ_i ⊗ σ_j], i, j ∈ (X, Y, Z) (Horodecki,
  Horodecki & Horodecki, Phys. Lett. A 200, 340 (1995)).
* Three qubits and more: ``negativity_k`` for k = 1 … n, the negativity of
  qubit k against the other qubits (partial transpose on qubit k; the
  transpose on the rest has the same spectrum).

`compute_state_figures` returns them in the order of `state_figure_names`.
"""

from __future__ import annotations

import numpy as np

from ..conventions import n_qubits_of, pauli_basis
from ..reader import MAX_QUBITS

#: Names of the state figures, in the order `compute_state_figures` returns them (the
#: two-qubit ones only for two qubits; ``negativity_k`` is added for n ≥ 3).
STATE_FIGURE_NAMES = ("state_fidelity", "purity", "von_neumann_entropy", "linear_entropy",
                      "concurrence", "tangle", "entanglement_of_formation", "negativity",
                      "log_negativity", "chsh_max")
TWO_QUBIT_FIGURES = STATE_FIGURE_NAMES[4:]
#: Every state figure name in the order results list them (``negativity_k`` for up to
#: `gatescope.reader.MAX_QUBITS` qubits after the others).
STATE_FIGURE_ORDER = STATE_FIGURE_NAMES + tuple(f"negativity_{k}"
                                                for k in range(1, MAX_QUBITS + 1))

#: Keys `compute_state_figures` puts into ``details`` for two qubits: the unit Bloch
#: directions (<X>, <Y>, <Z>) of the CHSH settings that reach ``chsh_max``.
CHSH_DETAIL_KEYS = ("chsh_a", "chsh_a_prime", "chsh_b", "chsh_b_prime")

#: `chsh_gap_warning` warns when t₂ − t₃ is below this many bootstrap standard deviations
#: of chsh_max: the noise then decides which of the two is the larger.
CHSH_GAP_SPREADS = 3.0

_PAULI_XYZ = pauli_basis(1)[1:]
_YY = np.kron(pauli_basis(1)[2], pauli_basis(1)[2]).real        # σ_y ⊗ σ_y, real symmetric


def state_figure_names(n_qubits: int, with_target: bool) -> tuple[str, ...]:
    """The figure names `compute_state_figures` returns for this size, in order."""
    names = [STATE_FIGURE_NAMES[0]] if with_target else []
    names += STATE_FIGURE_NAMES[1:4]
    if n_qubits == 2:
        names += TWO_QUBIT_FIGURES
    elif n_qubits >= 3:
        names += [f"negativity_{k}" for k in range(1, n_qubits + 1)]
    return tuple(names)


# --------------------------------------------------------------------------
# Spectral helpers
# --------------------------------------------------------------------------

def _hermitian(rho) -> np.ndarray:
    rho = np.asarray(rho, dtype=complex)
    return 0.5 * (rho + rho.conj().T)


def _factor(rho: np.ndarray) -> np.ndarray:
    """A with A A† = ρ₊ (d × r): eigenvectors times √eigenvalue over the support of ρ.

    Eigenvalues at or below 10·d·ε·max|λ| are treated as zero: a backward-stable
    eigen-solver returns a zero eigenvalue as ±(a few d·ε·‖ρ‖), and its square root
    (≈1e−8) would otherwise enter the result. Below that size the eigenvalues are not
    determined by the floating-point matrix anyway. Negative eigenvalues (an
    unphysical estimate) are dropped too.
    """
    w, v = np.linalg.eigh(rho)
    scale = np.max(np.abs(w)) if w.size else 0.0
    keep = w > 10.0 * rho.shape[0] * np.finfo(float).eps * scale
    return v[:, keep] * np.sqrt(w[keep])


def _pure_vector(target) -> np.ndarray | None:
    """The normalised ket of a pure target (a vector, or a density matrix of rank 1)."""
    t = np.asarray(target, dtype=complex)
    if t.ndim == 1:
        return t / np.linalg.norm(t)
    a = _factor(_hermitian(t))
    if a.shape[1] == 1:
        return a[:, 0] / np.linalg.norm(a[:, 0])
    return None


# --------------------------------------------------------------------------
# Figures of any size
# --------------------------------------------------------------------------

def state_fidelity(rho, target) -> float:
    """F(ρ, σ) = (Tr √(√ρ σ √ρ))², σ the target (a ket or a density matrix).

    Pure target σ = |ψ><ψ| (given as a ket, or as a density matrix of rank 1):
    F = <ψ|ρ|ψ>, exact and linear in ρ (for an unphysical linear-inversion
    estimate it is that linear value).

    Mixed target: with factorisations ρ₊ = A A† and σ = B B† from the
    eigen-decompositions (`_factor`), √F = ‖B† A‖₁, the sum of the singular
    values of the small r_σ × r_ρ matrix B† A (Uhlmann's theorem: both are
    ‖√σ √ρ‖₁, since A = √ρ U and B = √σ V with partial isometries U, V;
    Nielsen & Chuang, *Quantum Computation and Quantum Information*, §9.2.2).
    No matrix square root is formed and no square root is taken of a
    computed near-zero quantity: the singular values are accurate to
    ε·‖B†A‖ in absolute terms, so a rank-deficient ρ or σ (estimates on the
    boundary, pure states) keeps F accurate to ~1e−15 instead of the ~1e−8
    that the square root of a rounding-level eigenvalue of √ρ σ √ρ gives.
    Negative eigenvalues of ρ count as zero here.
    """
    rho = _hermitian(rho)
    psi = _pure_vector(target)
    if psi is not None:
        return float(np.vdot(psi, rho @ psi).real)
    a = _factor(rho)
    b = _factor(_hermitian(target))
    s = np.linalg.svd(b.conj().T @ a, compute_uv=False)
    return float(np.sum(s) ** 2)


def purity(rho) -> float:
    """Tr ρ² (1 for a pure state, 1/d for I/d)."""
    rho = _hermitian(rho)
    return float(np.vdot(rho, rho).real)


def von_neumann_entropy(rho) -> float:
    """S(ρ) = −Σ λ log₂ λ over the positive eigenvalues (bits; 0 log 0 = 0).

    Negative eigenvalues of an unphysical estimate are left out.
    """
    w = np.linalg.eigvalsh(_hermitian(rho))
    w = w[w > 0]
    return float(-np.sum(w * np.log2(w))) + 0.0          # + 0.0: no −0.0 for a pure state


def linear_entropy(rho) -> float:
    """d/(d−1) · (1 − Tr ρ²): 0 for a pure state, 1 for the maximally mixed one."""
    d = np.asarray(rho).shape[0]
    return float(d / (d - 1) * (1.0 - purity(rho)))


def partial_transpose(rho, qubit: int) -> np.ndarray:
    """ρ^{T_k}: the transpose on qubit ``qubit`` (1-based, qubit 1 leftmost)."""
    rho = np.asarray(rho)
    d = rho.shape[0]
    n = n_qubits_of(d)
    if not 1 <= qubit <= n:
        raise ValueError(f"qubit must be between 1 and {n}, got {qubit}")
    t = rho.reshape((2,) * (2 * n))
    k = qubit - 1
    axes = list(range(2 * n))
    axes[k], axes[n + k] = n + k, k
    return t.transpose(axes).reshape(d, d)


def _pt_trace_norm(rho, qubit: int) -> float:
    return float(np.sum(np.abs(np.linalg.eigvalsh(_hermitian(partial_transpose(rho, qubit))))))


def negativity(rho, qubit: int | None = None) -> float:
    """(‖ρ^{T_k}‖₁ − 1)/2 (Vidal & Werner 2002); k = 2 (T_B) for two qubits by default.

    For n qubits, the negativity of qubit k against the rest.
    """
    n = n_qubits_of(np.asarray(rho).shape[0])
    qubit = n if qubit is None else qubit
    return 0.5 * (_pt_trace_norm(rho, qubit) - 1.0)


def log_negativity(rho, qubit: int | None = None) -> float:
    """log₂ ‖ρ^{T_k}‖₁ (Vidal & Werner 2002); k = 2 for two qubits by default."""
    n = n_qubits_of(np.asarray(rho).shape[0])
    qubit = n if qubit is None else qubit
    return float(np.log2(_pt_trace_norm(rho, qubit)))


# --------------------------------------------------------------------------
# Two qubits
# --------------------------------------------------------------------------

def _check_two_qubits(rho) -> np.ndarray:
    rho = _hermitian(rho)
    if rho.shape != (4, 4):
        raise ValueError(f"this figure is defined for two qubits (4 × 4), got {rho.shape}")
    return rho


def concurrence(rho) -> float:
    """Wootters' concurrence C = max(0, λ₁ − λ₂ − λ₃ − λ₄) of a two-qubit state.

    λ are the decreasing square roots of the eigenvalues of ρ ρ̃,
    ρ̃ = (σ_y⊗σ_y) ρ* (σ_y⊗σ_y) (Wootters 1998). They are computed as the
    singular values of τ = Aᵀ (σ_y⊗σ_y) A, ρ₊ = A A† (Wootters' own
    τ_ij = <v_i|ṽ_j> over the subnormalised eigenvectors v_i of ρ): no square
    root of a computed near-zero eigenvalue, so rank-deficient and pure
    states keep full accuracy (a pure state gives 2|ad − bc|).
    """
    a = _factor(_check_two_qubits(rho))
    lam = np.zeros(4)
    s = np.linalg.svd(a.T @ _YY @ a, compute_uv=False)
    lam[:s.size] = s
    lam = np.sort(lam)[::-1]
    return float(max(0.0, lam[0] - lam[1] - lam[2] - lam[3]))


def tangle(rho) -> float:
    """C², the square of the concurrence (Coffman, Kundu & Wootters 2000)."""
    return concurrence(rho) ** 2


def entanglement_of_formation(rho) -> float:
    """E_F = h((1 + √(1 − C²))/2) in bits, h(x) = −x log₂ x − (1 − x) log₂(1 − x)
    (Wootters 1998)."""
    return _formation_from_concurrence(concurrence(rho))


def _formation_from_concurrence(c: float) -> float:
    x = 0.5 * (1.0 + np.sqrt(max(0.0, 1.0 - c * c)))
    return float(sum(-p * np.log2(p) for p in (x, 1.0 - x) if p > 0))


def correlation_matrix(rho) -> np.ndarray:
    """T_ij = Tr[ρ σ_i ⊗ σ_j], i (qubit 1), j (qubit 2) in (X, Y, Z); real 3 × 3."""
    rho = _check_two_qubits(rho)
    t = rho.reshape(2, 2, 2, 2)                      # [a, b, a', b'] = <ab|ρ|a'b'>
    # Tr[ρ (σ_i ⊗ σ_j)] = Σ ρ[(a,b),(a',b')] σ_i[a',a] σ_j[b',b]
    return np.einsum("abcd,ica,jdb->ij", t, _PAULI_XYZ, _PAULI_XYZ).real


def chsh_max(rho) -> tuple[float, dict]:
    """Largest CHSH value over settings, and settings that reach it.

    CHSH value S = E(a, b) + E(a, b′) + E(a′, b) − E(a′, b′) with
    E(a, b) = Tr[ρ (a·σ) ⊗ (b·σ)] = aᵀ T b for unit Bloch directions a, a′ of
    qubit 1 and b, b′ of qubit 2 (Bloch convention (<X>, <Y>, <Z>)). Its
    maximum is 2√(t₁² + t₂²), t₁ ≥ t₂ the two largest singular values of T
    (Horodecki, Horodecki & Horodecki 1995). Settings: with T = U diag(t) Vᵀ,
    a = u₁, a′ = u₂, b = cos θ v₁ + sin θ v₂, b′ = cos θ v₁ − sin θ v₂,
    tan θ = t₂/t₁; then S = 2(t₁ cos θ + t₂ sin θ) = 2√(t₁² + t₂²).

    The settings are not unique (for example, any common rotation when
    t₁ = t₂); the singular vectors' signs are fixed so that the entry of
    largest magnitude of v₁ and of v₂ is positive (the first one on a tie),
    with u_k = T v_k / t_k following. When T = 0 every setting gives 0 and
    θ = 0.

    Returns
    -------
    (value, settings) with settings the dict ``{"chsh_a": a, "chsh_a_prime": a′,
    "chsh_b": b, "chsh_b_prime": b′}`` of unit 3-vectors, and
    ``"correlation_singular_values"``: (t₁, t₂, t₃), decreasing.
    """
    t = correlation_matrix(rho)
    u, s, vt = np.linalg.svd(t)
    for k in range(2):
        v = vt[k]
        if v[np.argmax(np.abs(v))] < 0:
            vt[k] = -v
            u[:, k] = -u[:, k]
    t1, t2 = float(s[0]), float(s[1])
    theta = np.arctan2(t2, t1)
    c, sn = np.cos(theta), np.sin(theta)
    settings = {"chsh_a": u[:, 0].copy(), "chsh_a_prime": u[:, 1].copy(),
                "chsh_b": c * vt[0] + sn * vt[1], "chsh_b_prime": c * vt[0] - sn * vt[1],
                "correlation_singular_values": s.copy()}
    return float(2.0 * np.hypot(t1, t2)), settings


def chsh_gap_warning(details: dict, spread: float) -> str | None:
    """A warning text when ``chsh_max`` sits where it is not smooth, else None.

    ``chsh_max`` = 2√(t₁² + t₂²) has a kink where the second and third
    singular values of the correlation matrix meet (t₂ = t₃), and a Bell state
    with white noise or a reduced visibility sits exactly there (its X and Y
    correlations are equal in size). There the estimate is biased upward (the
    larger of two noisy, equal values is chosen) and its bootstrap interval
    covers less than its level; the README ("State tomography") gives measured
    numbers. The text is returned when t₂ − t₃ < `CHSH_GAP_SPREADS` · ``spread``,
    ``spread`` the bootstrap standard deviation of ``chsh_max``.
    """
    t = details.get("correlation_singular_values")
    if t is None or not np.isfinite(spread) or t[1] - t[2] >= CHSH_GAP_SPREADS * spread:
        return None
    return (f"chsh_max: the second and third singular values of the correlation matrix "
            f"(t = {t[0]:.4f}, {t[1]:.4f}, {t[2]:.4f}) are closer than {CHSH_GAP_SPREADS:g} "
            f"bootstrap standard deviations ({spread:.2g}) of chsh_max; there the largest CHSH "
            f"value over settings is biased upward and its interval may cover less than its "
            f"level (README, \"State tomography\")")


# --------------------------------------------------------------------------
# All figures
# --------------------------------------------------------------------------

def compute_state_figures(rho, target=None, details: dict | None = None) -> dict[str, float]:
    """All state figures, in the order of `state_figure_names(n, target is not None)`.

    Parameters
    ----------
    rho : (d, d) array
        The estimate (Hermitian part used).
    target : (d,) ket, (d, d) density matrix, or None
        ``state_fidelity`` is computed only with a target.
    details : dict, optional
        Filled, for two qubits, with the CHSH settings that reach
        ``chsh_max``: `CHSH_DETAIL_KEYS` → unit Bloch directions (3,) of
        qubit 1 (a, a′) and qubit 2 (b, b′), and with
        ``correlation_singular_values`` (t₁ ≥ t₂ ≥ t₃, `chsh_max`).
    """
    rho = _hermitian(rho)
    n = n_qubits_of(rho.shape[0])
    out = {}
    if target is not None:
        out["state_fidelity"] = state_fidelity(rho, target)
    out["purity"] = purity(rho)
    out["von_neumann_entropy"] = von_neumann_entropy(rho)
    out["linear_entropy"] = linear_entropy(rho)
    if n == 2:
        c = concurrence(rho)
        out["concurrence"] = c
        out["tangle"] = c * c
        out["entanglement_of_formation"] = _formation_from_concurrence(c)
        out["negativity"] = negativity(rho, 2)
        out["log_negativity"] = log_negativity(rho, 2)
        value, settings = chsh_max(rho)
        out["chsh_max"] = value
        if details is not None:
            details.update(settings)
    elif n >= 3:
        for k in range(1, n + 1):
            out[f"negativity_{k}"] = negativity(rho, k)
    return out


__all__ = ["STATE_FIGURE_NAMES", "STATE_FIGURE_ORDER", "CHSH_DETAIL_KEYS", "CHSH_GAP_SPREADS",
           "state_figure_names", "compute_state_figures", "chsh_gap_warning",
           "state_fidelity", "purity", "von_neumann_entropy", "linear_entropy", "partial_transpose",
           "negativity", "log_negativity", "concurrence", "tangle", "entanglement_of_formation",
           "correlation_matrix", "chsh_max"]
