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


def test_warnings_carry_a_code_and_are_collected_and_passed_on():
    import warnings

    from gatescope.errors import GatescopeWarning, WARNING_CODES, collect_warnings, warn

    assert "undetermined" in WARNING_CODES
    with warnings.catch_warnings(record=True) as outside:
        warnings.simplefilter("always")
        with collect_warnings() as texts:
            warn("undetermined", "half of the process is not probed")
            warn("undetermined", "half of the process is not probed")       # kept once
            warnings.warn("something else", RuntimeWarning)
    assert texts == ["[undetermined] half of the process is not probed"]
    assert [w.category for w in outside] == [GatescopeWarning, GatescopeWarning, RuntimeWarning]
    assert outside[0].message.code == "undetermined"
    with pytest.raises(ValueError):
        warn("no-such-code", "x")


def test_collected_warnings_respect_the_filters_outside():
    import warnings

    from gatescope.errors import GatescopeWarning, collect_warnings, warn

    with warnings.catch_warnings():
        warnings.simplefilter("error", GatescopeWarning)
        with pytest.raises(GatescopeWarning):
            with collect_warnings():
                warn("poor-fit", "x")
    with warnings.catch_warnings(record=True) as outside:
        warnings.simplefilter("ignore")
        with collect_warnings() as texts:
            warn("poor-fit", "x")
    assert texts == ["[poor-fit] x"] and outside == []


def test_printable_escapes_control_characters_only():
    from gatescope.errors import printable

    assert printable("Bench é, 0.5 µs") == "Bench é, 0.5 µs"
    assert printable("a\x1b[2Jb\x07\u2028") == "a\\x1b[2Jb\\x07\\u2028"
