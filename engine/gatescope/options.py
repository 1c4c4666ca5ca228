"""Validation of options, in one place, for every entry point.

The command line, the Python functions (`gatescope.fit`, the bootstrap,
the runners) and the capabilities built on them check their options with
these functions, so that a bad option is always an `InputError` naming the
option, whichever way it came in: as a command-line flag (``--workers``)
or as a Python argument (``workers``). The allowed choices come from the
registries that own them (estimators, interval constructions, bootstrap
kinds, gates, noise kinds); nothing here repeats them.

`flag` turns a Python argument name into its command-line spelling, so a
caller that validates on behalf of the command line reports ``--ci-level``
rather than ``ci_level``.
"""

from __future__ import annotations

import math
import numbers
import os

from .errors import InputError


def flag(name: str) -> str:
    """The command-line spelling of a Python argument name: ``ci_level`` → ``--ci-level``."""
    return "--" + name.replace("_", "-")


def suggestion(value, choices) -> str | None:
    """The choice a mistyped ``value`` most likely meant: the same up to case, or one
    edit away (a letter added, dropped, changed, or two neighbours swapped); None
    when there is no single such choice."""
    if not isinstance(value, str):
        return None
    choices = [str(c) for c in choices]
    same_case = [c for c in choices if c.lower() == value.lower()]
    if len(same_case) == 1:
        return same_case[0]
    close = [c for c in choices if _one_edit(value, c) or _one_edit(value.lower(), c.lower())]
    return close[0] if len(close) == 1 else None


def _one_edit(a: str, b: str) -> bool:
    """a and b differ by one insertion, deletion, substitution or adjacent swap."""
    if a == b or abs(len(a) - len(b)) > 1:
        return False
    if len(a) == len(b):
        diff = [k for k in range(len(a)) if a[k] != b[k]]
        return len(diff) == 1 or (len(diff) == 2 and diff[1] == diff[0] + 1
                                  and a[diff[0]] == b[diff[1]] and a[diff[1]] == b[diff[0]])
    short, long_ = (a, b) if len(a) < len(b) else (b, a)
    return any(long_[:k] + long_[k + 1:] == short for k in range(len(long_)))


def choice(value, choices, key: str, what: str = "value") -> str:
    """``value`` if it is one of ``choices`` (a registry's keys), else an InputError
    naming the choices and, for a near miss, the one that was probably meant."""
    if value not in choices:
        hint = suggestion(value, choices)
        mean = f"did you mean {hint!r}? " if hint is not None else ""
        raise InputError(f"unknown {what} {value!r}; {mean}choose one of "
                         f"{', '.join(map(str, choices))}", key=key)
    return value


def whole(value, key: str, minimum: int | None = None, maximum: int | None = None) -> int:
    """A whole number within [minimum, maximum] (booleans are not numbers here)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise InputError(f"must be a whole number, got {value!r}", key=key)
    if minimum is not None and value < minimum:
        raise InputError(f"must be at least {minimum}, got {value}", key=key)
    if maximum is not None and value > maximum:
        raise InputError(f"must be at most {maximum}, got {value}", key=key)
    return int(value)


def fraction(value, key: str) -> float:
    """A number strictly between 0 and 1 (a confidence level, for example 0.95)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) \
            or not 0 < float(value) < 1:
        raise InputError(f"must be a fraction strictly between 0 and 1 (e.g. 0.95), got {value!r}",
                         key=key)
    return float(value)


def positive(value, key: str) -> float:
    """A finite number > 0."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real) \
            or not math.isfinite(float(value)) or float(value) <= 0:
        raise InputError(f"must be a positive number, got {value!r}", key=key)
    return float(value)


#: Seeds are those of numpy.random.SeedSequence, kept below 2**63 so that every
#: file format and every other program can store them as a signed 64-bit integer.
MAX_SEED = 2**63 - 1


def seed(value, key: str = "seed") -> int | None:
    """None (draw one) or a whole number in [0, 2**63 − 1]."""
    if value is None:
        return None
    return whole(value, key, 0, MAX_SEED)


def workers(value, key: str = "workers") -> int:
    """Worker processes: a whole number ≥ 1, or None for the machine's cores."""
    if value is None:
        return os.cpu_count() or 1
    return whole(value, key, 1)


__all__ = ["flag", "choice", "suggestion", "whole", "fraction", "positive", "seed", "workers", "MAX_SEED"]
