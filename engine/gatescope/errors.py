"""Errors and warnings that gatescope raises on purpose.

`InputError` is the single exception for anything wrong with what a user
gave us (files, keys, labels, options). It always names where the problem
is (a file, and a line or a key inside it) and what is wrong, so the command
line can print it as is and exit with status 2.
"""

from __future__ import annotations


class InputError(ValueError):
    """Bad input: a file, a line or key in it, and what is wrong.

    Parameters
    ----------
    message : str
        What is wrong, in words a user can act on.
    file : str, optional
        The file (or the command-line option) where the problem is.
    line : int, optional
        Physical line number in `file` (a CSV header is line 1).
    key : str, optional
        Dotted TOML key, for example ``states.Dtilt.bloch``.
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
            where.append(f"key '{self.key}'")
        prefix = ", ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message


class GatescopeWarning(UserWarning):
    """Something the user should know about a fit that still runs
    (for example: the data leave part of the process undetermined)."""
