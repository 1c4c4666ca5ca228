"""Poisson likelihood of the rows, with the intensities profiled out.

For a Choi matrix J the log-likelihood (docs/file-formats.md, "Result file")

    ℓ(J, λ) = Σ_k [n_k log ν_k − ν_k − log n_k!],
    ν_k = λ_g · seconds_k · efficiency_k · p_k(J) + background_k,

is maximised over the group intensities λ for fixed J (closed form without
background, a 1-D Newton solve per group with it). For a trace non-increasing
model (``trace = "decreasing"``) the one global intensity is the known input
rate and is not fitted. The gradient of the
profiled ℓ with respect to J is, by the envelope theorem, A*(w) with
w_k = (n_k/ν_k − 1) · λ_g · seconds_k · efficiency_k.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import gammaln

from . import kernels
from .model import MeasurementModel


@dataclass
class Evaluation:
    """Profiled log-likelihood at one Choi matrix."""

    log_likelihood: float
    intensities: np.ndarray
    probabilities: np.ndarray
    weights: np.ndarray

    @property
    def finite(self) -> bool:
        return bool(np.isfinite(self.log_likelihood))


class PoissonLikelihood:
    """Profiled Poisson log-likelihood of a model's rows for given counts.

    Parameters
    ----------
    model : MeasurementModel
    counts : array, optional
        Counts per row; the experiment's own counts by default (a bootstrap
        passes resampled counts here).
    """

    def __init__(self, model: MeasurementModel, counts: np.ndarray | None = None):
        self.model = model
        self.counts = np.asarray(model.counts if counts is None else counts, dtype=float)
        self.constant = float(-np.sum(gammaln(self.counts + 1.0)))
        self.total_counts = float(self.counts.sum())

    def intensities(self, probabilities: np.ndarray) -> np.ndarray:
        """Maximum-likelihood λ_g for these probabilities (the known rate when fixed)."""
        m = self.model
        if m.fixed_intensities is not None:
            return m.fixed_intensities
        return kernels.group_intensities(self.counts, m.exposure * probabilities, m.background,
                                         m.group_index, m.n_groups)

    def evaluate(self, choi: np.ndarray, probabilities: np.ndarray | None = None) -> Evaluation:
        """ℓ at ``choi``. ``probabilities``, when given, must be ``model.forward(choi)``:
        the forward map is linear, so a caller that extrapolates between two evaluated
        points can combine their probabilities instead of mapping again."""
        m = self.model
        p = m.forward(choi) if probabilities is None else probabilities
        base = m.exposure * p
        lam = self.intensities(p)
        weights = np.empty_like(p)
        ll = kernels.poisson_terms(self.counts, base, m.background, lam, m.group_index,
                                   m.exposure, weights)
        return Evaluation(ll + self.constant, lam, p, weights)

    def gradient(self, evaluation: Evaluation) -> np.ndarray:
        """∂ℓ/∂J (Hermitian d² × d²) at the point of ``evaluation``."""
        return self.model.adjoint(evaluation.weights)


def deviance(counts: np.ndarray, expected: np.ndarray) -> float:
    """The Poisson deviance 2 Σ_k [n_k log(n_k/ν_k) − (n_k − ν_k)] of counts n against
    positive expected counts ν (a row with n_k = 0 contributes 2ν_k)."""
    n = np.asarray(counts, dtype=float)
    nu = np.asarray(expected, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(n > 0, n * np.log(np.where(n > 0, n, 1.0) / nu), 0.0) - (n - nu)
    return float(2.0 * np.sum(terms))


class Tilt:
    """A smooth term added to the log-likelihood: Re Tr(W J) + c·Tr(J²).

    ``linear`` is a Hermitian matrix W of the shape of J (None for no linear
    term) and ``quadratic`` the real coefficient c. The term is concave for
    c ≤ 0. Its gradient, in the convention of `PoissonLikelihood.gradient`
    (ℓ(J + Δ) ≈ ℓ(J) + Re Tr(G Δ) for Hermitian Δ), is W + 2c·J.
    """

    def __init__(self, linear: np.ndarray | None = None, quadratic: float = 0.0):
        self.linear = None if linear is None else np.asarray(linear, dtype=complex)
        self.quadratic = float(quadratic)

    def value(self, choi: np.ndarray) -> float:
        out = 0.0
        if self.linear is not None:
            out += float(np.vdot(self.linear, choi).real)
        if self.quadratic:
            out += self.quadratic * float(np.vdot(choi, choi).real)
        return out

    def gradient(self, choi: np.ndarray) -> np.ndarray:
        grad = np.zeros(choi.shape, dtype=complex) if self.linear is None else self.linear.copy()
        if self.quadratic:
            grad += 2.0 * self.quadratic * choi
        return grad


@dataclass
class TiltedEvaluation(Evaluation):
    """An `Evaluation` of ℓ + tilt: ``log_likelihood`` holds the sum, ``tilt`` the
    added term (ℓ alone is ``log_likelihood − tilt``), ``choi`` the point."""

    tilt: float = 0.0
    choi: np.ndarray | None = None


class TiltedLikelihood:
    """ℓ(J) + tilt(J): the objective of one point of a profile likelihood
    (`gatescope.profile`).

    Same interface as `PoissonLikelihood` (``evaluate``, ``gradient``,
    ``intensities``, ``counts``, ``total_counts``, ``model``); every value and
    gradient is the base one plus the `Tilt`'s.
    """

    def __init__(self, base: PoissonLikelihood, tilt: Tilt):
        self.base = base
        self.tilt = tilt
        self.model = base.model
        self.counts = base.counts
        self.constant = base.constant
        self.total_counts = base.total_counts

    def intensities(self, probabilities: np.ndarray) -> np.ndarray:
        return self.base.intensities(probabilities)

    def evaluate(self, choi: np.ndarray, probabilities: np.ndarray | None = None):
        ev = self.base.evaluate(choi, probabilities)
        extra = self.tilt.value(choi)
        return TiltedEvaluation(ev.log_likelihood + extra, ev.intensities, ev.probabilities,
                                ev.weights, extra, choi)

    def gradient(self, evaluation: TiltedEvaluation) -> np.ndarray:
        return self.base.gradient(evaluation) + self.tilt.gradient(evaluation.choi)
