"""Linear inversion and projected least squares (gatescope.estimators.linear).
"""

from __future__ import annotations

import numpy as np
import pytest
from gatescope.channels import partial_trace_output
from gatescope.estimators import estimate
from gatescope.model import MeasurementModel


def test_lin_is_trace_preserving_and_reports_its_negativity(make_experiment):
    # few counts on a pure gate: linear inversion goes unphysical (common practice)
    exp, _ = make_experiment("CNOT", shots=50, seed=2)
    fit = estimate(MeasurementModel(exp), "lin")
    np.testing.assert_allclose(partial_trace_output(fit.choi), np.eye(4), atol=1e-12)
    assert fit.info["min_eigenvalue"] < 0
    assert fit.info["min_eigenvalue"] == pytest.approx(np.linalg.eigvalsh(fit.choi)[0], abs=1e-12)
