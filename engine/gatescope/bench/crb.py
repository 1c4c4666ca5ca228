"""Fisher information of the Poisson row model and the Cramér–Rao bound on ‖Ĵ − J‖²_F.

The row model (README, "Input"): row k has expected counts

    ν_k = λ_g · a_k · p_k(J) + b_k,     p_k(J) = Tr[(ρ_k^T ⊗ E_k) J],

a_k = seconds_k · efficiency_k (``model.exposure``), b_k the background and
g = ``group_index[k]``. The counts are independent Poisson variables, so the
Fisher information of any parameters φ of ν is (Cramér, *Mathematical
Methods of Statistics*, 1946; Rao, Bull. Calcutta Math. Soc. 37, 81 (1945))

    F_φφ' = Σ_k (∂ν_k/∂φ)(∂ν_k/∂φ') / ν_k.

Parameters
----------
The process parameters are coordinates in an orthonormal basis (Frobenius
inner product <X, Y> = Tr X†Y) of the directions along which the fit moves
J:

* trace-preserving model (the fit is over CPTP maps): the Hermitian ΔJ with
  Tr_out ΔJ = 0, a space of dimension d⁴ − d². Basis
  B_ij = (P_j^T ⊗ P_i)/d for output Pauli strings P_i ≠ I and input Pauli
  strings P_j (all d²), in the Pauli order of the README; the coordinate of
  ΔJ on B_ij is Tr[B_ij ΔJ] = R_ij, the Pauli-transfer-matrix entry of ΔJ
  (``channels.choi_to_ptm``). Tr_out B_ij = P_j^T·Tr(P_i)/d = 0 for P_i ≠ I,
  and <B_ij, B_i'j'> = Tr(P_j P_j')·Tr(P_i P_i')/d² = δ_ii'δ_jj'.
  Coordinates are ordered (i, j) with j fastest, i = 1 … d²−1.
* trace non-increasing model (``trace = "decreasing"``): every Hermitian
  direction, the same basis with P_i = I included (d⁴ coordinates, i from 0).
* state model (``model.kind == "state"``, `gatescope.model.StateModel`: the
  variable is a density matrix ρ, Tr ρ = 1): the Hermitian trace-zero
  directions, a space of dimension d² − 1 (``"trace-zero"``). Basis
  B_j = P_j/√d for the Pauli strings P_j ≠ I, in the Pauli order of the
  README; <B_j, B_j'> = Tr(P_j P_j')/d = δ_jj', Tr B_j = 0, and the
  coordinate of Δρ on B_j is Tr(P_j Δρ)/√d.

In the process basis p_k(B_ij) = Tr(ρ_k P_j)·Tr(E_k P_i)/d = r_k[j]·e_k[i]/d
with the Pauli coordinates of ``model.pauli_coordinates``, so the
information is a weighted sum of Kronecker products and is assembled
without any rows × d⁴ matrix. In the state basis p_k(B_j) = e_k[j]/√d,
e_k[j] = Tr(E_k P_j), the product over qubits of the single-qubit
coordinates, built a block of settings at a time.

Both are one computation (`fisher_information`): rows are gathered into
cells (the (prep, meas) pairs of a process, the analyser settings of a
state) that share the derivative g_c = ∂p_k/∂θ, and only the way g_c is
formed differs (`_ProcessTangent`, `_StateTangent`).

Intensities
-----------
As the fit treats them. When ``model.fixed_intensities`` is None the group
intensities λ_g are unknown and profiled out: the information on the process
is the efficient information, the Schur complement

    F_eff = F_θθ − F_θλ F_λλ⁻¹ F_λθ,

whose inverse is the θθ block of the inverse of the full information (F_λλ
is diagonal: a row depends on one intensity only). When the intensities are
fixed (a known input rate), F_eff = F_θθ.

The bound
---------
For any unbiased estimator Ĵ of J (with Tr J = d), E‖Ĵ − J‖²_F ≥ Tr F_eff⁻¹
(the Frobenius norm is the Euclidean norm of the coordinates, the basis being
orthonormal, so the sum of the coordinate variances bounds the mean squared
error). It applies where the physical set has J in its interior, so that
estimators can be unbiased: :func:`hs_crb` returns None unless J has full
rank, tested as λ_min(J) > ``rank_tol`` · λ_max(J) (and, for a trace
non-increasing model, also λ_min(I − Tr_out J) > ``rank_tol``).

Size
----
For a state m = d² − 1 (4095 at six qubits: 134 MB, under the limit; the
assembly costs O(M·m²) for M settings, about 10¹² operations for the 46,656
settings of six qubits, half a minute on one core; benchmarks/README.md). For a
process F has m² entries, m = d⁴ − d²: 240 at two qubits, 4032 at three (a
130 MB matrix, assembled in O(m²·M) operations for M distinct analyser
effects and inverted by Cholesky in O(m³) ≈ 2·10¹⁰ operations, seconds on
one core). At four qubits m = 65280: F alone would take 34 GB and its
inversion ~10¹⁴ operations, so :func:`fisher_information` refuses
(ValueError) any F larger than ``max_bytes`` (default 400 MiB) before
allocating it; :func:`information_along` (one direction at a time, through
the model's own forward map) works at any size, and is what a matrix-free
estimate at four qubits (conjugate gradients for F⁻¹v with a stochastic
trace estimator) would be built on — not provided here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import blas, lapack

from ..channels import choi_to_ptm, partial_trace_output, ptm_to_choi
from ..conventions import n_qubits_of
from ..model import MeasurementModel
from ..model.state import density_to_pauli, pauli_to_density

#: Largest Fisher matrix :func:`fisher_information` allocates (bytes).
MAX_FISHER_BYTES = 400 * 2 ** 20

TRACE_PRESERVING = "trace-preserving"
ALL_DIRECTIONS = "all"
TRACE_ZERO = "trace-zero"
#: Bytes of one block of state design rows (`_StateTangent`).
STATE_BLOCK_BYTES = 32 * 2 ** 20


def directions_of(model) -> str:
    """``"trace-preserving"`` for a CPTP fit, ``"all"`` for a trace non-increasing one,
    ``"trace-zero"`` for a state model."""
    if getattr(model, "kind", "process") == "state":
        return TRACE_ZERO
    return ALL_DIRECTIONS if model.trace_decreasing else TRACE_PRESERVING


def n_parameters(dim: int, directions: str) -> int:
    """d⁴ − d² trace-preserving directions, or d⁴ Hermitian ones of a process on d
    dimensions; d² − 1 trace-zero directions of a state on d dimensions."""
    if directions == TRACE_ZERO:
        return dim ** 2 - 1
    return dim ** 4 - (dim ** 2 if directions == TRACE_PRESERVING else 0)


def fisher_bytes(model: MeasurementModel) -> int:
    """Memory of the dense Fisher matrix of this model (float64)."""
    return 8 * n_parameters(model.dim, directions_of(model)) ** 2


def coordinates(x: np.ndarray, directions: str = TRACE_PRESERVING) -> np.ndarray:
    """Coordinates Tr[B_ij x] of a Hermitian d² × d² matrix in the module's basis
    (for ``"trace-zero"``: Tr[B_j x] of a Hermitian d × d matrix).

    For ``"trace-preserving"`` the component of x outside the trace-preserving
    directions (its Tr_out part) is dropped, for ``"trace-zero"`` its trace
    part, i.e. this is the orthogonal projection followed by the coordinate map.
    """
    if directions == TRACE_ZERO:
        x = np.asarray(x)
        return density_to_pauli(x, n_qubits_of(x.shape[0]))[1:] / np.sqrt(x.shape[0])
    r = choi_to_ptm(x)
    first = 1 if directions == TRACE_PRESERVING else 0
    return np.ascontiguousarray(r[first:, :]).reshape(-1)


def from_coordinates(theta: np.ndarray, dim: int, directions: str = TRACE_PRESERVING) -> np.ndarray:
    """Σ θ_ij B_ij (Σ θ_j B_j for ``"trace-zero"``), the inverse of :func:`coordinates`
    on the directions."""
    if directions == TRACE_ZERO:
        c = np.zeros(dim * dim)
        c[1:] = np.asarray(theta, dtype=float) * np.sqrt(dim)
        return pauli_to_density(c, n_qubits_of(dim))
    d2 = dim * dim
    first = 1 if directions == TRACE_PRESERVING else 0
    r = np.zeros((d2, d2))
    r[first:, :] = np.asarray(theta, dtype=float).reshape(d2 - first, d2)
    return ptm_to_choi(r)


@dataclass(frozen=True)
class FisherInformation:
    """The information on the process (or state) coordinates (intensities handled as the
    fit does).

    Attributes
    ----------
    matrix : (m, m) float array
        F_eff in the basis B_ij (B_j for a state) of the module docstring.
    directions : str
        ``"trace-preserving"``, ``"all"`` or ``"trace-zero"``.
    profiled : bool
        True when the group intensities are unknown and profiled out (Schur
        complement), False when they are fixed.
    dim : int
    """

    matrix: np.ndarray
    directions: str
    profiled: bool
    dim: int

    @property
    def n_parameters(self) -> int:
        return self.matrix.shape[0]


def _row_quantities(model: MeasurementModel, choi: np.ndarray, intensities):
    """p, λ per row, a, ν and the intensities (fixed ones when the model has them)."""
    if intensities is None:
        if model.fixed_intensities is None:
            raise ValueError("intensities are required when the model fits them")
        intensities = model.fixed_intensities
    lam = np.asarray(intensities, dtype=float).reshape(-1)
    if lam.shape[0] != model.n_groups:
        raise ValueError(f"{lam.shape[0]} intensities for {model.n_groups} groups")
    p = model.forward(choi)
    lam_row = lam[model.group_index]
    a = model.exposure
    nu = lam_row * a * p + model.background
    if np.any(nu <= 0):
        raise ValueError("the expected counts vanish in some rows: the information is unbounded "
                         "there (the channel is on the boundary of the physical set)")
    return p, lam_row, a, nu


def information_along(model: MeasurementModel, choi: np.ndarray, intensities,
                      direction: np.ndarray) -> float:
    """vᵀ F_eff v for the coordinates v of a Hermitian ``direction`` (matrix free).

    With q_k = p_k(direction) (the model's forward map), w_k = (λ_g a_k)²/ν_k:

        vᵀ F_θθ v = Σ_k w_k q_k²,   and, profiled,
        vᵀ F_eff v = vᵀ F_θθ v − Σ_g (Σ_{k∈g} λ_g a_k² p_k q_k/ν_k)² / Σ_{k∈g} a_k² p_k²/ν_k.

    ``direction`` should lie in the model's directions (for a
    trace-preserving model, Tr_out direction = 0; for a state model,
    Tr direction = 0). Works at any size.
    """
    p, lam_row, a, nu = _row_quantities(model, choi, intensities)
    q = model.forward(direction)
    value = float(np.sum((lam_row * a * q) ** 2 / nu))
    if model.fixed_intensities is None:
        g = model.group_index
        cross = np.bincount(g, weights=lam_row * a * a * p * q / nu, minlength=model.n_groups)
        nuis = np.bincount(g, weights=(a * p) ** 2 / nu, minlength=model.n_groups)
        ok = nuis > 0
        value -= float(np.sum(cross[ok] ** 2 / nuis[ok]))
    return value


class _ProcessTangent:
    """The process basis B_ij = (P_j^T ⊗ P_i)/d (module docstring); cells are the
    (prep, meas) pairs, g_(p,m) = e_m[i]·r_p[j]/d."""

    def __init__(self, model: MeasurementModel, directions: str):
        d = model.dim
        self.d = d
        self.d2 = d * d
        first = 1 if directions == TRACE_PRESERVING else 0
        self.n_out = self.d2 - first
        self.m = self.n_out * self.d2
        self.n_preps, self.n_meas = model.n_preps, model.n_meas
        self.r, e = model.pauli_coordinates()                  # (P, d²), (M, d²)
        self.e1 = np.ascontiguousarray(e[:, first:])           # (M, n_out)
        self.cell_index = model.pair_index
        self.n_cells = self.n_preps * self.n_meas

    def gram(self, weights: np.ndarray) -> np.ndarray:
        """Σ_c weights_c g_c g_cᵀ: with C_m = Σ_p W_pm r_p r_pᵀ (W = weights/d²),
        F[(i, j), (i', j')] = Σ_m e_m[i] e_m[i'] C_m[j, j'], one output index i at a time
        (peak memory F plus O(M·d⁴))."""
        d2, n_out = self.d2, self.n_out
        table = (weights / d2).reshape(self.n_preps, self.n_meas)
        rr = (self.r[:, :, None] * self.r[:, None, :]).reshape(self.n_preps, d2 * d2)
        c = table.T @ rr                                       # (M, d²·d²): C_m[j, j']
        fisher = np.empty((self.m, self.m))
        view = fisher.reshape(n_out, d2, n_out, d2)
        for i in range(n_out):
            block = ((self.e1[:, i:i + 1] * self.e1).T @ c).reshape(n_out, d2, d2)  # [i', j, j']
            view[i] = block.transpose(1, 0, 2)
        return fisher

    def combine(self, cells: np.ndarray, weights: np.ndarray) -> np.ndarray:
        """Σ_c weights_c g_c over the listed cells."""
        cell_p, cell_m = np.divmod(cells, self.n_meas)
        f = self.e1[cell_m].T @ (weights[:, None] * self.r[cell_p])       # (n_out, d²)
        return f.reshape(-1) / self.d


class _StateTangent:
    """The state basis B_j = P_j/√d, P_j ≠ I (module docstring); cells are the analyser
    settings, g_m[j] = Tr(E_m P_j)/√d, formed `STATE_BLOCK_BYTES` at a time from the
    single-qubit Pauli coordinates (no settings × d² array at any size)."""

    def __init__(self, model):
        self.m = model.dim ** 2 - 1
        self.scale = 1.0 / np.sqrt(model.dim)
        self.e1 = model.single_pauli_coordinates()             # (L, 4)
        self.parts = model.meas_parts                          # (M, n)
        self.cell_index = model.meas_index
        self.n_cells = model.n_meas
        self.block = max(1, STATE_BLOCK_BYTES // (8 * (self.m + 1)))

    def rows(self, cells: np.ndarray) -> np.ndarray:
        """g_c for the listed settings, shape (len(cells), d² − 1)."""
        out = np.ones((cells.size, 1))
        for k in range(self.parts.shape[1]):
            out = (out[:, :, None] * self.e1[self.parts[cells, k]][:, None, :]).reshape(
                cells.size, -1)
        return out[:, 1:] * self.scale

    def gram(self, weights: np.ndarray) -> np.ndarray:
        """Σ_c weights_c g_c g_cᵀ (weights ≥ 0), a block of settings at a time, updated in
        place (`_gram_update`)."""
        fisher = np.zeros((self.m, self.m))
        used = np.flatnonzero(weights)
        for start in range(0, used.size, self.block):
            cells = used[start:start + self.block]
            _gram_update(fisher, self.rows(cells) * np.sqrt(weights[cells])[:, None], 1.0)
        return fisher

    def combine(self, cells: np.ndarray, weights: np.ndarray) -> np.ndarray:
        """Σ_c weights_c g_c over the listed cells."""
        out = np.zeros(self.m)
        for start in range(0, cells.size, self.block):
            part = slice(start, start + self.block)
            out += weights[part] @ self.rows(cells[part])
        return out


def _tangent(model, directions: str):
    return _StateTangent(model) if directions == TRACE_ZERO else _ProcessTangent(model, directions)


def fisher_information(model: MeasurementModel, choi: np.ndarray, intensities=None, *,
                       max_bytes: int = MAX_FISHER_BYTES) -> FisherInformation:
    """The Fisher information F_eff of the rows on the process (or state) coordinates.

    Parameters
    ----------
    model : MeasurementModel or StateModel
    choi : (d², d²) array, or (d, d) for a state model
        The true process (Tr J = d) or state (Tr ρ = 1), at which the
        information is evaluated.
    intensities : (G,) array, optional
        The true group intensities λ_g; the model's fixed ones by default
        (required when the model fits them).
    max_bytes : int
        Refuse (ValueError) when the dense matrix would be larger.

    Notes
    -----
    Rows k sharing a cell c (a (prep, meas) pair, or a state's analyser
    setting) share g_c = ∂p_k/∂θ. With W_c = Σ_{k∈c} (λ_g a_k)²/ν_k,

        F_θθ = Σ_c W_c g_c g_cᵀ

    (`_ProcessTangent.gram`, `_StateTangent.gram`). The nuisance part
    subtracts Σ_g f_g f_gᵀ / D_g with f_g = Σ_{k∈g} (λ_g a_k² p_k/ν_k) g_k
    and D_g = Σ_{k∈g} a_k² p_k²/ν_k, a few groups at a time.
    """
    directions = directions_of(model)
    m = n_parameters(model.dim, directions)
    if 8 * m * m > max_bytes:
        raise ValueError(
            f"the Fisher matrix of {model.n_qubits} qubits has {m}² entries "
            f"({8 * m * m / 2**30:.1f} GiB, over the limit of {max_bytes / 2**20:.0f} MiB); "
            "use information_along for single directions")
    p, lam_row, a, nu = _row_quantities(model, choi, intensities)
    tangent = _tangent(model, directions)
    w = (lam_row * a) ** 2 / nu
    fisher = tangent.gram(np.bincount(tangent.cell_index, weights=w, minlength=tangent.n_cells))
    profiled = model.fixed_intensities is None
    if profiled:
        _subtract_nuisance(fisher, model, tangent, p, lam_row, a, nu)
    _symmetrize(fisher)
    return FisherInformation(fisher, directions, profiled, model.dim)


def _symmetrize(a: np.ndarray, size: int = 512) -> None:
    """a ← (a + aᵀ)/2 in place, block by block (no second m × m array)."""
    m = a.shape[0]
    for i in range(0, m, size):
        for j in range(i, m, size):
            upper = a[i:i + size, j:j + size]
            lower = a[j:j + size, i:i + size]
            avg = 0.5 * (upper + lower.T)
            upper[...] = avg
            lower[...] = avg.T


def _gram_update(fisher: np.ndarray, rows: np.ndarray, alpha: float) -> None:
    """fisher += alpha · rowsᵀ rows, in place: fisher.T is the same symmetric matrix in
    Fortran order, which BLAS updates without an m × m temporary."""
    out = blas.dgemm(alpha, rows, rows, beta=1.0, c=fisher.T, trans_a=1, overwrite_c=1)
    if not np.shares_memory(out, fisher):
        fisher[...] = out.T


def _subtract_nuisance(fisher, model, tangent, p, lam_row, a, nu, chunk: int = 64) -> None:
    """F −= Σ_g f_g f_gᵀ / D_g (in place), groups taken ``chunk`` at a time."""
    g = model.group_index
    u = lam_row * a * a * p / nu
    nuis = np.bincount(g, weights=(a * p) ** 2 / nu, minlength=model.n_groups)
    # aggregate the rows into (group, cell) pairs
    key = g.astype(np.int64) * tangent.n_cells + tangent.cell_index
    cells, inverse = np.unique(key, return_inverse=True)
    weights = np.bincount(inverse, weights=u, minlength=cells.size)
    cell_group, cell_id = np.divmod(cells, tangent.n_cells)
    bounds = np.searchsorted(cell_group, np.arange(model.n_groups + 1))   # sorted by group
    groups = [k for k in range(model.n_groups) if nuis[k] > 0]
    m = fisher.shape[0]
    for start in range(0, len(groups), chunk):
        part = groups[start:start + chunk]
        rows = np.empty((len(part), m))
        for t, k in enumerate(part):
            s = slice(bounds[k], bounds[k + 1])
            rows[t] = tangent.combine(cell_id[s], weights[s]) / np.sqrt(nuis[k])
        _gram_update(fisher, rows, -1.0)


def full_rank(choi: np.ndarray, *, trace_decreasing: bool = False, rank_tol: float = 1e-9) -> bool:
    """The rank test of :func:`hs_crb`.

    True when λ_min(J) > rank_tol · λ_max(J) (J Hermitian part), and, for a
    trace non-increasing model, also λ_min(I − Tr_out J) > rank_tol (J inside
    the set, not on its Tr_out J ⪯ I face).
    """
    h = 0.5 * (choi + choi.conj().T)
    ev = np.linalg.eigvalsh(h)
    if not ev[0] > rank_tol * ev[-1]:
        return False
    if trace_decreasing:
        t = partial_trace_output(h)
        slack = np.linalg.eigvalsh(np.eye(t.shape[0]) - 0.5 * (t + t.conj().T))
        if not slack[0] > rank_tol:
            return False
    return True


def inverse_trace(fisher: np.ndarray) -> float:
    """Tr F⁻¹ by Cholesky, overwriting ``fisher``; inf when F is not positive definite.

    F = L Lᵀ, Tr F⁻¹ = ‖L⁻¹‖²_F (LAPACK dpotrf and dtrtri in place).
    """
    # F is symmetric: its transpose is the same matrix in Fortran order (no copy)
    a = fisher.T if fisher.flags.c_contiguous else np.asfortranarray(fisher)
    chol, info = lapack.dpotrf(a, lower=1, overwrite_a=1, clean=0)
    if info != 0:
        return float("inf")
    inv, info = lapack.dtrtri(chol, lower=1, overwrite_c=1)
    if info != 0:
        return float("inf")
    total = 0.0
    m = inv.shape[0]
    for start in range(0, m, 512):          # the lower triangle only, without a full copy
        stop = min(start + 512, m)
        block = inv[start:stop, :stop]
        total += float(np.sum(np.tril(block, k=start) ** 2))
    return total


def hs_crb(model: MeasurementModel, choi: np.ndarray, intensities=None, *,
           rank_tol: float = 1e-9, max_bytes: int = MAX_FISHER_BYTES) -> float | None:
    """Cramér–Rao bound Tr F_eff⁻¹ on E‖Ĵ − J‖²_F (E‖ρ̂ − ρ‖²_F for a state) for unbiased
    estimators.

    Parameters
    ----------
    model : MeasurementModel or StateModel
        The design: rows, exposures, backgrounds, groups, fixed intensities.
    choi : (d², d²) array, or (d, d) for a state model
        The true process (Tr J = d; trace preserving for a CPTP model) or the
        true density matrix (Tr ρ = 1).
    intensities : (G,) array, optional
        The true intensities (for ``simulate``'s experiments: the shots in
        every group); the model's fixed ones by default.
    rank_tol : float
        Rank test of :func:`full_rank`.

    Returns
    -------
    float or None
        None when J fails the rank test (a boundary point of the physical
        set: no estimator confined to the set is unbiased there and the
        bound does not apply); inf when the rows leave some direction
        undetermined (F singular: no unbiased estimator exists); otherwise
        Tr F_eff⁻¹ (Cramér 1946; Rao 1945), in the units of ‖J‖²_F.

    Raises
    ------
    ValueError
        When the dense Fisher matrix would exceed ``max_bytes`` (processes of
        four qubits and more; see the module docstring).
    """
    if not full_rank(choi, trace_decreasing=model.trace_decreasing, rank_tol=rank_tol):
        return None
    m = n_parameters(model.dim, directions_of(model))
    if 8 * m * m <= max_bytes and not model.identifiability().complete:
        return float("inf")
    info = fisher_information(model, choi, intensities, max_bytes=max_bytes)
    return inverse_trace(info.matrix)


__all__ = ["FisherInformation", "fisher_information", "information_along", "hs_crb",
           "full_rank", "inverse_trace", "coordinates", "from_coordinates", "directions_of",
           "n_parameters", "fisher_bytes", "MAX_FISHER_BYTES", "TRACE_PRESERVING",
           "ALL_DIRECTIONS", "TRACE_ZERO"]
