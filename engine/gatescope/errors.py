"""Errors and warnings that gatescope raises on purpose.

`InputError` is the single exception for anything wrong with what a user
gave us (files, keys, labels, options). It always names where the problem
is (a file, and a line or a key inside it, or a command-line option) and
what is wrong, so the command line can print it as is and exit with
status 2.

`NumericalError` is what an estimator raises when the numbers themselves
fail (a singular system, a non-finite likelihood it cannot recover from).
Callers that tolerate numerical failures (the bootstrap) catch exactly this
and `numpy.linalg.LinAlgError`, never a bare `ValueError`, which a shape
bug would also raise.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: a file, a line or key in it (or an option), and what is wrong.

    Parameters
    ----------
    message : str
        What is wrong, in words a user can act on.
    file : str, optional
        The file where the problem is.
    line : int, optional
        Physical line number in `file` (a CSV header is line 1).
    key : str, optional
        Dotted TOML key (``states.Dtilt.bloch``), a Python argument name
        (``bootstrap_kind``), or a command-line option (``--meas``), which
        is printed as such.
    """

    def __init__(self, message: str, *, file: str | None = None,
                 line: int | None = None, key: str | None = None):
        self.message = message
        self.file = None if file is None else str(file)
        self.line = line
        self.key = key
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = []
        if self.file is not None:
            where.append(self.file)
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.key is not None:
            where.append(f"option {self.key}" if self.key.startswith("-") else f"key '{self.key}'")
        prefix = ", ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message


class NumericalError(ArithmeticError):
    """An estimator could not produce an estimate for numerical reasons."""


class GatescopeWarning(UserWarning):
    """Something the user should know about a fit that still runs
    (for example: the data leave part of the process undetermined)."""
