"""The measurement models: the linear map from the estimate to the probability of every row.

* `process` — `MeasurementModel`, a Choi matrix J ↦ Tr[(ρ_k^T ⊗ E_k) J];
* `state` — `StateModel`, a density matrix ρ ↦ Tr(E_k ρ).

Both offer the same interface (``kind``, ``forward``, ``adjoint``,
``expected_counts``, ``centre``, ``exposure``, ``background``,
``group_index``, ``n_groups``, ``fixed_intensities``, ``trace_decreasing``,
``identifiability``, ``warn_if_undetermined``), so the likelihood, the
projection, the estimators, the bootstrap and the goodness of fit serve
both. `build_model` picks the model of an experiment by its ``kind``.
"""

from __future__ import annotations

from ..reader import Experiment
from .process import (DENSE_RANK_MAX_PARAMETERS, MISSING_WEIGHT, RANK_TOLERANCE_FACTOR,
                      STRUCTURED_FROM_QUBITS, Identifiability, MeasurementModel)
from .state import StateModel


def build_model(experiment: Experiment):
    """The measurement model of ``experiment``: a `StateModel` for ``kind = "state"``,
    else a `MeasurementModel`."""
    if experiment.kind == "state":
        return StateModel.from_experiment(experiment)
    return MeasurementModel(experiment)


__all__ = ["MeasurementModel", "StateModel", "Identifiability", "build_model",
           "STRUCTURED_FROM_QUBITS", "RANK_TOLERANCE_FACTOR", "MISSING_WEIGHT",
           "DENSE_RANK_MAX_PARAMETERS"]
