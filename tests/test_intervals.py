"""Confidence intervals (gatescope.intervals): each construction against its definition,
coverage of the truth, the range of the true figure.
"""

from __future__ import annotations

import gatescope as gs
import numpy as np
import pytest
import scipy.stats
from gatescope import intervals as iv
from gatescope.merit import process_fidelity

FULL_RANK = "CZ+depolarizing:0.2"


def test_interval_constructions_follow_their_definitions():
    rng = np.random.default_rng(0)
    v = rng.normal(0.5, 0.01, size=401)
    lo, hi = np.quantile(v, [0.025, 0.975])
    assert iv.interval(v, 0.51, 0.95, "percentile") == pytest.approx((lo, hi), abs=0)
    assert iv.interval(v, 0.51, 0.95, "basic") == pytest.approx((1.02 - hi, 1.02 - lo), abs=1e-15)
    # with the point at the median z0 = 0 and BC is the percentile interval
    assert iv.interval(v, float(np.median(v)), 0.95, "bc") == pytest.approx((lo, hi), abs=1e-15)
    z = scipy.stats.norm.ppf(0.975)        # reference quantile: scipy.stats.norm
    sd = v.std(ddof=1)
    assert iv.interval(v, 0.51, 0.95, "normal") == pytest.approx((0.51 - z * sd, 0.51 + z * sd))
    # NaN (refits that raised) are left out
    assert iv.interval(np.append(v, np.nan), 0.51, 0.95, "percentile") == pytest.approx((lo, hi))


def test_bias_corrected_interval_recentres_a_shifted_distribution():
    # If θ* ~ N(θ̂ − b, s²), BC moves the quantiles by 2·z0 with z0 = b/s and gives
    # θ̂ + b ± z·s, as the basic interval does (Efron & Tibshirani 1993, §14.3).
    rng = np.random.default_rng(1)
    point, b, s = 0.98, 0.0015, 0.003
    v = rng.normal(point - b, s, size=200_000)
    z = scipy.stats.norm.ppf(0.975)        # reference quantile: scipy.stats.norm
    want = (point + b - z * s, point + b + z * s)
    assert iv.interval(v, point, 0.95, "bc") == pytest.approx(want, abs=0.06 * s)
    assert iv.interval(v, point, 0.95, "basic") == pytest.approx(want, abs=0.02 * s)
    pct = iv.interval(v, point, 0.95, "percentile")
    assert pct == pytest.approx((point - b - z * s, point - b + z * s), abs=0.02 * s)


def test_interval_contains_truth_and_shrinks_as_one_over_root_n(make_experiment):
    widths = {m: [] for m in iv.INTERVALS}
    for shots in (1000.0, 10000.0):
        exp, true_choi = make_experiment(FULL_RANK, shots=shots, seed=21)
        res = gs.fit(exp, "pls", bootstrap=100, seed=8, workers=1)
        boot = res.bootstrap
        k = boot.names.index("process_fidelity")
        truth = process_fidelity(true_choi, exp.target)
        for m in iv.INTERVALS:
            lo, hi = iv.interval(boot.figures[:, k], res.figures["process_fidelity"].value,
                                 0.95, m)
            assert lo <= truth <= hi, (m, shots)
            widths[m].append(hi - lo)
    # Poisson scaling (common practice): ten times the counts, 1/√10 ≈ 0.316 the width
    # (bc is left out: its width also follows z0, which is noisy at B = 100)
    for m in ("normal", "percentile", "basic"):
        wide, narrow = widths[m]
        assert 0.22 < narrow / wide < 0.42, m


def test_default_interval_is_attached_to_every_figure(make_experiment):
    exp, _ = make_experiment(FULL_RANK, shots=1000, seed=22)
    res = gs.fit(exp, "pls", bootstrap=40, seed=2, ci_level=0.9, workers=1)
    assert res.bootstrap.interval == iv.DEFAULT_INTERVAL
    assert set(res.bootstrap.names) <= set(res.figures)
    assert "process_fidelity" in res.bootstrap.names
    for k, name in enumerate(res.bootstrap.names):
        fig = res.figures[name]
        assert fig.level == 0.9
        assert fig.ci == iv.interval(res.bootstrap.figures[:, k], fig.value, 0.9,
                                     iv.DEFAULT_INTERVAL, iv.parameter_range(name, 4))
        assert fig.ci[0] <= fig.ci[1]


def test_intervals_stay_in_the_range_of_the_true_figure():
    # a basic interval reflected about an estimate near 1 would reach past 1
    v = np.array([0.9990, 0.9992, 0.9994, 0.9996, 0.9998])
    lo, hi = iv.interval(v, 0.9996, 0.95, "basic")
    assert hi > 1.0
    clipped = iv.interval(v, 0.9996, 0.95, "basic", iv.parameter_range("process_fidelity", 4))
    assert clipped == (lo, 1.0)
    assert iv.parameter_range("purity", 4) == (1 / 16, 1.0)
    assert iv.parameter_range("min_eigenvalue", 4) == (0.0, 0.25)
    assert iv.parameter_range("no_such_figure", 4) is None


def test_ranges_of_the_state_figures():
    # a state on d dimensions: purity in [1/d, 1], entropy in [0, log₂ d] bits (common
    # practice); a qubit against the rest has negativity at most (2 − 1)/2 (Vidal & Werner,
    # PRA 65, 032314 (2002)); Tsirelson's bound 2√2 (Cirel'son, Lett. Math. Phys. 4, 93 (1980))
    assert iv.parameter_range("purity", 4, "state") == (0.25, 1.0)
    assert iv.parameter_range("purity", 4) == (1 / 16, 1.0)            # a process
    assert iv.parameter_range("von_neumann_entropy", 8, "state") == (0.0, 3.0)
    assert iv.parameter_range("negativity_3", 16, "state") == (0.0, 0.5)
    assert iv.parameter_range("chsh_max", 4, "state") == (0.0, 2 * np.sqrt(2))
    for name in ("state_fidelity", "concurrence", "tangle", "entanglement_of_formation",
                 "linear_entropy", "log_negativity"):
        assert iv.parameter_range(name, 4, "state") == (0.0, 1.0), name
    assert iv.parameter_range("unitarity", 4, "state") is None
