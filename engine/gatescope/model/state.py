"""The measurement model of a state experiment: the linear map from a density matrix to
every row.

A state is the simplest process: a map from a one-dimensional input. Its Choi
matrix is the density matrix itself (J = |1><1| ⊗ ρ = ρ, Tr J = 1, the input
dimension), so `StateModel` offers the interface of
`gatescope.model.process.MeasurementModel` with ρ (d × d) in the place of J:

* row k probes ``p_k = Tr(E_k ρ)``, E_k the row's analyser effect, a product
  of single-qubit effects (qubit 1 the leftmost factor);
* its expected counts are ``ν_k = λ_g · seconds_k · efficiency_k · p_k +
  background_k`` with one unknown intensity λ_g per normalisation group
  (README, "State tomography");
* ``adjoint(w) = Σ_k w_k E_k`` satisfies ``Σ_k w_k p_k(ρ) = Tr[A*(w) ρ]``.

So `gatescope.likelihood.PoissonLikelihood` and the estimators work on it
unchanged; `gatescope.projection.project_physical` projects onto density
matrices for it (``kind == "state"``).

Up to two qubits the model keeps the M × d² matrix of the M distinct
analyser settings. From three qubits (`STRUCTURED_FROM_QUBITS`, shared with
the process model) forward and adjoint maps contract qubit by qubit over the
product grid of the L single-qubit effects (L^n cells): cost O(n · L^n · 4),
and no rows × d² (or settings × d²) matrix exists at any size.
"""

from __future__ import annotations

import numpy as np

from ..channels import apply_on_every_qubit
from ..conventions import pauli_basis, pauli_labels
from ..errors import warn
from ..reader import Experiment
from .process import STRUCTURED_FROM_QUBITS, Identifiability, _short, _span

_P1 = pauli_basis(1)

#: Above this many entries of the (setting, group) Jacobian the exact identifiability rank
#: is replaced by the rank of the product structure (`StateModel.identifiability`): the
#: dense matrix of a six-qubit experiment would need gigabytes.
IDENTIFIABILITY_DENSE_LIMIT = 4_000_000


# --------------------------------------------------------------------------
# Product settings and Pauli coordinates
# --------------------------------------------------------------------------

def full_grid(n_qubits: int, n_single: int) -> np.ndarray:
    """meas_parts of every product setting, shape (n_single^n, n): qubit 1 most
    significant, so setting m has per-qubit indices the base-``n_single`` digits of m."""
    grid = np.indices((n_single,) * n_qubits).reshape(n_qubits, -1).T
    return np.ascontiguousarray(grid, dtype=np.int64)


def product_effects(single_effects: np.ndarray, meas_parts: np.ndarray) -> np.ndarray:
    """Dense effects E_m = ⊗_k single_effects[meas_parts[m, k]], shape (M, d, d)."""
    single = np.asarray(single_effects, dtype=complex)
    out = np.ones((meas_parts.shape[0], 1, 1), dtype=complex)
    for k in range(meas_parts.shape[1]):
        e = single[meas_parts[:, k]]
        out = np.einsum("mab,mcd->macbd", out, e).reshape(out.shape[0], out.shape[1] * 2, -1)
    return out


def _qubit_axes(rho: np.ndarray, n: int) -> np.ndarray:
    """A d × d matrix as a tensor with one axis (x_k, y_k) of size 4 per qubit."""
    t = np.asarray(rho, dtype=complex).reshape((2,) * (2 * n))          # x1..xn y1..yn
    return t.transpose([ax for k in range(n) for ax in (k, n + k)]).reshape((4,) * n)


def _from_qubit_axes(t: np.ndarray, n: int) -> np.ndarray:
    """Inverse of `_qubit_axes`."""
    t = t.reshape((2, 2) * n)                                            # x1 y1 x2 y2 ...
    d = 2 ** n
    return t.transpose([2 * k for k in range(n)] + [2 * k + 1 for k in range(n)]).reshape(d, d)


# per qubit: [(x, y), j] = P_j[x, y] / 2  and  [j, (x, y)] = P_j[y, x]
_FROM_PAULI = np.ascontiguousarray(_P1.reshape(4, 4).T / 2.0)
_TO_PAULI = np.ascontiguousarray(_P1.transpose(0, 2, 1).reshape(4, 4))


def pauli_to_density(coefficients: np.ndarray, n_qubits: int) -> np.ndarray:
    """ρ = (1/d) Σ_j c_j P_j from real Pauli coordinates c (order of
    `gatescope.conventions.pauli_labels`), qubit by qubit: O(n · 4^n · 4)."""
    c = np.asarray(coefficients, dtype=complex).reshape((4,) * n_qubits)
    rho = _from_qubit_axes(apply_on_every_qubit(c, _FROM_PAULI, n_qubits), n_qubits)
    return 0.5 * (rho + rho.conj().T)


def density_to_pauli(rho: np.ndarray, n_qubits: int) -> np.ndarray:
    """c_j = Tr(ρ P_j) (real part), the inverse of `pauli_to_density`."""
    t = apply_on_every_qubit(_qubit_axes(rho, n_qubits), _TO_PAULI, n_qubits)
    return t.reshape(-1).real


# --------------------------------------------------------------------------
# The model
# --------------------------------------------------------------------------

class StateModel:
    """Forward map ρ ↦ p (every row) and its adjoint w ↦ Σ_k w_k E_k for a state experiment.

    Parameters
    ----------
    single_effects : (L, 2, 2) complex array
        The single-qubit analyser effects (positive, Hermitian).
    meas_parts : (M, n) int array
        Setting m measures ``E_m = ⊗_k single_effects[meas_parts[m, k]]``
        (qubit 1 first, leftmost factor).
    meas_index : (rows,) int array
        The setting of every row.
    counts : (rows,) array
        Counts of every row (non-negative whole numbers).
    seconds, efficiency : (rows,) arrays, optional
        Integration time and relative detection efficiency (default 1);
        ``exposure = seconds · efficiency``.
    background : (rows,) array, optional
        Expected background counts (default 0), added to the model.
    group_index : (rows,) int array, optional
        Normalisation group of every row (default: one global group).
    n_groups : int, optional
        Number of groups (default ``group_index.max() + 1``).
    structured : bool, optional
        Force (True) or forbid (False) the qubit-by-qubit contractions;
        by default they are used from `STRUCTURED_FROM_QUBITS` qubits.

    Notes
    -----
    The variable is a d × d density matrix, the Choi matrix of the
    one-dimensional-input process that prepares it; a `gatescope.estimators.Fit`
    of a state model holds it in ``Fit.choi``. ``fixed_intensities`` is None
    and ``trace_decreasing`` False: every intensity is fitted and Tr ρ = 1.
    `from_experiment` builds the model of a state `Experiment`.
    """

    #: What the model's variable is: a density matrix.
    kind = "state"
    fixed_intensities = None
    trace_decreasing = False
    experiment: Experiment | None = None

    def __init__(self, single_effects, meas_parts, meas_index, counts, *, seconds=None,
                 efficiency=None, background=None, group_index=None, n_groups=None,
                 structured: bool | None = None):
        self.single_effects = np.ascontiguousarray(single_effects, dtype=complex)
        self.meas_parts = np.ascontiguousarray(meas_parts, dtype=np.int64)
        if self.meas_parts.ndim != 2:
            raise ValueError("meas_parts must have shape (settings, qubits)")
        self.n_qubits = n = self.meas_parts.shape[1]
        self.dim = d = 2 ** n
        self.meas_index = np.ascontiguousarray(meas_index, dtype=np.int64)
        self.counts = np.asarray(counts, dtype=float)
        self.n_rows = rows = self.counts.shape[0]
        if self.meas_index.shape != (rows,):
            raise ValueError("meas_index and counts must have one entry per row")
        self.n_meas = self.meas_parts.shape[0]
        self.n_single = self.single_effects.shape[0]
        ones = np.ones(rows)
        seconds = ones if seconds is None else np.asarray(seconds, dtype=float)
        efficiency = ones if efficiency is None else np.asarray(efficiency, dtype=float)
        self.exposure = np.asarray(seconds * efficiency, dtype=float)
        self.background = (np.zeros(rows) if background is None
                           else np.asarray(background, dtype=float))
        self.group_index = (np.zeros(rows, dtype=np.int64) if group_index is None
                            else np.ascontiguousarray(group_index, dtype=np.int64))
        self.n_groups = int(self.group_index.max()) + 1 if n_groups is None else int(n_groups)
        self._meas_multiplicity = np.bincount(self.meas_index, minlength=self.n_meas)
        self._pauli_coordinates = None
        self.structured = n >= STRUCTURED_FROM_QUBITS if structured is None else bool(structured)
        # per qubit: to_grid[l, (x, y)] = E_l[y, x] (Tr(E ρ) = Σ E[y, x] ρ[x, y]);
        # from_grid[(x, y), l] = E_l[x, y] (A*(w) = Σ w E)
        self._to_grid = self.single_effects.transpose(0, 2, 1).reshape(self.n_single, 4)
        self._from_grid = np.ascontiguousarray(self.single_effects.reshape(self.n_single, 4).T)
        setting_grid = np.zeros(self.n_meas, dtype=np.int64)
        for k in range(n):                                   # qubit 1 most significant
            setting_grid = setting_grid * self.n_single + self.meas_parts[:, k]
        self.setting_grid = setting_grid
        self.grid_size = self.n_single ** n
        if self.structured:
            self.row_grid = setting_grid[self.meas_index]
        else:
            effects = product_effects(self.single_effects, self.meas_parts)
            self.effects = effects                               # (M, d, d)
            self._forward_matrix = np.ascontiguousarray(
                effects.transpose(0, 2, 1).reshape(self.n_meas, d * d))   # [m, (x, y)] = E_m[y, x]
            self._adjoint_matrix = np.ascontiguousarray(effects.reshape(self.n_meas, d * d))

    @classmethod
    def from_experiment(cls, experiment: Experiment) -> "StateModel":
        """The model of a state experiment (``experiment.kind == "state"``)."""
        if experiment.kind != "state":
            raise ValueError(f"a StateModel needs a state experiment, not a {experiment.kind}")
        model = cls(experiment.single_meas_effects, experiment.meas_parts, experiment.meas_index,
                    experiment.counts, seconds=experiment.seconds,
                    efficiency=experiment.efficiency, background=experiment.background,
                    group_index=experiment.group_index, n_groups=experiment.n_groups)
        model.experiment = experiment
        return model

    # -- the linear map --------------------------------------------------
    def grid_table(self, rho: np.ndarray) -> np.ndarray:
        """Tr(E ρ) on every cell of the product grid (L^n values, qubit 1 most significant)."""
        n = self.n_qubits
        t = apply_on_every_qubit(_qubit_axes(rho, n), self._to_grid, n)
        return t.reshape(-1).real

    def setting_probabilities(self, rho: np.ndarray) -> np.ndarray:
        """p_m = Tr(E_m ρ) for every distinct setting m (real part)."""
        if self.structured:
            return self.grid_table(rho)[self.setting_grid]
        return (self._forward_matrix @ np.asarray(rho, dtype=complex).reshape(-1)).real

    def forward(self, rho: np.ndarray) -> np.ndarray:
        """p_k = Tr(E_k ρ) for every row k (real part)."""
        if self.structured:
            return self.grid_table(rho)[self.row_grid]
        return self.setting_probabilities(rho)[self.meas_index]

    def adjoint(self, weights: np.ndarray) -> np.ndarray:
        """A*(w) = Σ_k w_k E_k, a Hermitian d × d matrix.

        It satisfies Σ_k w_k p_k(ρ) = Tr[A*(w) ρ] for every Hermitian ρ.
        """
        n, d = self.n_qubits, self.dim
        if not self.structured:
            table = np.bincount(self.meas_index, weights=weights, minlength=self.n_meas)
            return (table @ self._adjoint_matrix).reshape(d, d)
        w = np.bincount(self.row_grid, weights=weights, minlength=self.grid_size)
        t = apply_on_every_qubit(w.reshape((self.n_single,) * n).astype(complex),
                                 self._from_grid, n)
        return _from_qubit_axes(t, n)

    def expected_counts(self, rho: np.ndarray, intensities: np.ndarray) -> np.ndarray:
        """ν_k = λ_g · seconds · efficiency · p_k + background."""
        return intensities[self.group_index] * self.exposure * self.forward(rho) + self.background

    def centre(self) -> np.ndarray:
        """I/d, the maximally mixed state (the centre of the set of density matrices)."""
        return np.eye(self.dim, dtype=complex) / self.dim

    # -- Pauli coordinates, used by linear inversion and identifiability --
    def single_pauli_coordinates(self) -> np.ndarray:
        """e1[l, j] = Tr(E_l P_j) of the single-qubit effects, real, shape (L, 4),
        Pauli order I, X, Y, Z."""
        return np.einsum("lab,jba->lj", self.single_effects, _P1).real

    def pauli_coordinates(self) -> np.ndarray:
        """Real Pauli vectors e_m[j] = Tr(E_m P_j) of every setting, shape (M, d²).

        With ρ = (1/d) Σ_j c_j P_j (c_j = Tr(ρ P_j), c_0 = Tr ρ) the setting
        probabilities are p = (1/d) e c. Pauli strings in the order of
        `gatescope.conventions.pauli_labels`; e_m = ⊗_k e1[meas_parts[m, k]].
        The array has M · d² entries: meant for small models (the linear
        inversion of large ones uses `pauli_table` instead).
        """
        if self._pauli_coordinates is None:
            e1 = self.single_pauli_coordinates()
            out = np.ones((self.n_meas, 1))
            for k in range(self.n_qubits):
                out = (out[:, :, None] * e1[self.meas_parts[:, k]][:, None, :]).reshape(
                    self.n_meas, -1)
            out.setflags(write=False)
            self._pauli_coordinates = out
        return self._pauli_coordinates

    def pauli_table(self, coefficients: np.ndarray) -> np.ndarray:
        """(1/d) Σ_j e_m[j] c_j for every grid cell (structured) or setting (dense):
        the probabilities of the operator (1/d) Σ_j c_j P_j, from real Pauli coordinates."""
        n = self.n_qubits
        c = np.asarray(coefficients, dtype=float)
        if not self.structured:
            return self.pauli_coordinates() @ c / self.dim
        e_half = self.single_pauli_coordinates() / 2.0
        return apply_on_every_qubit(c.reshape((4,) * n), e_half, n).reshape(-1)

    def pauli_table_adjoint(self, values: np.ndarray) -> np.ndarray:
        """Adjoint of `pauli_table`: c_j = (1/d) Σ_m e_m[j] v_m."""
        n = self.n_qubits
        v = np.asarray(values, dtype=float)
        if not self.structured:
            return self.pauli_coordinates().T @ v / self.dim
        e_half_t = np.ascontiguousarray(self.single_pauli_coordinates().T / 2.0)
        return apply_on_every_qubit(v.reshape((self.n_single,) * n), e_half_t, n).reshape(-1)

    def setting_multiplicity(self) -> np.ndarray:
        """Number of rows of every distinct setting, shape (M,)."""
        return self._meas_multiplicity

    def identifiability(self) -> Identifiability:
        """Which state parameters the rows determine (d² − 1 when complete).

        ``meas_rank`` is the dimension of the operator space the effects
        span (out of d²); ``missing_outputs`` the Pauli strings (identity
        excluded: Tr ρ = 1 fixes it) outside the span of the effects'
        traceless parts; ``rank`` the number of the d² − 1 state parameters
        the data determine with the intensities fitted: the rank of the
        Jacobian of (λ_g, traceless Pauli coordinates) ↦ expected counts at the
        maximally mixed state, minus the number of groups. When that Jacobian
        (distinct (setting, group) pairs × columns) exceeds
        `IDENTIFIABILITY_DENSE_LIMIT` entries, the product structure gives
        meas_rank = rank(e1)^n and ``rank`` = meas_rank − 1: exact for the
        complete product grid with one global intensity, an upper bound
        otherwise (with a warning when the grid is incomplete). A state is
        one-dimensional on the input side: ``prep_rank`` is 1 and no input is
        missing.
        """
        n, d = self.n_qubits, self.dim
        labels = pauli_labels(n)
        n_params = d * d - 1
        pairs = np.unique(self.meas_index * self.n_groups + self.group_index)
        if pairs.size * (d * d + self.n_groups) <= IDENTIFIABILITY_DENSE_LIMIT:
            e = self.pauli_coordinates()
            measured = e[self._meas_multiplicity > 0]
            meas_rank = _span(measured, labels)[0]
            missing = _span(measured[:, 1:], labels[1:])[1]
            setting, group = np.divmod(pairs, self.n_groups)
            jac = np.zeros((pairs.size, self.n_groups + d * d - 1))
            jac[np.arange(pairs.size), group] = e[setting, 0] / d        # ∂ν/∂λ_g at I/d
            jac[:, self.n_groups:] = e[setting, 1:] / d                  # ∂ν/∂c_j, j ≥ 1
            rank = max(int(np.linalg.matrix_rank(jac)) - self.n_groups, 0)
            return Identifiability(1, meas_rank, rank, n_params, (), tuple(missing))
        e1 = self.single_pauli_coordinates()
        meas_rank = _span(e1, list("IXYZ"))[0] ** n
        missing1 = _span(e1[:, 1:], list("XYZ"))[1]
        missing = tuple(lab for lab in labels if any(ch in missing1 for ch in lab))
        present = np.bincount(self.setting_grid[self._meas_multiplicity > 0],
                              minlength=self.grid_size)
        if np.count_nonzero(present) != self.grid_size:
            warn("undetermined", "identifiability: too many settings for the exact rank and not "
                                 "a complete product grid; the rank reported is an upper bound",
                 stacklevel=2)
        return Identifiability(1, meas_rank, min(meas_rank - 1, n_params), n_params, (), missing)

    def warn_if_undetermined(self, rows: np.ndarray | None = None) -> Identifiability:
        """Warn (GatescopeWarning, code ``undetermined``) naming the Pauli components the
        data leave open. ``rows`` is accepted for the interface of the process model; a
        state's identifiability is that of all its rows."""
        ident = self.identifiability()
        if ident.missing_outputs:
            warn("undetermined",
                 f"the analyser effects span only {ident.meas_rank} of {self.dim ** 2} operator "
                 f"directions: the Pauli components {_short(ident.missing_outputs)} of the state "
                 f"are not measured; the fit still runs", stacklevel=2)
        elif not ident.complete:
            warn("undetermined",
                 f"with the intensities fitted, the rows determine only {ident.rank} of "
                 f"{ident.n_parameters} state parameters; the fit still runs", stacklevel=2)
        return ident


__all__ = ["StateModel", "IDENTIFIABILITY_DENSE_LIMIT", "full_grid", "product_effects",
           "pauli_to_density", "density_to_pauli"]
