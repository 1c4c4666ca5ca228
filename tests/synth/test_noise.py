"""Known channels for simulation (gatescope.synth.noise): SPEC strings, noise kinds,
random channels. Their values against QuTiP are in tests/reference/."""

from __future__ import annotations

import numpy as np
import pytest

from gatescope.channels import choi_from_unitary, partial_trace_output
from gatescope.conventions import GATES
from gatescope.synth import noise


def _parts(spec):
    parsed = noise.parse_channel_spec(spec)
    return parsed.gate, parsed.noise, parsed.random


def test_spec_strings_parse():
    assert _parts("CZ") == ("CZ", [], None)
    assert _parts("CZ+depolarizing:0.02+zz:0.1") == \
        ("CZ", [("depolarizing", 0.02), ("zz", 0.1)], None)
    assert _parts("random:4:9") == (None, [], (4, 9))
    assert _parts("random:4") == (None, [], (4, None))
    assert _parts("random:4:9+dephasing:0.1") == (None, [("dephasing", 0.1)], (4, 9))
    assert noise.parse_channel_spec("CZ+zz:0.1").lab == noise.LabNoise()


@pytest.mark.parametrize("spec, words", [
    ("CQ", "unknown gate 'CQ'"), ("CZ+depolarising:0.1", "unknown kind"),
    ("CZ+depolarizing", "expected KIND:P"), ("CZ+zz:abc", "is not a number"),
    ("CZ+zz:inf", "finite"), ("random:x", "whole numbers"), ("random:1:2:3", r"RANK\[:SEED\]"),
])
def test_bad_specs_say_what_is_wrong(spec, words):
    with pytest.raises(ValueError, match=words):
        noise.parse_channel_spec(spec)


def test_probabilities_outside_zero_one_are_refused():
    with pytest.raises(ValueError, match=r"\[0, 1\]"):
        noise.noise_channel("depolarizing", 1.5, 1)


@pytest.mark.parametrize("rank", [1, 2, 5, 16])
def test_random_channels_are_cptp_of_the_given_rank(rank):
    J = noise.random_channel(2, rank, seed=rank)
    w = np.linalg.eigvalsh(J)
    assert w[0] > -1e-12 and np.sum(w > 1e-10) == rank
    assert np.allclose(partial_trace_output(J), np.eye(4), atol=1e-12)
    assert np.array_equal(J, noise.random_channel(2, rank, seed=rank))


def test_noise_acts_after_the_gate_in_order():
    # a full dephasing after X leaves |1><1| from |0><0|, and zz after CZ is a phase
    J = noise.build_channel("X", [("dephasing", 0.5)], 1)
    assert np.allclose(J[:2, :2], np.diag([0, 1]), atol=1e-12)
    with pytest.raises(ValueError, match="acts on 2"):
        noise.build_channel("CZ", [], 1)
    assert np.allclose(noise.build_channel("CZ", [("zz", 0.0)], 2),
                       choi_from_unitary(GATES["CZ"]), atol=1e-12)
