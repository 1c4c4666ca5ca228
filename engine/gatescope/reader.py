"""Read an experiment (``experiment.toml`` + ``counts.csv``) into an `Experiment`.

This is the only module that parses user text. Everything is checked here,
once; every problem is an `InputError` naming the file, the line (CSV) or the
key (TOML) and what is wrong. Past this point the numerical code trusts its
arrays. The layout of both files is in docs/file-formats.md ("Input").
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import os
import re
import stat
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .conventions import (
    BUILTIN_LABELS, GATE_NAMES, RIGHT_CIRCULAR_CHOICES, bloch_density, builtin_states,
    check_unitary, density, kron_all, named_gate, named_state, split_label, wave_plate,
)
from .errors import InputError
from .options import suggestion
from .resources import check_reading

NORMALIZATIONS = ("per-preparation", "global", "per-group")
TRACE_KINDS = ("preserving", "decreasing")
TOP_KEYS = ("title", "qubits", "target", "counts", "normalization", "trace",
            "input_rate", "conventions", "states", "conditions", "kind", "target_state")
REQUIRED_COLUMNS = ("prep", "meas", "counts")
OPTIONAL_COLUMNS = ("seconds", "background", "efficiency", "group")
MAX_QUBITS = 6
#: Largest magnitude of a number in the data (seconds, efficiency, background,
#: input_rate), and the smallest of a positive one: no laboratory quantity in these
#: units comes near, so such a value is a typo or a unit mistake, and beyond it the
#: products of the row model (rate × seconds × efficiency) leave double precision.
MAX_MAGNITUDE = 1e15
#: What an experiment characterises: a process (prepared inputs, analysed outputs) or a
#: state (analysed only; its counts file has no prep column).
KINDS = ("process", "state")
STATE_REQUIRED_COLUMNS = ("meas", "counts")
#: Keys of a process experiment that a state experiment may not have, and why.
PROCESS_ONLY_KEYS = {
    "target": "a state experiment names its target with target_state",
    "trace": "a state has trace 1: trace is a key of process experiments",
    "input_rate": "input_rate belongs to lossy processes (trace = \"decreasing\")",
}
#: A user's target density matrix may deviate from Hermiticity, unit trace and
#: positivity by this much (it is typed or saved to a few digits).
TARGET_STATE_TOLERANCE = 1e-6
#: Longest text of a condition's value (and name): a label for a table column, not a notebook.
MAX_CONDITION_TEXT = 200


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.ascontiguousarray(a)
    a.setflags(write=False)
    return a


@dataclass(frozen=True, eq=False)
class Experiment:
    """A validated experiment. Arrays are read-only.

    Rows are the CSV's data rows in file order. Row k was taken with the
    preparation ``prep_states[prep_index[k]]`` and the analyser effect
    ``meas_effects[meas_index[k]]``; its model is (docs/file-formats.md, "Input"):
    ``E[counts_k] = λ_g · seconds_k · efficiency_k · Tr[(ρ^T ⊗ E) J] +
    background_k`` with g = ``group_index[k]``.

    A state experiment (``kind == "state"``) has no preparations: its row
    model is ``λ_g · seconds_k · efficiency_k · Tr(E ρ) + background_k``;
    ``prep``, ``prep_labels`` are empty and ``prep_states``, ``prep_parts``,
    ``single_prep_states``, ``prep_index`` None, and so is ``meas_effects``
    (a six-qubit experiment has 46,656 settings of 64 × 64: the effect of
    setting m is the product of ``single_meas_effects[meas_parts[m, k]]``).
    Its target is ``target_state`` (a normalised ket, or a density matrix) named
    ``target_state_name``; ``target`` is None.
    """

    path: Path
    counts_path: Path
    title: str
    n_qubits: int
    target_name: str | None
    target: np.ndarray | None
    normalization: str
    trace: str
    input_rate: float | None
    right_circular: str
    prep_labels: tuple[str, ...]
    meas_labels: tuple[str, ...]
    prep_states: np.ndarray
    meas_effects: np.ndarray
    #: single-qubit factors: prep_states[p] = ⊗_k single_prep_states[prep_parts[p, k]]
    single_prep_states: np.ndarray
    prep_parts: np.ndarray
    single_meas_effects: np.ndarray
    meas_parts: np.ndarray
    prep: tuple[str, ...]
    meas: tuple[str, ...]
    prep_index: np.ndarray
    meas_index: np.ndarray
    counts: np.ndarray
    seconds: np.ndarray
    background: np.ndarray
    efficiency: np.ndarray
    group: tuple[str, ...] | None
    group_index: np.ndarray
    group_names: tuple[str, ...]
    columns: tuple[str, ...]
    toml_text: str
    toml_sha256: str
    csv_sha256: str
    custom_states: tuple[str, ...] = field(default=())
    #: the ``[conditions]`` table: name → int, float or str, in the file's order
    conditions: dict = field(default_factory=dict)
    kind: str = "process"
    target_state: np.ndarray | None = None
    target_state_name: str | None = None
    #: physical line of every row in the counts file (header = line 1): the row
    #: number used in messages, warnings, `show` and /diagnostics/outlier_lines
    lines: np.ndarray | None = None

    @property
    def dim(self) -> int:
        return 2 ** self.n_qubits

    @property
    def n_rows(self) -> int:
        return int(self.counts.shape[0])

    @property
    def n_groups(self) -> int:
        return len(self.group_names)


# --------------------------------------------------------------------------
# TOML helpers: tomllib gives no line numbers, so we find them in the text
# --------------------------------------------------------------------------

_HEADER = re.compile(r"^\s*\[\s*([^\]\[]+?)\s*\]\s*(#.*)?$")


def _key_line(text: str, dotted: str) -> int | None:
    """Best-effort physical line of a dotted key in TOML text.

    Looks for ``key =`` inside its table, then for a table header that names
    the key or starts with it (``[state.Dtilt]`` for ``state``), then for its
    parent (a key inside an inline table is on its parent's line).
    """
    parts = dotted.split(".")
    table, key = ".".join(parts[:-1]), parts[-1]
    current = ""
    lines = text.splitlines()
    headers = []
    for lineno, line in enumerate(lines, start=1):
        m = _HEADER.match(line)
        if m:
            current = m.group(1).replace('"', "").replace(" ", "")
            headers.append((lineno, current))
            if current == dotted:
                return lineno
            continue
        if current == table and re.match(rf"^\s*\"?{re.escape(key)}\"?\s*=", line):
            return lineno
        if table and current == "" and re.match(rf"^\s*{re.escape(dotted)}\s*=", line):
            return lineno
    for lineno, name in headers:
        if name.startswith(dotted + "."):
            return lineno
    if table:                     # inside an inline table, or a key of an unlisted table
        return _key_line(text, table)
    return None


class _Toml:
    """Raises InputErrors that name the file, the key and its line."""

    def __init__(self, path: Path, text: str):
        self.path = path
        self.text = text

    def error(self, key: str, message: str) -> InputError:
        return InputError(message, file=str(self.path), line=_key_line(self.text, key), key=key)


def _parse_complex(value, where: str, toml: _Toml) -> complex:
    if isinstance(value, bool):
        raise toml.error(where, f"expected a number, got {value!r}")
    if isinstance(value, (int, float)):
        z = complex(value)
    elif isinstance(value, str):
        try:
            z = complex(value.replace(" ", ""))
        except ValueError:
            raise toml.error(where, f"{value!r} is not a complex number in Python notation "
                                    "(for example \"0.5-0.5j\")") from None
    else:
        raise toml.error(where, f"expected a number or a string, got {type(value).__name__}")
    if not (math.isfinite(z.real) and math.isfinite(z.imag)):
        raise toml.error(where, f"{value!r} is not finite")
    return z


def _parse_float(value, where: str, toml: _Toml, *, positive: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise toml.error(where, f"expected a number, got {value!r}")
    try:
        x = float(value)
    except OverflowError:                          # a TOML integer beyond double range
        raise toml.error(where, f"{value!r} is out of range") from None
    if not math.isfinite(x):
        raise toml.error(where, f"{value!r} is not finite")
    if positive and x <= 0:
        raise toml.error(where, f"must be positive, got {value!r}")
    if positive and not 1 / MAX_MAGNITUDE <= x <= MAX_MAGNITUDE:
        raise toml.error(where, f"{value!r} is outside [{1 / MAX_MAGNITUDE:g}, {MAX_MAGNITUDE:g}]: "
                                "a typo or a unit mistake?")
    return x


def _load_unitary_file(upath: Path, toml: _Toml) -> np.ndarray:
    """A numeric 2-D array from a .npy file (no pickles, no archives, no records)."""
    _regular_file(upath, "unitary file", error=lambda m: toml.error("target.unitary", m))
    try:
        u = np.load(upath, allow_pickle=False)
    except Exception as exc:  # numpy raises several kinds for a bad file
        raise toml.error("target.unitary", f"cannot read {upath} as a .npy array: {exc}") from None
    if not isinstance(u, np.ndarray):               # np.load gives an NpzFile for an archive
        if hasattr(u, "close"):
            u.close()
        raise toml.error("target.unitary", f"{upath} is an .npz archive; save the unitary alone "
                                           "with numpy.save (a .npy file)")
    if u.dtype.names is not None or u.dtype.kind not in "biufc":
        what = "records" if u.dtype.names is not None else "text" if u.dtype.kind in "SU" else \
            "objects" if u.dtype.kind == "O" else "values"
        raise toml.error("target.unitary", f"{upath} holds {what} (dtype {u.dtype}), not numbers")
    if u.ndim != 2:
        raise toml.error("target.unitary", f"{upath} holds a {u.ndim}-dimensional array; "
                                           "the unitary is a square matrix")
    if not np.all(np.isfinite(u)):
        raise toml.error("target.unitary", f"{upath} holds values that are not finite")
    return u


def _read_target(raw, n_qubits: int, toml: _Toml, base: Path):
    d = 2 ** n_qubits
    if isinstance(raw, str):
        if raw not in GATE_NAMES:
            hint = suggestion(raw, GATE_NAMES)
            mean = f"did you mean {hint!r}? " if hint is not None else ""
            raise toml.error("target", f"unknown gate {raw!r}; {mean}known gates: "
                                       f"{', '.join(GATE_NAMES)}, or {{ unitary = ... }}")
        u = named_gate(raw)
        name = raw
    elif isinstance(raw, dict):
        extra = set(raw) - {"unitary"}
        if extra:
            key = sorted(extra)[0]
            raise toml.error(f"target.{key}", f"unknown key {key!r} in target (only 'unitary')")
        if "unitary" not in raw:
            raise toml.error("target", "a target table needs the key 'unitary'")
        spec = raw["unitary"]
        if isinstance(spec, str):
            u = _load_unitary_file(base / spec, toml)
            name = f"unitary from {spec}"
        elif isinstance(spec, list):
            if not all(isinstance(r, list) for r in spec):
                raise toml.error("target.unitary", "expected a list of rows (a list of lists)")
            widths = {len(r) for r in spec}
            if len(widths) != 1:
                raise toml.error("target.unitary", "rows of the unitary have different lengths")
            u = np.array([[_parse_complex(x, "target.unitary", toml) for x in r] for r in spec])
            name = "user unitary"
        else:
            raise toml.error("target.unitary", "expected a .npy file name or a list of rows")
        u = np.asarray(u, dtype=complex)
    else:
        raise toml.error("target", "expected a gate name or { unitary = ... }")
    if u.shape != (d, d):
        raise toml.error("target", f"target is {u.shape[0]}×{u.shape[1] if u.ndim == 2 else '?'} "
                                   f"but {n_qubits} qubit(s) need {d}×{d}")
    try:
        check_unitary(u)
    except ValueError as exc:
        raise toml.error("target", str(exc)) from None
    return name, _frozen(u)


def _read_target_state(raw, n_qubits: int, right_circular: str, toml: _Toml, base: Path):
    """(name, normalised ket or density matrix) of the ``target_state`` key."""
    d = 2 ** n_qubits
    if isinstance(raw, str):
        try:
            return raw, _frozen(named_state(raw, n_qubits, right_circular))
        except ValueError as exc:
            raise toml.error("target_state", str(exc)) from None
    if not isinstance(raw, dict) or len(raw) != 1 or not set(raw) <= {"vector", "density"}:
        extra = sorted(set(raw) - {"vector", "density"}) if isinstance(raw, dict) else []
        where = f"target_state.{extra[0]}" if extra else "target_state"
        raise toml.error(where, "expected a state name, { vector = [...] } or "
                                "{ density = \"rho.npy\" }")
    if "vector" in raw:
        where = "target_state.vector"
        values = raw["vector"]
        if not isinstance(values, list):
            raise toml.error(where, "expected a list of amplitudes")
        v = np.array([_parse_complex(x, where, toml) for x in values], dtype=complex)
        if v.size != d:
            raise toml.error(where, f"the vector has {v.size} entries; {n_qubits} qubit(s) need "
                                    f"{d} (amplitudes of |0…0>, |0…01>, …, qubit 1 most "
                                    f"significant)")
        norm = np.linalg.norm(v)
        if norm == 0:
            raise toml.error(where, "the zero vector is not a state")
        return "user vector", _frozen(v / norm)
    where = "target_state.density"
    spec = raw["density"]
    if not isinstance(spec, str):
        raise toml.error(where, "expected the name of a .npy file")
    mpath = base / spec
    try:
        m = np.load(mpath, allow_pickle=False)
    except FileNotFoundError:
        raise toml.error(where, f"file not found: {mpath}") from None
    except Exception as exc:  # numpy raises several kinds for a bad file
        raise toml.error(where, f"cannot read {mpath} as a .npy array: {exc}") from None
    if m.shape != (d, d) or m.dtype.kind not in "iufc":
        raise toml.error(where, f"the density matrix in {spec} has shape {m.shape} "
                                f"({m.dtype}); {n_qubits} qubit(s) need a {d} × {d} numeric array")
    m = m.astype(complex)
    tol = TARGET_STATE_TOLERANCE
    if not np.all(np.isfinite(m)):
        raise toml.error(where, f"the density matrix in {spec} has an entry that is not finite")
    asym = float(np.abs(m - m.conj().T).max())
    if asym > tol:
        raise toml.error(where, f"the matrix in {spec} is not Hermitian (largest |ρ − ρ†| "
                                f"entry {asym:.3g} > {tol:g})")
    m = 0.5 * (m + m.conj().T)
    trace = float(np.trace(m).real)
    if abs(trace - 1.0) > tol:
        raise toml.error(where, f"the matrix in {spec} has trace {trace:.6g}; a density "
                                f"matrix has trace 1")
    low = float(np.linalg.eigvalsh(m)[0])
    if low < -tol:
        raise toml.error(where, f"the matrix in {spec} has a negative eigenvalue ({low:.3g}); "
                                f"a density matrix is positive semidefinite")
    return f"density matrix from {spec}", _frozen(m)


PLATE_KINDS = {"half": 180.0, "quarter": 90.0}


def _read_custom_states(raw, toml: _Toml):
    """Return {name: (prep_density, meas_effect)} for [states.NAME] tables."""
    if not isinstance(raw, dict):
        raise toml.error("states", "expected tables [states.NAME]")
    out = {}
    for name, spec in raw.items():
        key = f"states.{name}"
        if name in BUILTIN_LABELS:
            raise toml.error(key, f"custom state name {name!r} equals a built-in label")
        if not name or re.search(r"[\s,]", name):
            raise toml.error(key, f"custom state name {name!r} may not contain spaces or commas")
        if not isinstance(spec, dict):
            raise toml.error(key, "expected a table with one of 'bloch', 'vector', 'plates'")
        kinds = [k for k in spec if k in ("bloch", "vector", "plates")]
        unknown = [k for k in spec if k not in ("bloch", "vector", "plates")]
        if unknown:
            raise toml.error(f"{key}.{unknown[0]}", f"unknown key {unknown[0]!r} "
                                                    "(expected one of 'bloch', 'vector', 'plates')")
        if len(kinds) != 1:
            raise toml.error(key, "give exactly one of 'bloch', 'vector', 'plates'")
        kind = kinds[0]
        value = spec[kind]
        where = f"{key}.{kind}"
        if kind == "bloch":
            if not isinstance(value, list) or len(value) != 3:
                raise toml.error(where, "expected three numbers (<X>, <Y>, <Z>)")
            r = [_parse_float(x, where, toml) for x in value]
            length = math.sqrt(sum(x * x for x in r))
            if length > 1 + 1e-9:
                raise toml.error(where, f"Bloch vector is longer than 1 (|r| = {length:.6g})")
            rho = bloch_density(r)
            out[name] = (rho, rho)
        elif kind == "vector":
            if not isinstance(value, list) or len(value) != 2:
                raise toml.error(where, "expected two amplitudes (of H and V)")
            v = np.array([_parse_complex(x, where, toml) for x in value])
            scale = float(np.max(np.abs(v)))
            if scale == 0 or scale * np.linalg.norm(v / scale) < 1e-12:   # no overflow at 1e300
                raise toml.error(where, "the zero vector is not a state")
            rho = density(v)
            out[name] = (rho, rho)
        else:
            if not isinstance(value, list) or not value:
                raise toml.error(where, "expected a non-empty list of plates "
                                        "{ kind, angle_deg[, retardance_deg] }")
            jones = np.eye(2, dtype=complex)
            for k, plate in enumerate(value):
                pwhere = f"{where}[{k}]"
                if not isinstance(plate, dict):
                    raise toml.error(where, f"plate {k} is not a table")
                bad = set(plate) - {"kind", "angle_deg", "retardance_deg"}
                if bad:
                    raise toml.error(where, f"plate {k}: unknown key {sorted(bad)[0]!r}")
                pkind = plate.get("kind")
                if not isinstance(pkind, str) or pkind not in PLATE_KINDS:
                    raise toml.error(where, f"plate {k}: unknown plate kind {pkind!r} "
                                            "(expected 'half' or 'quarter')")
                if "angle_deg" not in plate:
                    raise toml.error(where, f"plate {k}: missing 'angle_deg'")
                angle = _parse_float(plate["angle_deg"], pwhere, toml)
                ret = _parse_float(plate.get("retardance_deg", PLATE_KINDS[pkind]), pwhere, toml)
                jones = wave_plate(math.radians(angle), math.radians(ret)) @ jones
            h = np.array([1, 0], dtype=complex)
            prep = density(jones @ h)
            # analysis: the plates (first met first), then a polariser passing H
            meas = jones.conj().T @ np.outer(h, h) @ jones
            out[name] = (prep, meas)
    return out


# --------------------------------------------------------------------------
# The reader
# --------------------------------------------------------------------------

def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


#: The experiment file a folder stands for, wherever an experiment file is expected.
EXPERIMENT_FILE = "experiment.toml"


def _shown(path) -> str:
    """A path as it can be printed (a NUL byte would end the message on some terminals)."""
    return str(path).replace("\x00", "\\0")


def _regular_file(path: Path, what: str, *, error=None) -> int:
    """The size of ``path`` when it is a regular file; else an InputError saying what it is.

    Devices (``/dev/zero``), pipes and sockets never end or block, and a folder is not
    a file: they are refused before anything is read. ``error(message)`` makes the
    InputError (default: one naming the file).
    """
    if error is None:
        def error(message):
            return InputError(message, file=_shown(path))
    if "\x00" in str(path):
        raise error(f"the {what} path contains a NUL byte")
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise error(f"{what} not found" + (f": {_shown(path)}" if what == "unitary file" else "")) \
            from None
    except (OSError, ValueError) as exc:
        raise error(f"cannot read {what}: {getattr(exc, 'strerror', None) or exc}") from None
    if stat.S_ISDIR(info.st_mode):
        raise error(f"is a folder, not a {what}")
    if not stat.S_ISREG(info.st_mode):
        raise error(f"is not a regular file (a device, a pipe or a socket); give the {what} itself")
    return info.st_size


def _read_bytes(path: Path, what: str, *, guard_memory: bool = False) -> bytes:
    size = _regular_file(path, what)
    if guard_memory:
        check_reading(size, _shown(path))
    try:
        return path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read {what}: {exc.strerror}", file=_shown(path)) from None


def experiment_path(path) -> Path:
    """The experiment file of ``path``: the path itself, or ``experiment.toml`` inside a folder."""
    path = Path(path)
    if "\x00" not in str(path) and path.is_dir():
        inside = path / EXPERIMENT_FILE
        if not inside.exists():
            raise InputError(f"is a folder without an {EXPERIMENT_FILE}; give the experiment file",
                             file=_shown(path))
        return inside
    return path


def read_experiment(path) -> Experiment:
    """Read and validate ``experiment.toml`` and the counts CSV it names.

    Parameters
    ----------
    path : str or Path
        The experiment file (docs/file-formats.md, "Input"), or the experiment folder
        that holds it as ``experiment.toml``. Paths inside it are relative to it.

    Returns
    -------
    Experiment

    Raises
    ------
    InputError
        For every problem, naming the file, the line or key, and what is wrong.
    """
    path = experiment_path(path)
    raw_bytes, text, data = _load_toml(path)
    toml = _Toml(path, text)

    for key in data:
        if key not in TOP_KEYS:
            raise toml.error(key, f"unknown key {key!r}; allowed keys: {', '.join(TOP_KEYS)}")
    for key in ("qubits", "counts"):
        if key not in data:
            raise InputError(f"missing required key {key!r}", file=str(path), key=key)

    title = data.get("title", "")
    if not isinstance(title, str):
        raise toml.error("title", "expected a string")

    n_qubits = data["qubits"]
    if isinstance(n_qubits, bool) or not isinstance(n_qubits, int):
        raise toml.error("qubits", f"expected a whole number, got {n_qubits!r}")
    if not 1 <= n_qubits <= MAX_QUBITS:
        raise toml.error("qubits", f"must lie in 1..{MAX_QUBITS}, got {n_qubits}")

    kind = data.get("kind", "process")
    if kind not in KINDS:
        raise toml.error("kind", f"{kind!r} is not one of {', '.join(map(repr, KINDS))}")
    if kind == "state":
        for key, why in PROCESS_ONLY_KEYS.items():
            if key in data:
                raise toml.error(key, f"not a key of a state experiment (kind = \"state\"): {why}")
    elif "target_state" in data:
        raise toml.error("target_state", "target_state is the target of a state experiment "
                                         "(kind = \"state\"); a process names its gate with target")

    normalization = data.get("normalization", "per-preparation" if kind == "process" else "global")
    if normalization not in NORMALIZATIONS:
        raise toml.error("normalization", f"{normalization!r} is not one of {', '.join(NORMALIZATIONS)}")
    if kind == "state" and normalization == "per-preparation":
        raise toml.error("normalization", "a state experiment has no preparations: use \"global\" "
                                          "(the default for states) or \"per-group\"")
    trace = data.get("trace", "preserving")
    if trace not in TRACE_KINDS:
        raise toml.error("trace", f"{trace!r} is not one of {', '.join(TRACE_KINDS)}")
    input_rate = None
    if "input_rate" in data:
        input_rate = _parse_float(data["input_rate"], "input_rate", toml, positive=True)
    if trace == "decreasing":
        if normalization != "global":
            raise toml.error("trace", "trace = \"decreasing\" needs normalization = \"global\"")
        if input_rate is None:
            raise toml.error("trace", "trace = \"decreasing\" needs the key input_rate")
    elif input_rate is not None:
        raise toml.error("input_rate", "input_rate is used only with trace = \"decreasing\" (a "
                                       "trace-preserving fit normalises the intensities away); "
                                       "remove it, or add trace = \"decreasing\"")

    right_circular = "H-iV"
    conventions = data.get("conventions", {})
    if not isinstance(conventions, dict):
        raise toml.error("conventions", "expected a table [conventions]")
    for key, value in conventions.items():
        if key != "right_circular":
            raise toml.error(f"conventions.{key}", f"unknown key {key!r} (only 'right_circular')")
        if value not in RIGHT_CIRCULAR_CHOICES:
            raise toml.error("conventions.right_circular",
                             f"{value!r} is not one of {', '.join(RIGHT_CIRCULAR_CHOICES)}")
        right_circular = value

    target_name, target = (None, None)
    if "target" in data:
        target_name, target = _read_target(data["target"], n_qubits, toml, path.parent)

    target_state_name, target_state = (None, None)
    if "target_state" in data:
        target_state_name, target_state = _read_target_state(
            data["target_state"], n_qubits, right_circular, toml, path.parent)

    custom = _read_custom_states(data.get("states", {}), toml)

    conditions = _read_conditions(data.get("conditions", {}), toml)

    counts_name = data["counts"]
    if not isinstance(counts_name, str) or not counts_name.strip():
        raise toml.error("counts", "expected the CSV file name as a string")
    if "\x00" in counts_name:
        raise toml.error("counts", "the file name contains a NUL byte")
    counts_path = path.parent / counts_name
    table = _read_counts(counts_path, n_qubits, right_circular, custom, normalization, kind)

    return Experiment(
        path=path, counts_path=counts_path, title=title, n_qubits=n_qubits,
        target_name=target_name, target=target, normalization=normalization,
        trace=trace, input_rate=input_rate, right_circular=right_circular,
        toml_text=text, toml_sha256=_sha256(raw_bytes), custom_states=tuple(custom),
        conditions=conditions, kind=kind, target_state=target_state,
        target_state_name=target_state_name, **table,
    )


def _load_toml(path: Path):
    """(bytes, text, table) of an experiment file; InputError when it cannot be read or parsed."""
    raw_bytes = _read_bytes(path, "file")
    try:
        text = raw_bytes.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start})", file=str(path)) from None
    if not text.strip():
        raise InputError("the experiment file is empty", file=str(path))
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise InputError(f"not valid TOML: {exc}", file=str(path),
                         line=int(m.group(1)) if m else None) from None
    except RecursionError:
        raise InputError("not valid TOML: arrays or tables nested too deeply", file=str(path)) \
            from None
    return raw_bytes, text, data


def _read_conditions(raw, toml: _Toml) -> dict:
    """The ``[conditions]`` table: free names, each a whole number, a finite number or a
    string of at most MAX_CONDITION_TEXT characters (docs/file-formats.md, "Input")."""
    if not isinstance(raw, dict):
        raise toml.error("conditions", "expected a table [conditions]")
    out = {}
    for name, value in raw.items():
        key = f"conditions.{name}"
        if not name.strip() or len(name) > MAX_CONDITION_TEXT \
                or any(ord(c) < 32 or ord(c) == 127 for c in name):
            raise toml.error(key, f"condition name {name!r} must be 1 to {MAX_CONDITION_TEXT} "
                                  "printable characters")
        if isinstance(value, bool) or not isinstance(value, (int, float, str)):
            what = "a table" if isinstance(value, dict) else type(value).__name__
            raise toml.error(key, f"a condition is a number or a string of at most "
                                  f"{MAX_CONDITION_TEXT} characters, got {what} {value!r}")
        if isinstance(value, int) and not -2**63 <= value < 2**63:
            raise toml.error(key, f"{value} does not fit a 64-bit integer")
        if isinstance(value, float) and not math.isfinite(value):
            raise toml.error(key, f"{value!r} is not finite")
        if isinstance(value, str) and len(value) > MAX_CONDITION_TEXT:
            raise toml.error(key, f"the text has {len(value)} characters, more than "
                                  f"{MAX_CONDITION_TEXT}")
        out[name] = value
    return out


def read_conditions(path) -> dict:
    """The ``[conditions]`` table of an experiment file alone (name → int, float or str;
    empty without one), checked as `read_experiment` checks it; nothing else is read.

    Raises
    ------
    InputError
        When the file cannot be read or parsed, or a condition is not allowed.
    """
    path = Path(path)
    _, text, data = _load_toml(path)
    return _read_conditions(data.get("conditions", {}), _Toml(path, text))


def input_files(path) -> dict:
    """The files an experiment is read from, as far as its experiment file can be read:
    ``{"experiment": path, "counts": the counts file, "target": a target unitary's
    .npy file}``, the last two only when the experiment file names them. Nothing is
    validated (`read_experiment` does that)."""
    path = Path(path)
    files = {"experiment": path}
    try:
        _, _, data = _load_toml(path)
    except InputError:
        return files
    counts = data.get("counts")
    if isinstance(counts, str) and counts.strip():
        files["counts"] = path.parent / counts
    target = data.get("target")
    if isinstance(target, dict) and isinstance(target.get("unitary"), str):
        files["target"] = path.parent / target["unitary"]
    return files


_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$|^[+-]?(nan|inf|infinity)$", re.I)
# ASCII digits only: Python's float() also reads "١٢" and "１２", which no lab file means
_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$|^[+-]?(nan|inf|infinity)$",
                     re.I | re.ASCII)
#: "1,044", "1.044.210", "1'044", "1 044": digits grouped by three, as a spreadsheet shows them
_GROUPED = re.compile(r"^\d{1,3}([,.' \u00a0\u202f]\d{3})+$", re.ASCII)


def _number(text: str) -> float:
    """A decimal number as written in a CSV cell (ASCII digits; no underscores, no hex)."""
    if not _NUMBER.match(text):
        raise ValueError(f"{text!r} is not a number" + _grouping_hint(text))
    return float(text)


def _grouping_hint(text: str) -> str:
    if _GROUPED.match(text):
        plain = re.sub(r"\D", "", text)
        return f" (a thousands separator? write {plain})"
    if any(c.isdigit() and not c.isascii() for c in text):
        return " (only the ASCII digits 0-9 are read)"
    return ""


def _parse_counts_cell(text: str) -> int:
    x = _number(text)
    if not math.isfinite(x):
        raise ValueError(f"counts must be finite, got {text!r}")
    if x < 0:
        raise ValueError(f"counts must be non-negative, got {text!r}")
    if x != math.floor(x):
        raise ValueError(f"counts must be whole numbers, got {text!r}{_grouping_hint(text)}")
    if x > 2**62:
        raise ValueError(f"counts value {text!r} is too large")
    return int(x)


def _parse_positive_cell(text: str, column: str, *, allow_zero: bool) -> float:
    x = _number(text)
    if not math.isfinite(x):
        raise ValueError(f"{column} must be finite, got {text!r}")
    if x < 0 or (x == 0 and not allow_zero):
        need = "non-negative" if allow_zero else "positive"
        raise ValueError(f"{column} must be {need}, got {text!r}")
    if x > MAX_MAGNITUDE or (not allow_zero and x < 1 / MAX_MAGNITUDE):
        raise ValueError(f"{column} {text!r} is outside [{1 / MAX_MAGNITUDE:g}, {MAX_MAGNITUDE:g}]: "
                         "a typo or a unit mistake?")
    return x


def _state_tables(n_qubits, right_circular, custom):
    vectors = builtin_states(right_circular)
    prep_1q = {k: density(v) for k, v in vectors.items()}
    meas_1q = dict(prep_1q)
    for name, (prep, meas) in custom.items():
        prep_1q[name] = prep
        meas_1q[name] = meas
    return prep_1q, meas_1q


def _read_counts(counts_path: Path, n_qubits: int, right_circular: str, custom: dict,
                 normalization: str, kind: str = "process") -> dict:
    file = str(counts_path)
    is_state = kind == "state"
    raw = _read_bytes(counts_path, "counts file", guard_memory=True)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start})", file=file) from None
    if not text.strip():
        raise InputError("the counts file is empty", file=file, line=1)

    reader = csv.reader(io.StringIO(text, newline=""), skipinitialspace=True)
    rows = _csv_rows(reader, file)
    header = None
    for cells, header_line in rows:
        if any(c.strip() for c in cells):
            header = [c.strip() for c in cells]
            break
    if header is None:
        raise InputError("the counts file has no header row (only empty cells)", file=file, line=1)
    allowed = REQUIRED_COLUMNS + OPTIONAL_COLUMNS
    if len(header) == 1:
        for sep, name in ((";", "semicolons"), ("\t", "tabs")):
            if sep in header[0]:
                raise InputError(f"the header is one cell, {header[0]!r}: the file seems to be "
                                 f"separated by {name}; gatescope reads comma-separated values "
                                 "(save or export the table as CSV with commas)",
                                 file=file, line=header_line)
    for col in header:
        if col not in allowed:
            raise InputError(f"unknown column {col!r}; allowed columns: {', '.join(allowed)}",
                             file=file, line=header_line)
    for col in set(header):
        if header.count(col) > 1:
            raise InputError(f"column {col!r} appears twice", file=file, line=header_line)
    if is_state and "prep" in header:
        raise InputError("column 'prep': a state experiment (kind = \"state\") has no "
                         "preparations; remove the column, or describe a process", file=file,
                         line=header_line)
    required = STATE_REQUIRED_COLUMNS if is_state else REQUIRED_COLUMNS
    for col in required:
        if col not in header:
            hint = (" (the counts of a state, analysed only, go with kind = \"state\" in the "
                    "experiment file)" if col == "prep" else "")
            raise InputError(f"missing required column {col!r}{hint}", file=file,
                             line=header_line)
    if normalization == "per-group" and "group" not in header:
        raise InputError("normalization = \"per-group\" needs a 'group' column",
                         file=file, line=header_line)
    if normalization != "per-group" and "group" in header:
        raise InputError(f"a 'group' column is used only with normalization = \"per-group\" (this "
                         f"experiment's normalization is \"{normalization}\"): set it in the "
                         "experiment file, or remove the column", file=file, line=header_line)
    pos = {c: header.index(c) for c in header}

    known = set(BUILTIN_LABELS) | set(custom)
    prep_1q, meas_1q = _state_tables(n_qubits, right_circular, custom)
    prep_settings: dict[tuple, int] = {}
    meas_settings: dict[tuple, int] = {}
    prep_mats, meas_mats, prep_names, meas_names = [], [], [], []
    cols = {c: [] for c in header}
    prep_index, meas_index = [], []

    single_index = {"prep": {}, "meas": {}}
    part_rows = {"prep": [], "meas": []}

    parsed = {"prep": {}, "meas": {}}            # label text -> parts (large files repeat labels)

    def setting(label, settings, mats, names, table, line, column):
        parts = parsed[column].get(label)
        if parts is None:
            try:
                parts = tuple(split_label(label, n_qubits, known))
            except ValueError as exc:
                raise InputError(f"column '{column}': {_label_problem(label, n_qubits, known, exc)}",
                                 file=file, line=line) from None
            parsed[column][label] = parts
        idx = settings.get(parts)
        if idx is None:
            idx = len(names)
            settings[parts] = idx
            if not is_state:          # a state's effects stay in product form (Experiment)
                mats.append(kron_all(table[p] for p in parts))
            names.append(" ".join(parts))
            index = single_index[column]
            part_rows[column].append([index.setdefault(p, len(index)) for p in parts])
        return idx

    n_rows = 0
    lines = []
    for cells, line in rows:
        if not any(c.strip() for c in cells):
            continue
        if len(cells) != len(header):
            raise InputError(f"expected {len(header)} cells, found {len(cells)}"
                             + _split_number_hint(cells), file=file, line=line)
        cells = [c.strip() for c in cells]
        for col in required:
            if not cells[pos[col]]:
                raise InputError(f"empty cell in required column '{col}'", file=file, line=line)
        if not is_state:
            prep_index.append(setting(cells[pos["prep"]], prep_settings, prep_mats, prep_names,
                                      prep_1q, line, "prep"))
        meas_index.append(setting(cells[pos["meas"]], meas_settings, meas_mats, meas_names,
                                  meas_1q, line, "meas"))
        for col in header:
            value = cells[pos[col]]
            try:
                if col == "counts":
                    value = _parse_counts_cell(value)
                elif col in ("seconds", "efficiency"):
                    value = _parse_positive_cell(value or "1", col, allow_zero=False)
                elif col == "background":
                    value = _parse_positive_cell(value or "0", col, allow_zero=True)
                elif col == "group":
                    if not value:
                        raise ValueError("empty cell in column 'group'")
            except ValueError as exc:
                msg = str(exc)
                if "is not a number" in msg:
                    msg = f"column '{col}': {msg}"
                raise InputError(msg, file=file, line=line) from None
            cols[col].append(value)
        lines.append(line)
        n_rows += 1
    if n_rows == 0:
        raise InputError("the counts file has a header but no data rows", file=file, line=header_line)

    ones = np.ones(n_rows)
    prep_index = np.array(prep_index, dtype=np.int64)
    if normalization == "per-preparation":
        group_index, group_names = prep_index, tuple(prep_names)
    elif normalization == "global":
        group_index, group_names = np.zeros(n_rows, dtype=np.int64), ("all",)
    else:
        names = {}
        group_index = np.array([names.setdefault(g, len(names)) for g in cols["group"]], dtype=np.int64)
        group_names = tuple(names)
    def singles(column, table):
        names = sorted(single_index[column], key=single_index[column].get)
        return _frozen(np.array([table[nm] for nm in names]))

    prep_columns = {}
    if is_state:
        prep_columns = dict(single_prep_states=None, prep_parts=None, prep_labels=(),
                            prep_states=None, prep=(), prep_index=None, meas_effects=None)
    return dict(
        single_prep_states=singles("prep", prep_1q),
        prep_parts=_frozen(np.array(part_rows["prep"], dtype=np.int64)),
        single_meas_effects=singles("meas", meas_1q),
        meas_parts=_frozen(np.array(part_rows["meas"], dtype=np.int64)),
        prep_labels=tuple(prep_names), meas_labels=tuple(meas_names),
        prep_states=_frozen(np.array(prep_mats)), meas_effects=_frozen(np.array(meas_mats)),
        prep=tuple(cols.get("prep", ())), meas=tuple(cols["meas"]),
        prep_index=_frozen(prep_index), meas_index=_frozen(np.array(meas_index, dtype=np.int64)),
        counts=_frozen(np.array(cols["counts"], dtype=np.int64)),
        seconds=_frozen(np.array(cols["seconds"], dtype=float) if "seconds" in cols else ones),
        background=_frozen(np.array(cols["background"], dtype=float) if "background" in cols
                           else np.zeros(n_rows)),
        efficiency=_frozen(np.array(cols["efficiency"], dtype=float) if "efficiency" in cols else ones),
        group=tuple(cols["group"]) if "group" in cols else None,
        group_index=_frozen(group_index), group_names=group_names,
        columns=tuple(header), csv_sha256=_sha256(raw),
        lines=_frozen(np.array(lines, dtype=np.int64)),
    ) | prep_columns


def _csv_rows(reader, file: str):
    """(cells, first physical line) of every CSV record; a record that runs over several
    lines inside quotes, or that the csv module cannot read, is an InputError at the line
    where it starts (an unbalanced quote is reported where it opens, not where the file ends)."""
    end = 0
    while True:
        start = end + 1
        try:
            cells = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            message = str(exc)
            if "field larger than field limit" in message:
                message = (f"a cell is longer than {csv.field_size_limit():,} characters "
                           "(an unbalanced quote?)")
            raise InputError(f"cannot read the line as CSV: {message}", file=file, line=start) \
                from None
        end = reader.line_num
        if end > start and any("\n" in c or "\r" in c for c in cells):
            raise InputError(f"a quoted cell runs from line {start} to line {end}: is a closing "
                             "quote (\") missing on this line?", file=file, line=start)
        yield cells, start


def _split_number_hint(cells) -> str:
    """For a row with too many cells: a number that a thousands separator split in two."""
    for a, b in zip(cells, cells[1:]):
        if re.fullmatch(r"\s*\d{1,3}", a, re.ASCII) and re.fullmatch(r"\d{3}\s*", b, re.ASCII):
            return (f" ('{a.strip()},{b.strip()}' looks like a number with a thousands separator: "
                    f"write {a.strip()}{b.strip()})")
    return ""


def _label_problem(label: str, n_qubits: int, known, exc: ValueError) -> str:
    """What is wrong with a label, with the nearest known label or the qubit count."""
    text = label.strip()
    plural = "qubit" if n_qubits == 1 else "qubits"
    if n_qubits == 1 and len(text) > 1 and all(c in known for c in text):
        return (f"label {label!r} names {len(text)} qubits but the experiment has 1 qubit "
                "(key 'qubits' in the experiment file)")
    message = str(exc)
    if message.startswith("label "):           # the wrong number of parts
        return f"{message} {plural} (key 'qubits' in the experiment file)"
    unknown = re.search(r"unknown state label '(.*?)'", message)
    if unknown:
        hint = suggestion(unknown.group(1), sorted(known))
        if hint is not None:
            same = hint.lower() == unknown.group(1).lower()
            return (f"{message}; " + ("labels are case-sensitive: " if same else "")
                    + f"did you mean {hint!r}?")
    return message
