"""The measurement models: the linear map from the estimate to the probability of every row.

* `process` — `MeasurementModel`, a Choi matrix J ↦ Tr[(ρ_k^T ⊗ E_k) J].
"""

from __future__ import annotations

from .process import (DENSE_RANK_MAX_PARAMETERS, MISSING_WEIGHT, RANK_TOLERANCE_FACTOR,
                      STRUCTURED_FROM_QUBITS, Identifiability, MeasurementModel)

__all__ = ["MeasurementModel", "Identifiability", "STRUCTURED_FROM_QUBITS",
           "RANK_TOLERANCE_FACTOR", "MISSING_WEIGHT", "DENSE_RANK_MAX_PARAMETERS"]
