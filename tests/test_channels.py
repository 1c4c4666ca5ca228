"""Channel representations and conversions (gatescope.channels; the README's Conventions).

Outside references for the same conversions (QuTiP, textbook values) are in
tests/reference/; here: the conversions invert each other, and the index
conventions hold on small cases worked by hand.
"""

from __future__ import annotations

import numpy as np
import pytest

from gatescope import channels as ch
from gatescope.synth.noise import random_channel


@pytest.mark.parametrize("n, rank", [(1, 1), (1, 3), (2, 2), (2, 16), (3, 2)])
def test_conversions_invert_each_other(n, rank):
    J = random_channel(n, rank, seed=7 + rank)
    assert np.allclose(ch.chi_to_choi(ch.choi_to_chi(J)), J, atol=1e-12)
    assert np.allclose(ch.ptm_to_choi(ch.choi_to_ptm(J)), J, atol=1e-12)
    assert np.allclose(ch.superop_to_choi(ch.choi_to_superop(J)), J, atol=1e-12)
    assert np.allclose(ch.choi_from_kraus(ch.kraus_from_choi(J)), J, atol=1e-12)
    assert np.allclose(ch.partial_trace_output(J), np.eye(2**n), atol=1e-12)


def test_choi_index_convention_by_hand():
    # J[i*d + a, j*d + b] = <a|Φ(|i><j|)|b>; for the bit flip X: Φ(|0><1|) = |1><0|
    J = ch.choi_from_unitary(np.array([[0, 1], [1, 0]]))
    assert J[0 * 2 + 1, 1 * 2 + 0] == pytest.approx(1.0)
    assert np.trace(J) == pytest.approx(2.0)


def test_apply_channel_and_compose_agree_with_kraus():
    rng = np.random.default_rng(3)
    a, b = random_channel(1, 2, seed=1), random_channel(1, 3, seed=2)
    x = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    rho = x @ x.conj().T
    rho /= np.trace(rho)
    by_kraus = sum(k @ rho @ k.conj().T for k in ch.kraus_from_choi(a))
    assert np.allclose(ch.apply_channel(a, rho), by_kraus, atol=1e-12)
    assert np.allclose(ch.apply_channel(ch.compose(a, b), rho),
                       ch.apply_channel(b, ch.apply_channel(a, rho)), atol=1e-12)


def test_kraus_of_an_unphysical_matrix_is_refused():
    J = ch.choi_from_unitary(np.eye(2)) - 0.2 * np.eye(4)
    with pytest.raises(ValueError, match="not positive"):
        ch.kraus_from_choi(J)
    with pytest.raises(ValueError, match="d²×d²"):
        ch.dim_of_choi(np.eye(3))
