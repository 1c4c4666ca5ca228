"""Option validation in one place (gatescope.options)."""

from __future__ import annotations

import os

import pytest

from gatescope import options
from gatescope.errors import InputError


def test_flag_spelling():
    assert options.flag("ci_level") == "--ci-level"
    assert options.flag("bootstrap") == "--bootstrap"


def test_choice_accepts_members_and_names_the_choices():
    assert options.choice("mle", ("lin", "pls", "mle"), "method") == "mle"
    with pytest.raises(InputError, match="key 'method': unknown method 'svd'; choose one of "
                                         "lin, pls, mle"):
        options.choice("svd", ("lin", "pls", "mle"), "method", "method")
    with pytest.raises(InputError, match="option --method"):
        options.choice("svd", ("lin", "pls", "mle"), "--method")


@pytest.mark.parametrize("typed, meant", [("cnot", "CNOT"), ("CNT", "CNOT"), ("CZZ", "CZ"),
                                          ("iswap", "iSWAP"), ("SAWP", "SWAP"), ("h", "H")])
def test_a_near_miss_gets_a_suggestion(typed, meant):
    gates = ("I", "X", "Y", "Z", "H", "S", "T", "CNOT", "CZ", "SWAP", "iSWAP", "sqrtSWAP")
    assert options.suggestion(typed, gates) == meant
    with pytest.raises(InputError, match=f"did you mean '{meant}'"):
        options.choice(typed, gates, "--gate", "gate")


def test_no_suggestion_when_nothing_is_close_or_several_are():
    assert options.suggestion("TOFFOLI", ("CNOT", "CZ")) is None
    assert options.suggestion("C", ("CZ", "CX")) is None          # two one-edit matches
    assert options.suggestion(3, ("CZ",)) is None


@pytest.mark.parametrize("value, ok", [(3, True), (0, False), (2.5, False), (True, False),
                                       ("2", False)])
def test_whole_numbers(value, ok):
    if ok:
        assert options.whole(value, "workers", 1) == value
    else:
        with pytest.raises(InputError, match="key 'workers'"):
            options.whole(value, "workers", 1)


@pytest.mark.parametrize("value", [0, 1, 1.5, -0.1, float("nan"), True, "0.95"])
def test_fractions_must_lie_strictly_between_zero_and_one(value):
    with pytest.raises(InputError, match="strictly between 0 and 1"):
        options.fraction(value, "ci_level")
    assert options.fraction(0.95, "ci_level") == 0.95


def test_seeds_fit_a_signed_64_bit_integer():
    assert options.seed(None) is None
    assert options.seed(2**63 - 1) == 2**63 - 1
    for bad in (2**63, 2**64, -1, 1.0):
        with pytest.raises(InputError, match="key 'seed'"):
            options.seed(bad)


def test_workers_default_to_the_cores():
    assert options.workers(None) == (os.cpu_count() or 1)
    assert options.workers(2) == 2
    with pytest.raises(InputError):
        options.workers(0)


@pytest.mark.parametrize("value", [0, -1, float("inf"), float("nan"), "1"])
def test_positive_numbers(value):
    with pytest.raises(InputError, match="positive"):
        options.positive(value, "--shots")
