"""Errors the package raises on purpose (gatescope.errors)."""

from __future__ import annotations

import pytest

from gatescope.errors import InputError, NumericalError


def test_input_error_names_file_line_key_and_option():
    assert str(InputError("expected a number", file="e.toml", line=3, key="qubits")) == \
        "e.toml, line 3, key 'qubits': expected a number"
    assert str(InputError("must be at least 1", key="--workers")) == \
        "option --workers: must be at least 1"
    assert str(InputError("bad")) == "bad"
    err = InputError("x", file="c.csv", line=7)
    assert (err.file, err.line, err.key, err.message) == ("c.csv", 7, None, "x")


def test_numerical_error_is_not_a_value_error():
    # callers that tolerate numerical failures catch it without also catching the
    # ValueError of a shape bug
    assert issubclass(NumericalError, ArithmeticError)
    assert not issubclass(NumericalError, ValueError)
    with pytest.raises(NumericalError):
        raise NumericalError("singular")
