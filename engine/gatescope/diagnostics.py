"""Goodness of fit: how well the estimate's model describes the counts.

Per row the expected counts ν_k (README, "Input"), the Pearson residuals
(n − ν)/√ν and the deviance residuals sign(n − ν)·√(2[n log(n/ν) − (n − ν)]);
over all rows the Pearson χ² and the deviance with their degrees of freedom
and p-values, and the rows that do not fit.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.special import chdtrc

from .errors import warn
from .estimators import Fit
from .model import MeasurementModel

#: Both goodness-of-fit p-values below this: the model does not describe the data.
POOR_FIT_P = 1e-3
#: Resamples a parametric bootstrap needs before its goodness-of-fit p-value decides
#: whether the model fits (with B resamples the smallest p-value is 1/(B + 1)).
MIN_BOOTSTRAP_TEST = 199
#: |Pearson residual| above which a row is listed as an outlier (a model that fits
#: gives one such row in about sixteen thousand).
OUTLIER_RESIDUAL = 4.0


@dataclass
class Diagnostics:
    """Goodness of fit of the estimate to the rows.

    Pearson residuals are (n − ν)/√ν; deviance residuals
    sign(n − ν)·√(2[n log(n/ν) − (n − ν)]). ``dof`` is the number of rows
    minus the process parameters the data determine minus the number of
    fitted intensities. ``chi2_p_value`` and ``deviance_p_value`` are
    P(χ²_dof ≥ statistic) (NaN when dof ≤ 0); ``outlier_rows`` the indices
    (into the CSV's data rows, first row 0) of rows with |Pearson residual|
    > 4 or with counts where the model expects none.

    ``bootstrap_p_value`` is the parametric-bootstrap p-value of the deviance
    (`gatescope.bootstrap.fit_p_value`: every resample drawn from the fit and
    refitted), from ``bootstrap_resamples`` resamples; NaN and 0 without a
    parametric bootstrap of a maximum-likelihood fit.
    """

    expected_counts: np.ndarray
    pearson_residuals: np.ndarray
    deviance_residuals: np.ndarray
    chi2: float
    deviance: float
    dof: int
    chi2_p_value: float = float("nan")
    deviance_p_value: float = float("nan")
    outlier_rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    #: the CSV line (header = line 1) of every outlier row; None where unknown
    outlier_lines: np.ndarray | None = None
    bootstrap_p_value: float = float("nan")
    bootstrap_resamples: int = 0

    @property
    def p_value(self) -> float:
        """The larger of the two p-values (NaN when neither is defined)."""
        p = [x for x in (self.chi2_p_value, self.deviance_p_value) if not np.isnan(x)]
        return max(p) if p else float("nan")

    @property
    def bootstrap_decides(self) -> bool:
        """Whether the bootstrap p-value (rather than the χ² reference) decides `poor_fit`."""
        return self.bootstrap_resamples >= MIN_BOOTSTRAP_TEST and not np.isnan(
            self.bootstrap_p_value)

    @property
    def poor_fit(self) -> bool:
        """The model does not describe the data.

        With a parametric bootstrap of at least `MIN_BOOTSTRAP_TEST` resamples:
        the observed deviance is larger than every resample's (bootstrap p-value
        at its smallest, 1/(B + 1), or below `POOR_FIT_P` for B ≥ 1000).
        Otherwise both the Pearson and the deviance χ² tests reject at
        `POOR_FIT_P`. The χ² reference counts every process parameter; for a
        gate close to a unitary the estimate sits on the boundary of the
        physical set, fewer parameters are free, both statistics exceed the
        reference and these p-values are too small (README, "Goodness of
        fit"), which the bootstrap test does not suffer from.
        """
        if self.bootstrap_decides:
            floor = 1.0 / (self.bootstrap_resamples + 1)
            return bool(self.bootstrap_p_value <= max(POOR_FIT_P, floor))
        return bool(self.p_value < POOR_FIT_P)


def p_value(statistic: float, dof: int) -> float:
    """P(χ²_dof ≥ statistic), NaN without degrees of freedom.

    `scipy.special.chdtrc`, the function behind ``scipy.stats.chi2.sf``
    (importing scipy.stats would add a second to every start of the program).
    """
    if dof <= 0 or np.isnan(statistic):
        return float("nan")
    return float(chdtrc(dof, statistic))


def outlier_rows(pearson: np.ndarray, counts: np.ndarray, expected: np.ndarray,
                 limit: float = OUTLIER_RESIDUAL) -> np.ndarray:
    """Rows with |Pearson residual| > limit, or with counts where the model expects none."""
    bad = np.abs(np.nan_to_num(pearson, nan=0.0)) > limit
    bad |= (expected <= 0) & (counts > 0)
    return np.flatnonzero(bad).astype(np.int64)


def diagnostics(model: MeasurementModel, fit: Fit, n_determined: int) -> Diagnostics:
    """Expected counts, Pearson and deviance residuals, χ² and its degrees of freedom.

    Also the p-values of the Pearson χ² and of the deviance against the χ²
    distribution with ``dof`` degrees of freedom (a large-count
    approximation: rows with a handful of counts make it rough) and the
    rows whose |Pearson residual| exceeds `OUTLIER_RESIDUAL` (with a model
    that fits, about one row in ten thousand does).
    """
    nu = model.expected_counts(fit.choi, fit.intensities)
    n = model.counts
    ok = nu > 0
    safe = np.where(ok, nu, 1.0)
    pearson = np.where(ok, (n - nu) / np.sqrt(safe), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(n > 0, n * np.log(np.where(n > 0, n, 1.0) / safe), 0.0) - (n - nu)
    dev = np.where(ok, np.sign(n - nu) * np.sqrt(np.maximum(2.0 * term, 0.0)), np.nan)
    fitted_intensities = 0 if model.fixed_intensities is not None else model.n_groups
    dof = int(model.n_rows - n_determined - fitted_intensities)
    chi2, deviance = float(np.sum(pearson**2)), float(np.sum(dev**2))
    rows = outlier_rows(pearson, n, nu)
    lines = model.experiment.lines
    return Diagnostics(nu, pearson, dev, chi2, deviance, dof, p_value(chi2, dof),
                       p_value(deviance, dof), rows,
                       None if lines is None else np.asarray(lines, dtype=np.int64)[rows])


def warn_if_poor_fit(diag: Diagnostics) -> None:
    """A `GatescopeWarning` when both goodness-of-fit p-values are below `POOR_FIT_P`.

    `fit` calls it for maximum-likelihood estimates only.
    """
    if diag.poor_fit:
        lines = diag.outlier_lines if diag.outlier_lines is not None else diag.outlier_rows + 2
        shown = ", ".join(str(int(k)) for k in np.sort(lines)[:5])
        more = f" and {len(lines) - 5} more" if len(lines) > 5 else ""
        where = f" (CSV line{'s' if len(lines) > 1 else ''} {shown}{more})" if len(lines) else ""
        test = (f"bootstrap p = {diag.bootstrap_p_value:.2g} from {diag.bootstrap_resamples} "
                "resamples"
                if diag.bootstrap_decides else f"p < {POOR_FIT_P:g}")
        warn("poor-fit",
             f"the model does not describe the data (Pearson chi2 {diag.chi2:.1f}, deviance "
             f"{diag.deviance:.1f} on {diag.dof} degrees of freedom, {test}; "
             f"{len(diag.outlier_rows)} row(s) with |residual| > {OUTLIER_RESIDUAL:g}{where}): "
             "check for miscalibrated optics, drift of the source, or a wrong background"
             + ("" if diag.bootstrap_decides else
                f" (the chi2 reference is too strict for an estimate on the boundary of the "
                f"physical set, as for a gate close to a unitary: --bootstrap "
                f"{MIN_BOOTSTRAP_TEST + 1} or more gives a calibrated test)"),
             stacklevel=2)
