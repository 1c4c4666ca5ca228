"""The measurement model of a process: the linear map from a Choi matrix to every row.

Row k probes the probability ``p_k = Tr[(ρ_k^T ⊗ E_k) J]`` (docs/file-formats.md, "Input"),
ρ_k the row's preparation density matrix and E_k its analyser effect. Its
expected counts are ``ν_k = λ_g · seconds_k · efficiency_k · p_k +
background_k``.

No design matrix of size rows × d⁴ is ever formed. The rows only use P
distinct preparations and M distinct effects, so all probabilities come from
one P × M table

    T = R · J' · F^T,   R[p, (x, y)] = ρ_p[x, y],   F[m, (a, b)] = E_m[b, a],
    J'[(x, y), (a, b)] = J[(x, a), (y, b)],

gathered by each row's (prep, meas) pair; the adjoint scatters row weights
back into the table and contracts the other way. Cost O(P·d⁴ + P·M·d²),
memory O(d⁴ + P·M + rows).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..channels import apply_on_every_qubit, choi_qubit_axes, from_qubit_axes
from ..conventions import pauli_basis, pauli_labels
from ..errors import warn
from ..reader import Experiment


#: From this many qubits the forward and adjoint maps contract qubit by qubit; below
#: it one P × M table of all (prep, meas) pairs is cheaper.
STRUCTURED_FROM_QUBITS = 3
#: Singular values of the preparations' (or effects') Pauli vectors below this
#: multiple of the rounding level (max(shape)·ε·s_max, numpy's matrix_rank default)
#: count as zero: the states are given to a few digits, so exact rank tests would
#: call a nearly dependent set complete.
RANK_TOLERANCE_FACTOR = 100
#: A Pauli component whose weight in the missing directions exceeds this is named
#: as undetermined (the weights of one missing direction sum to 1).
MISSING_WEIGHT = 0.5
#: Above this many process parameters the rank of an incomplete (prep, meas) design
#: is bounded instead of computed (the dense SVD would need rows × params memory).
DENSE_RANK_MAX_PARAMETERS = 4096


@dataclass(frozen=True, eq=False)
class Identifiability:
    """Which part of the process the data determine.

    ``prep_rank`` and ``meas_rank`` are the dimensions (out of d²) of the
    operator spaces spanned by the preparations and by the analyser
    effects; ``rank`` the number of trace-preserving process parameters
    the rows determine (d⁴ − d² when the data are informationally
    complete).
    """

    prep_rank: int
    meas_rank: int
    rank: int
    n_parameters: int
    missing_inputs: tuple[str, ...]
    missing_outputs: tuple[str, ...]

    @property
    def complete(self) -> bool:
        return self.rank == self.n_parameters


class MeasurementModel:
    """Forward map J ↦ p (every row) and its adjoint w ↦ Σ_k w_k ρ_k^T ⊗ E_k.

    Parameters
    ----------
    experiment : Experiment
        The validated experiment whose rows define the map.
    """

    #: What the model's variable is: a Choi matrix (`gatescope.model.state.StateModel`
    #: has "state").
    kind = "process"

    def __init__(self, experiment: Experiment):
        self.experiment = experiment
        self.n_qubits = experiment.n_qubits
        self.dim = d = experiment.dim
        self.n_rows = experiment.n_rows
        self.n_preps = experiment.prep_states.shape[0]
        self.n_meas = experiment.meas_effects.shape[0]
        self.prep_matrix = np.ascontiguousarray(experiment.prep_states.reshape(self.n_preps, d * d))
        self.meas_matrix = np.ascontiguousarray(
            experiment.meas_effects.transpose(0, 2, 1).reshape(self.n_meas, d * d))
        self.pair_index = experiment.prep_index * self.n_meas + experiment.meas_index
        self.exposure = np.asarray(experiment.seconds * experiment.efficiency, dtype=float)
        self.background = np.asarray(experiment.background, dtype=float)
        self.counts = np.asarray(experiment.counts, dtype=float)
        self.group_index = experiment.group_index
        self.n_groups = experiment.n_groups
        #: True for trace = "decreasing": Tr_out J ⪯ I, and the single (global) intensity is
        #: the known input rate instead of a fitted parameter.
        self.trace_decreasing = experiment.trace == "decreasing"
        self.fixed_intensities = (np.array([float(experiment.input_rate)])
                                  if self.trace_decreasing else None)
        self._pair_multiplicity = np.bincount(self.pair_index, minlength=self.n_preps * self.n_meas)
        self._pauli = None
        self.structured = self.n_qubits >= STRUCTURED_FROM_QUBITS
        if self.structured:
            self._setup_qubitwise(experiment)

    # -- qubit-by-qubit contractions (three qubits and more) --------------
    def _setup_qubitwise(self, exp: Experiment) -> None:
        """Per-qubit operators for the product grid of single-qubit states.

        With K single-qubit preparations and L single-qubit effects, the grid
        holds every product (K^n × L^n); each row's pair is one grid cell.
        One qubit at a time, C[(p, m), (x, a, y, b)] = ρ_p[x, y] E_m[b, a]
        turns J into the grid table and its conjugate transpose turns grid
        weights back into A*(w): cost O(n · (KL)^n · 16), no d⁴ × rows matrix.
        """
        n = self.n_qubits
        rho = np.asarray(exp.single_prep_states)
        eff = np.asarray(exp.single_meas_effects)
        self._k, self._l = rho.shape[0], eff.shape[0]
        self._to_grid = np.einsum("pxy,mba->pmxayb", rho, eff).reshape(self._k * self._l, 16)
        self._from_grid = np.einsum("pyx,mab->xaybpm", rho, eff).reshape(16, self._k * self._l)
        prep_grid = np.zeros(self.n_preps, dtype=np.int64)
        meas_grid = np.zeros(self.n_meas, dtype=np.int64)
        for k in range(n):                                # qubit 1 most significant
            prep_grid = prep_grid * self._k + exp.prep_parts[:, k]
            meas_grid = meas_grid * self._l + exp.meas_parts[:, k]
        self._grid_index = (prep_grid[exp.prep_index] * self._l ** n + meas_grid[exp.meas_index])
        self._grid_size = (self._k * self._l) ** n

    def _grid_table(self, choi: np.ndarray) -> np.ndarray:
        n = self.n_qubits
        t = apply_on_every_qubit(choi_qubit_axes(choi, n), self._to_grid, n)
        # axes (p_k, m_k) per qubit -> [p_1..p_n, m_1..m_n]
        t = t.reshape((self._k, self._l) * n)
        t = t.transpose([2 * k for k in range(n)] + [2 * k + 1 for k in range(n)])
        return t.reshape(-1).real

    def _grid_adjoint(self, weights: np.ndarray) -> np.ndarray:
        n = self.n_qubits
        w = np.bincount(self._grid_index, weights=weights, minlength=self._grid_size)
        w = w.reshape((self._k,) * n + (self._l,) * n)
        w = w.transpose([ax for k in range(n) for ax in (k, n + k)]).reshape((self._k * self._l,) * n)
        return from_qubit_axes(apply_on_every_qubit(w.astype(complex), self._from_grid, n), n)

    # -- the linear map --------------------------------------------------
    def table(self, choi: np.ndarray) -> np.ndarray:
        """The P × M table Tr[(ρ_p^T ⊗ E_m) J] (real part)."""
        d = self.dim
        jp = choi.reshape(d, d, d, d).transpose(0, 2, 1, 3).reshape(d * d, d * d)
        return ((self.prep_matrix @ jp) @ self.meas_matrix.T).real

    def forward(self, choi: np.ndarray) -> np.ndarray:
        """p_k = Tr[(ρ_k^T ⊗ E_k) J] for every row k."""
        if self.structured:
            return self._grid_table(choi)[self._grid_index]
        return self.table(choi).reshape(-1)[self.pair_index]

    def adjoint(self, weights: np.ndarray) -> np.ndarray:
        """A*(w) = Σ_k w_k ρ_k^T ⊗ E_k, a Hermitian d² × d² matrix.

        It satisfies Σ_k w_k p_k(J) = Tr[A*(w) J] for every Hermitian J.
        """
        if self.structured:
            return self._grid_adjoint(weights)
        d = self.dim
        table = np.bincount(self.pair_index, weights=weights,
                            minlength=self.n_preps * self.n_meas).reshape(self.n_preps, self.n_meas)
        k = (self.prep_matrix.T @ table) @ self.meas_matrix.conj()      # [(y, x), (a, b)]
        return k.reshape(d, d, d, d).transpose(1, 2, 0, 3).reshape(d * d, d * d)

    def expected_counts(self, choi: np.ndarray, intensities: np.ndarray) -> np.ndarray:
        """ν_k = λ_g · seconds · efficiency · p_k + background (docs/file-formats.md, "Input")."""
        return intensities[self.group_index] * self.exposure * self.forward(choi) + self.background

    def centre(self) -> np.ndarray:
        """I_{d²}/d, the Choi matrix of the completely depolarising channel."""
        d = self.dim
        return np.eye(d * d, dtype=complex) / d

    # -- Pauli coordinates, used by linear inversion and identifiability --
    def pauli_coordinates(self):
        """Real Pauli vectors r_p[j] = Tr(ρ_p P_j) and e_m[i] = Tr(E_m P_i).

        In these coordinates p = (1/d) e_mᵀ R r_p, R the Pauli transfer matrix.
        Computed once per model (a linear inversion asks for them at every pass).
        """
        if self._pauli is None:
            d = self.dim
            # Tr(X P) = Σ X[a,b] P[b,a]
            flat_t = pauli_basis(self.n_qubits).transpose(0, 2, 1).reshape(d * d, d * d)
            r = (self.experiment.prep_states.reshape(self.n_preps, -1) @ flat_t.T).real
            e = (self.experiment.meas_effects.reshape(self.n_meas, -1) @ flat_t.T).real
            r.setflags(write=False)
            e.setflags(write=False)
            self._pauli = (r, e)
        return self._pauli

    def pairs_present(self, rows: np.ndarray | None = None) -> np.ndarray:
        """Multiplicity of every (prep, meas) pair in the rows (or in the rows selected by
        the boolean mask ``rows``), shape (P, M)."""
        if rows is None:
            return self._pair_multiplicity.reshape(self.n_preps, self.n_meas)
        return np.bincount(self.pair_index[rows], minlength=self.n_preps * self.n_meas).reshape(
            self.n_preps, self.n_meas)

    def identifiability(self, rows: np.ndarray | None = None) -> Identifiability:
        """Which process parameters the rows determine (d⁴ − d² for trace-preserving
        maps, d⁴ for trace non-increasing ones).

        ``rows``, a boolean mask, restricts the question to those rows (the rows that
        carry information, `gatescope.checks.informative_rows`).
        """
        r, e = self.pauli_coordinates()
        present = self.pairs_present(rows) > 0
        if rows is not None:             # only the settings that appear in those rows
            r, e = r[present.any(axis=1)], e[present.any(axis=0)]
            present = present[present.any(axis=1)][:, present.any(axis=0)]
        d = self.dim
        labels = pauli_labels(self.n_qubits)
        # a trace-preserving map has its output identity component fixed; a trace
        # non-increasing one does not
        first = 0 if self.trace_decreasing else 1
        prep_rank, missing_in = _span(r, labels)
        meas_rank, missing_out = _span(e[:, first:], labels[first:])
        n_params = d ** 4 - (0 if self.trace_decreasing else d ** 2)
        if present.all():
            rank = prep_rank * meas_rank
        elif n_params <= DENSE_RANK_MAX_PARAMETERS:
            # Rank of the design restricted to the pairs present, in PTM coordinates.
            p_idx, m_idx = np.nonzero(present)
            design = (e[m_idx, first:][:, :, None] * r[p_idx][:, None, :]).reshape(len(p_idx), -1)
            rank = int(np.linalg.matrix_rank(design))
        else:
            rank = min(prep_rank * meas_rank, int(present.sum()))
        return Identifiability(prep_rank, meas_rank, rank, n_params,
                               tuple(missing_in), tuple(missing_out))

    def warn_if_undetermined(self, rows: np.ndarray | None = None) -> Identifiability:
        """Warn (GatescopeWarning, code ``undetermined``) naming the part of the process
        the data (the rows selected by ``rows``, all by default) leave open."""
        ident = self.identifiability(rows)
        d2 = self.dim ** 2
        n_out = d2 if self.trace_decreasing else d2 - 1
        if ident.prep_rank < d2:
            warn("undetermined",
                 f"the preparations span only {ident.prep_rank} of {d2} input operator directions: "
                 f"the process is undetermined on the input Pauli components "
                 f"{_short(ident.missing_inputs)}; the fit still runs", stacklevel=2)
        if ident.meas_rank < n_out:
            warn("undetermined",
                 f"the analyser effects span only {ident.meas_rank} of {n_out} output "
                 f"directions: the output Pauli components {_short(ident.missing_outputs)} are not "
                 f"measured; the fit still runs", stacklevel=2)
        if ident.prep_rank == d2 and ident.meas_rank == n_out and not ident.complete:
            warn("undetermined",
                 f"the (prep, meas) pairs present determine only {ident.rank} of "
                 f"{ident.n_parameters} process parameters; the fit still runs", stacklevel=2)
        return ident


def _span(vectors: np.ndarray, labels) -> tuple[int, list[str]]:
    """Rank of the rows of ``vectors`` and the Pauli labels they miss."""
    _, s, vt = np.linalg.svd(vectors, full_matrices=True)
    tol = max(vectors.shape) * np.finfo(float).eps * (s[0] if s.size else 1.0) \
        * RANK_TOLERANCE_FACTOR
    rank = int(np.sum(s > tol))
    null = vt[rank:]
    missing = []
    if null.size:
        weight = np.sum(null ** 2, axis=0)
        missing = [labels[i] for i in np.argsort(-weight) if weight[i] > MISSING_WEIGHT]
        if not missing:
            missing = [labels[i] for i in np.argsort(-weight)[: null.shape[0]]]
    return rank, missing


def _short(labels, limit: int = 8) -> str:
    labels = list(labels)
    text = ", ".join(labels[:limit])
    return text + (f" and {len(labels) - limit} more" if len(labels) > limit else "")
