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

import contextlib
import warnings


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


def printable(text) -> str:
    """``text`` with every non-printable character escaped (``\\x1b``, ``\\u2028``, ...), so
    that text from a file (a title, a label) cannot drive the terminal."""
    text = str(text)
    if text.isprintable():
        return text
    out = []
    for c in text:
        if c.isprintable():
            out.append(c)
        else:
            code = ord(c)
            out.append(f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}" if code < 0x10000
                       else f"\\U{code:08x}")
    return "".join(out)


class NumericalError(ArithmeticError):
    """An estimator could not produce an estimate for numerical reasons."""


class GatescopeWarning(UserWarning):
    """Something the user should know about a fit that still runs
    (for example: the data leave part of the process undetermined).

    Its text starts with a short code in brackets that names its kind,
    ``"[undetermined] the preparations span only ..."`` (`WARNING_CODES`);
    a fit keeps every one in its result (``Result.warnings``, ``/warnings``).
    """

    @property
    def code(self) -> str | None:
        """The code in brackets at the start of the text, or None."""
        return warning_code(str(self))


#: The codes a warning starts with, and what each one means (docs/file-formats.md, "Warnings").
WARNING_CODES = {
    "undetermined": "the data leave part of the process undetermined",
    "no-counts": "some normalisation groups carry no counts above their background",
    "no-signal": "the fitted signal is negligible next to the background",
    "no-dof": "no degrees of freedom are left to test the fit",
    "poor-fit": "the model does not describe the data",
    "not-converged": "the estimator stopped before it converged",
    "unphysical": "the estimate is not a physical process",
    "refits": "bootstrap refits did not converge or failed",
    "bias": "the bootstrap shows a bias larger than the spread",
    "diamond": "the diamond distance was skipped or is inaccurate",
    "chsh": "the largest CHSH value sits where it is not smooth: biased, its interval short",
    "profile": "a profile-likelihood interval or bound could not be computed, or not exactly",
}


def warning_code(text: str) -> str | None:
    """The code of a warning text ``"[code] ..."``, or None."""
    if text.startswith("[") and "]" in text:
        return text[1:text.index("]")]
    return None


def warn(code: str, message: str, stacklevel: int = 2) -> None:
    """Raise a `GatescopeWarning` whose text is ``"[code] message"``."""
    if code not in WARNING_CODES:
        raise ValueError(f"unknown warning code {code!r}")
    warnings.warn(GatescopeWarning(f"[{code}] {message}"), stacklevel=stacklevel + 1)


@contextlib.contextmanager
def collect_warnings():
    """Collect the text of every `GatescopeWarning` raised inside the block.

    Yields a list that holds, once the block is left, each distinct text in
    the order raised. Every warning the block raised (of any category) is
    raised again as it leaves, under the filters in force outside it, so a
    caller sees the same warnings as without this block.
    """
    texts: list[str] = []
    caught: list = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            yield texts
    finally:
        for w in caught:
            text = str(w.message)
            if issubclass(w.category, GatescopeWarning) and text not in texts:
                texts.append(text)
        for w in caught:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno, source=w.source)
