"""The result file: the HDF5 layout of a `gatescope.result.Result` (docs/file-formats.md).

The file is readable from any HDF5 tool: no pickled objects, complex arrays
as native complex, strings as UTF-8. `write` goes to a temporary file
beside the target and renames it, so a reader never sees half a file and a
failure leaves nothing behind. `read` gives back every field exactly, as
the keyword arguments of `Result`.

This module knows the layout, not the `Result` class: it writes any object
with the Result's attributes, so that `Result.save` can call it without an
import cycle.
"""

from __future__ import annotations

import mmap
import re
from pathlib import Path

import h5py
import numpy as np

from . import checksum
from .bootstrap import Bootstrap
from .diagnostics import Diagnostics
from .errors import InputError
from .estimators import METHODS
from .fileio import atomic_path
from .intervals import FIT_INTERVALS, LOWER_BOUND_METHODS, Figure
from .conventions import pauli_labels
from .merit import FIGURE_NAMES, STATE_FIGURE_ORDER

FORMAT = "gatescope.result"
#: 2: /warnings, checksums, units and conventions as attributes, CSV line numbers,
#: the fit's status, undetermined figures, no empty seed. Files of version 1 stay readable.
FORMAT_VERSION = 2
READABLE_VERSIONS = (1, 2)

#: The conventions stated on the estimate's datasets (README, "Conventions").
CONVENTIONS = {
    "choi": "J = sum_ij |i><j| (x) Phi(|i><j|), input factor first; Tr J = d; trace preserving "
            "iff Tr_out J = I",
    "chi": "Phi(rho) = sum_mn chi_mn P_m rho P_n over the Pauli strings of attribute "
           "pauli_order; Tr chi = 1 when trace preserving",
    "ptm": "R_ij = Tr(P_i Phi(P_j))/d over the Pauli strings of attribute pauli_order",
    "rho": "density matrix of the state, Tr rho = 1",
}
PAULI_ORDER = "lexicographic, I < X < Y < Z, qubit 1 (the leftmost tensor factor) most significant"
QUBIT_ORDER = "qubit 1 is the leftmost tensor factor and the most significant bit"
#: One line on every figure dataset (attribute ``description``); README, "Conventions".
FIGURE_DESCRIPTIONS = {
    "process_fidelity": "<<U|J|U>>/d^2 to the target U (squared convention)",
    "average_gate_fidelity": "(d F_pro + Tr J/d)/(d + 1)",
    "purity": "Tr rho_J^2 of the normalised Choi state rho_J = J/Tr J",
    "trace": "Tr J / d (1 for a trace-preserving process)",
    "min_eigenvalue": "smallest eigenvalue of J (negative: not a physical process)",
    "unitarity": "Tr(R_u^T R_u)/(d^2 - 1) of the unital block of the Pauli transfer matrix",
    "nearest_unitary_fidelity": "process fidelity to the closest unitary (/figures_extra/nearest_unitary)",
    "process_fidelity_local_phases": "process fidelity to the target after the best single-qubit Z "
                                     "rotations (/figures_extra/local_phases_*)",
    "truth_table_fidelity": "mean probability of the target's output basis state over basis inputs",
    "concurrence": "Wootters concurrence of the output for the input in attribute "
                   "/figures_extra concurrence_input",
    "diamond_distance": "diamond norm of Phi - Phi_U (0 to 2), by semidefinite program",
}
#: Units of the datasets that have them ("1": a pure number).
UNITS = {"seconds": "s", "counts": "counts", "background": "counts", "efficiency": "1",
         "intensities": "counts/s", "expected_counts": "counts", "local_phases_before": "rad",
         "local_phases_after": "rad"}


def write(path, r) -> Path:
    """Write result ``r`` to ``path`` atomically; returns the path."""
    path = Path(path)
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as f:
            _write(f, r)
            checksum.write(f)
    return path


_STR = h5py.string_dtype("utf-8")
_COMPRESS_FROM = 4096          # elements; smaller datasets stay contiguous and uncompressed


def _put(group, name: str, data):
    """Create a dataset, gzip-compressed when large (per-row arrays of big experiments).

    Text columns are stored as fixed-length UTF-8, which compresses (a
    variable-length string heap does not).
    """
    data = np.asarray(data)
    if data.dtype.kind in "OUS":
        encoded = [str(v).encode("utf-8") for v in data.reshape(-1)]
        width = max((len(e) for e in encoded), default=1) or 1
        data = np.array(encoded, dtype=h5py.string_dtype("utf-8", width)).reshape(data.shape)
    if data.size >= _COMPRESS_FROM and data.ndim >= 1:
        return group.create_dataset(name, data=data, compression="gzip", compression_opts=4,
                                    shuffle=True)
    return group.create_dataset(name, data=data)


def _write(f: h5py.File, r) -> None:
    f.attrs["format"] = FORMAT
    f.attrs["format_version"] = FORMAT_VERSION
    f.attrs["created_utc"] = r.created_utc
    f.attrs["origin"] = r.origin
    f.attrs["kind"] = r.kind

    inp = f.create_group("input")
    ds = inp.create_dataset("experiment_toml", data=r.experiment_toml, dtype=_STR)
    ds.attrs["sha256"] = r.toml_sha256
    counts = inp.create_group("counts")
    counts.attrs["sha256"] = r.csv_sha256
    for name, values in r.counts_columns.items():
        values = np.asarray(values)
        ds = _put(counts, name, values)
        if name in UNITS:
            ds.attrs["units"] = UNITS[name]

    model = f.create_group("model")
    if r.kind == "state":
        _write_state_model(model, r)
    else:
        _put(model, "prep_states", np.asarray(r.prep_states, dtype=np.complex128))
        _put(model, "meas_effects", np.asarray(r.meas_effects, dtype=np.complex128))
    if r.target is not None and r.kind != "state":
        t = model.create_dataset("target_unitary", data=np.asarray(r.target, dtype=np.complex128))
        t.attrs["name"] = r.target_name or ""

    est = f.create_group("estimate")
    if r.kind == "state":
        ds = est.create_dataset("rho", data=np.asarray(r.rho, dtype=np.complex128))
        ds.attrs["convention"] = CONVENTIONS["rho"]
        ds.attrs["qubit_order"] = QUBIT_ORDER
    else:
        n_qubits = int(round(np.log2(np.asarray(r.choi).shape[0]) / 2))
        for name, dtype in (("choi", np.complex128), ("chi", np.complex128), ("ptm", np.float64)):
            ds = est.create_dataset(name, data=np.asarray(getattr(r, name), dtype=dtype))
            ds.attrs["convention"] = CONVENTIONS[name]
            ds.attrs["qubit_order"] = QUBIT_ORDER
            if name != "choi":
                ds.attrs["pauli_order"] = PAULI_ORDER
                ds.attrs["pauli_labels"] = np.array(pauli_labels(n_qubits), dtype=object).astype(_STR)
    ds = est.create_dataset("intensities", data=np.asarray(r.intensities, dtype=np.float64))
    ds.attrs["units"] = UNITS["intensities"]
    if r.status is not None:
        est.attrs["status"] = r.status
    est.attrs["method"] = r.method
    est.attrs["converged"] = bool(r.converged)
    est.attrs["iterations"] = int(r.iterations)
    est.attrs["log_likelihood"] = float(r.log_likelihood)
    est.attrs["stop_reason"] = r.stop_reason
    est.attrs["seconds"] = float(r.seconds)

    figs = f.create_group("figures")
    for name, fig in r.figures.items():
        ds = figs.create_dataset(name, data=np.float64(fig.value))
        ds.attrs["units"] = "1"
        ds.attrs["determined"] = bool(fig.determined)
        if name in FIGURE_DESCRIPTIONS:
            ds.attrs["description"] = FIGURE_DESCRIPTIONS[name]
        if fig.ci is not None:
            ds.attrs["ci_low"] = float(fig.ci[0])
            ds.attrs["ci_high"] = float(fig.ci[1])
            ds.attrs["ci_level"] = float(fig.level)
        if fig.interval_method is not None:
            ds.attrs["ci_method"] = str(fig.interval_method)
        if fig.lower_bound is not None:
            ds.attrs["lower_bound"] = float(fig.lower_bound)
            ds.attrs["lower_bound_level"] = float(fig.level)
            if fig.lower_bound_method is not None:
                ds.attrs["lower_bound_method"] = str(fig.lower_bound_method)
        if fig.touches_boundary is not None:
            ds.attrs["touches_boundary"] = bool(fig.touches_boundary)
    extra = f.create_group("figures_extra")
    for name, value in r.figure_details.items():
        if isinstance(value, np.ndarray):
            ds = extra.create_dataset(name, data=value)
            if name in UNITS:
                ds.attrs["units"] = UNITS[name]
        else:
            extra.attrs[name] = value

    if r.bootstrap is not None:
        b = f.create_group("bootstrap")
        ds = b.create_dataset("figures", data=np.asarray(r.bootstrap.figures, dtype=np.float64))
        ds.attrs["names"] = np.array(r.bootstrap.names, dtype=object).astype(_STR)
        b.attrs["kind"] = r.bootstrap.kind
        b.attrs["seed"] = int(r.bootstrap.seed)
        b.attrs["samples"] = int(r.bootstrap.samples)
        b.attrs["failures"] = int(r.bootstrap.failures)
        b.attrs["interval"] = r.bootstrap.interval
        b.attrs["errors"] = int(r.bootstrap.errors)
        b.attrs["method"] = r.bootstrap.method
        b.attrs["workers"] = int(r.bootstrap.workers)
        b.attrs["seconds"] = float(r.bootstrap.seconds)
        if r.bootstrap.converged is not None:
            b.create_dataset("converged", data=np.asarray(r.bootstrap.converged, dtype=bool))
        for name, dtype in (("choi_std", np.complex128), ("chi_std", np.complex128),
                            ("ptm_std", np.float64), ("rho_std", np.complex128),
                            ("deviances", np.float64)):
            value = getattr(r.bootstrap, name)
            if value is not None:
                b.create_dataset(name, data=np.asarray(value, dtype=dtype))

    prov = f.create_group("provenance")
    for key, value in r.provenance.items():
        if value is not None and not (key == "seed" and value == ""):   # no seed: no attribute
            prov.attrs[key] = value

    f.create_dataset("warnings", data=np.array([str(w) for w in r.warnings], dtype=object),
                     dtype=_STR, shape=(len(r.warnings),))

    write_conditions(f, r.conditions)

    d = r.diagnostics
    if d is None:                      # the true channel of a simulation has no fit to test
        return
    dg = f.create_group("diagnostics")
    _put(dg, "expected_counts", np.asarray(d.expected_counts, dtype=np.float64)).attrs["units"] = \
        UNITS["expected_counts"]
    _put(dg, "pearson_residuals", np.asarray(d.pearson_residuals, dtype=np.float64))
    _put(dg, "deviance_residuals", np.asarray(d.deviance_residuals, dtype=np.float64))
    dg.attrs["chi2"] = float(d.chi2)
    dg.attrs["deviance"] = float(d.deviance)
    dg.attrs["dof"] = int(d.dof)
    dg.attrs["chi2_p_value"] = float(d.chi2_p_value)
    dg.attrs["deviance_p_value"] = float(d.deviance_p_value)
    if d.bootstrap_resamples:
        dg.attrs["bootstrap_p_value"] = float(d.bootstrap_p_value)
        dg.attrs["bootstrap_resamples"] = int(d.bootstrap_resamples)
    dg.create_dataset("outlier_rows", data=np.asarray(d.outlier_rows, dtype=np.int64))
    if d.outlier_lines is not None:
        dg.create_dataset("outlier_lines", data=np.asarray(d.outlier_lines, dtype=np.int64))


def write_conditions(f: h5py.File, conditions: dict) -> None:
    """/conditions: one attribute per condition, in the experiment file's order
    (int64, float64 or UTF-8 text)."""
    group = f.create_group("conditions", track_order=True)
    for name, value in conditions.items():
        if isinstance(value, str):
            group.attrs.create(name, value, dtype=_STR)
        else:
            group.attrs[name] = np.int64(value) if isinstance(value, int) else np.float64(value)


def read_conditions(f: h5py.File) -> dict:
    """The conditions of /conditions (empty for a file without the group)."""
    if "conditions" not in f:
        return {}
    group = f["conditions"]
    return {name: _attr(group, name) for name in group.attrs}


def _write_state_model(model, r) -> None:
    """/model of a state: the single-qubit effects and every setting's parts (the dense
    effects of a six-qubit experiment would take gigabytes), and the target state."""
    _put(model, "single_meas_effects", np.asarray(r.single_meas_effects, dtype=np.complex128))
    _put(model, "meas_parts", np.asarray(r.meas_parts, dtype=np.int64))
    if r.target is not None:
        t = model.create_dataset("target_state", data=np.asarray(r.target, dtype=np.complex128))
        t.attrs["name"] = r.target_name or ""


def _attr(obj, key, default=None):
    v = obj.attrs.get(key, default)
    if isinstance(v, bytes):
        v = v.decode("utf-8")
    if isinstance(v, np.generic):
        v = v.item()
    return v


def _text(ds) -> str:
    v = ds[()]
    return v.decode("utf-8") if isinstance(v, bytes) else str(v)


# --------------------------------------------------------------------------
# Reading, with every part checked: a damaged or altered file is an InputError
# naming the part, never a traceback
# --------------------------------------------------------------------------

HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


class _Damaged(Exception):
    """A part of the file that is missing, unreadable or of the wrong kind."""

    def __init__(self, part: str, message: str):
        super().__init__(message)
        self.part = part
        self.message = message


class _Checked:
    """Reads the parts of an open result file, checking kind, shape and values."""

    def __init__(self, f: h5py.File):
        self.f = f

    def node(self, path: str, kind=None):
        try:
            obj = self.f[path]
        except checksum.READ_ERRORS:
            raise _Damaged(path, "missing or unreadable") from None
        if kind is not None and not isinstance(obj, kind):
            what = "a dataset" if kind is h5py.Dataset else "a group"
            raise _Damaged(path, f"is not {what}")
        return obj

    def has(self, path: str) -> bool:
        try:
            return path in self.f
        except checksum.READ_ERRORS:
            raise _Damaged(path, "unreadable") from None

    def data(self, path: str):
        ds = self.node(path, h5py.Dataset)
        try:
            return ds[()]
        except checksum.READ_ERRORS as exc:
            raise _Damaged(path, f"unreadable data ({exc})") from None

    def array(self, path: str, kinds: str, ndim: int | None = None, *, finite: bool = True):
        value = np.asarray(self.data(path))
        if value.dtype.names is not None or value.dtype.kind not in kinds:
            raise _Damaged(path, f"holds {value.dtype} values, expected "
                                 + {"f": "real numbers", "c": "complex numbers", "i": "integers",
                                    "b": "booleans"}.get(kinds[-1], "numbers"))
        if ndim is not None and value.ndim != ndim:
            raise _Damaged(path, f"has {value.ndim} dimensions, expected {ndim}")
        if finite and value.dtype.kind in "fc" and not np.all(np.isfinite(value)):
            raise _Damaged(path, "holds values that are not finite")
        return value

    def strings(self, path: str, ndim: int = 1) -> list[str]:
        value = np.asarray(self.data(path))
        if value.dtype.kind not in "OSU" or value.ndim != ndim:
            raise _Damaged(path, "is not a list of text")
        try:
            return [v.decode("utf-8") if isinstance(v, bytes) else str(v) for v in value.reshape(-1)]
        except UnicodeDecodeError:
            raise _Damaged(path, "holds text that is not UTF-8") from None

    def attr(self, path: str, key: str, kind, default=_Damaged):
        obj = self.f if path == "/" else self.node(path)
        where = f"{path.rstrip('/')}/@{key}" if path != "/" else f"/@{key}"
        try:
            present = key in obj.attrs
            raw = obj.attrs[key] if present else None
        except checksum.READ_ERRORS as exc:
            raise _Damaged(where, f"unreadable ({exc})") from None
        if not present:
            if default is _Damaged:
                raise _Damaged(where, "missing")
            return default
        value = raw.decode("utf-8", "replace") if isinstance(raw, bytes) else raw
        if isinstance(value, np.generic):
            value = value.item()
        if kind in (str, bool, int, float) and isinstance(value, np.ndarray):
            raise _Damaged(where, f"is an array of {value.size} values, expected one")
        if kind is str:
            if not isinstance(value, str):
                raise _Damaged(where, f"is {value!r}, expected text")
        elif kind is bool:
            if not isinstance(value, (bool, np.bool_)) and value not in (0, 1):
                raise _Damaged(where, f"is {value!r}, expected true or false")
            value = bool(value)
        elif kind is int:
            if isinstance(value, bool) or not isinstance(value, int):
                raise _Damaged(where, f"is {value!r}, expected a whole number")
        elif kind is float:
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise _Damaged(where, f"is {value!r}, expected a number")
            value = float(value)
        return value


def _open(path: Path) -> h5py.File:
    """Open a result file for reading; InputError for what is not one."""
    shown = str(path)
    if not path.exists():
        raise InputError("file not found", file=shown)
    if path.is_dir():
        raise InputError("is a folder, not a result file (give the .h5 file itself)", file=shown)
    if not path.is_file():
        raise InputError("is not a regular file", file=shown)
    try:
        with open(path, "rb") as fh:
            start = fh.read(len(HDF5_SIGNATURE))
    except OSError as exc:
        raise InputError(f"cannot read file: {exc.strerror}", file=shown) from None
    if start != HDF5_SIGNATURE:
        raise InputError("not an HDF5 file (it does not start with the HDF5 signature)", file=shown)
    with open(path, "rb") as fh, mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ) as data:
        damaged_at = checksum.heap_damage(data)
    if damaged_at is not None:
        raise InputError(f"a damaged HDF5 file: its store of texts (global heap) is damaged at "
                         f"byte {damaged_at}", file=shown)
    try:
        return h5py.File(path, "r")
    except (OSError, ValueError, RuntimeError) as exc:
        truncated = "truncated" in str(exc).lower() or "eof" in str(exc).lower()
        raise InputError(("a damaged HDF5 file: it is truncated (shorter than its header says; an "
                          "interrupted copy?)" if truncated else "a damaged HDF5 file: it cannot be "
                          f"opened ({exc})"), file=shown) from None


def describe(path) -> str:
    """One line about a result file that `read` accepted: its format and its checksums."""
    try:
        with h5py.File(path, "r") as f:
            version = _attr(f, "format_version")
            carries = checksum.TABLE in f
    except (OSError, ValueError):
        return ""
    if carries:
        return f"file format {version}, checksums verified"
    return f"file format {version}, written without checksums: not verified"


def read(path, *, verify: bool = True) -> dict:
    """Read a result file written by `write`: the keyword arguments of `Result`.

    Every part is checked (present, of the right kind and shape, finite); a
    file of format 2 or later must match its checksums (`gatescope.checksum`;
    ``verify=False`` skips that check). Files of format 1 are read as well.

    Raises
    ------
    InputError
        If the file is missing, not HDF5, damaged, altered or not a gatescope
        result; its ``key`` names the part that is wrong (an HDF5 path, with
        ``@name`` for an attribute).
    """
    path = Path(path)
    f = _open(path)
    try:
        with f:
            return _read(_Checked(f), verify)
    except _Damaged as exc:
        raise InputError(f"damaged or not a gatescope result: {exc.message}", file=str(path),
                         key=exc.part) from None
    except checksum.READ_ERRORS as exc:            # the file's structure itself is damaged
        raise InputError(f"damaged HDF5 structure ({type(exc).__name__}: {exc})",
                         file=str(path)) from None


def _read(c: _Checked, verify: bool) -> dict:
    f = c.f
    fmt = c.attr("/", "format", str)
    if fmt != FORMAT:
        raise _Damaged("/@format", f"is {fmt!r}: not a {FORMAT} file")
    version = c.attr("/", "format_version", int)
    if version not in READABLE_VERSIONS:
        raise _Damaged("/@format_version",
                       f"is {version}; this gatescope reads format versions "
                       f"{', '.join(map(str, READABLE_VERSIONS))}" +
                       (" (the file is newer: update gatescope)" if version > FORMAT_VERSION else ""))
    if version >= 2 and verify:
        problems = checksum.verify(f)
        if problems:
            listed = "; ".join(f"{p} {what}" for p, what in problems[:5])
            more = f" and {len(problems) - 5} more" if len(problems) > 5 else ""
            raise _Damaged(problems[0][0], f"the content does not match its checksums "
                                           f"({listed}{more}): the file was damaged or altered")

    kind = c.attr("/", "kind", str, "process")        # files without it hold a process
    if kind not in ("process", "state"):
        raise _Damaged("/@kind", f"is {kind!r}, expected process or state")
    state = kind == "state"

    # -- the estimate and its dimension, which every other part must agree with
    if state:
        rho = c.array("/estimate/rho", "fc", 2)
        d = rho.shape[0]
        if rho.shape != (d, d) or d < 2 or d & (d - 1) or d > 2 ** 6:
            raise _Damaged("/estimate/rho", f"has shape {rho.shape}: not the density matrix of "
                                            "1 to 6 qubits (d × d, d a power of two)")
        choi = chi = ptm = None
    else:
        rho = None
        choi = c.array("/estimate/choi", "fc", 2)
        d2 = choi.shape[0]
        d = int(round(np.sqrt(d2)))
        if choi.shape != (d2, d2) or d * d != d2 or d < 2 or d & (d - 1) or d > 2 ** 6:
            raise _Damaged("/estimate/choi", f"has shape {choi.shape}: not the Choi matrix of 1 "
                                             "to 6 qubits (d² × d², d a power of two)")
        chi = c.array("/estimate/chi", "fc", 2)
        ptm = c.array("/estimate/ptm", "f", 2)
        for name, m in (("chi", chi), ("ptm", ptm)):
            if m.shape != (d2, d2):
                raise _Damaged(f"/estimate/{name}", f"has shape {m.shape}, the Choi matrix "
                                                    f"{choi.shape}")
    intensities = c.array("/estimate/intensities", "f", 1)
    if intensities.size == 0 or np.any(intensities < 0):
        raise _Damaged("/estimate/intensities", "must hold one non-negative intensity per group")
    method = c.attr("/estimate", "method", str)
    if method not in METHODS + ("truth",):
        raise _Damaged("/estimate/@method", f"is {method!r}, not a method of this gatescope "
                                            f"({', '.join(METHODS)}, or truth)")
    iterations = c.attr("/estimate", "iterations", int)
    if iterations < 0:
        raise _Damaged("/estimate/@iterations", f"is {iterations}, expected a count")
    hashes = {}
    for where, part in (("toml", "/input/experiment_toml"), ("csv", "/input/counts")):
        value = c.attr(part, "sha256", str)
        if not re.fullmatch(r"[0-9a-f]{64}", value):
            raise _Damaged(f"{part}/@sha256", f"is {value!r}, not a SHA-256 in hexadecimal")
        hashes[where] = value
    # -- the input
    counts = {}
    group = c.node("/input/counts", h5py.Group)
    for name in list(group):
        where = f"/input/counts/{name}"
        ds = c.node(where, h5py.Dataset)
        if h5py.check_string_dtype(ds.dtype) is not None:
            counts[name] = np.array(c.strings(where), dtype=object)
        else:
            counts[name] = c.array(where, "iuf", 1)
    for name in ("meas", "counts", "meas_index") + (() if state else ("prep", "prep_index")):
        if name not in counts:
            raise _Damaged(f"/input/counts/{name}", "missing")
    n_rows = len(counts["counts"])
    for name, values in counts.items():
        if len(values) != n_rows:
            raise _Damaged(f"/input/counts/{name}", f"has {len(values)} rows, /input/counts/counts "
                                                    f"{n_rows}")
    if n_rows == 0:
        raise _Damaged("/input/counts/counts", "has no rows")
    for name in ("counts", "prep_index", "meas_index", "line"):
        if name in counts and (counts[name].dtype.kind not in "iu" or np.any(counts[name] < 0)):
            raise _Damaged(f"/input/counts/{name}", "must hold non-negative whole numbers")
    model = {}
    target = target_name = None
    if state:
        n = d.bit_length() - 1
        effects = c.array("/model/single_meas_effects", "fc", 3)
        parts = c.array("/model/meas_parts", "iu", 2)
        if effects.shape[1:] != (2, 2):
            raise _Damaged("/model/single_meas_effects", f"holds {effects.shape[1]}×"
                                                         f"{effects.shape[2]} matrices, not 2×2")
        if parts.shape[1] != n or np.any(parts < 0) or np.any(parts >= effects.shape[0]):
            raise _Damaged("/model/meas_parts", f"is not a table of {n} indices into the "
                                                f"{effects.shape[0]} single-qubit effects")
        if np.any(counts["meas_index"] >= parts.shape[0]):
            raise _Damaged("/input/counts/meas_index", f"points past the {parts.shape[0]} "
                                                       "settings of /model/meas_parts")
        model = dict(single_meas_effects=effects, meas_parts=parts, prep_states=None,
                     meas_effects=None)
        if c.has("/model/target_state"):
            target = c.array("/model/target_state", "fc")
            if target.shape not in ((d,), (d, d)):
                raise _Damaged("/model/target_state", f"has shape {target.shape}, expected a "
                                                      f"state of dimension {d}")
            target_name = c.attr("/model/target_state", "name", str, "")
    else:
        prep_states = c.array("/model/prep_states", "fc", 3)
        meas_effects = c.array("/model/meas_effects", "fc", 3)
        for name, m, index in (("prep_states", prep_states, "prep_index"),
                               ("meas_effects", meas_effects, "meas_index")):
            if m.shape[1:] != (d, d):
                raise _Damaged(f"/model/{name}", f"holds {m.shape[1]}×{m.shape[2]} matrices; the "
                                                 f"estimate needs {d}×{d}")
            if np.any(counts[index] >= m.shape[0]):
                raise _Damaged(f"/input/counts/{index}", f"points past the {m.shape[0]} entries of "
                                                         f"/model/{name}")
        model = dict(prep_states=prep_states, meas_effects=meas_effects)
        if c.has("/model/target_unitary"):
            target = c.array("/model/target_unitary", "fc", 2)
            if target.shape != (d, d):
                raise _Damaged("/model/target_unitary", f"has shape {target.shape}, expected "
                                                        f"{d}×{d}")
            target_name = c.attr("/model/target_unitary", "name", str, "")

    # -- figures
    figures = {}
    order = {name: k for k, name in enumerate(STATE_FIGURE_ORDER if state else FIGURE_NAMES)}
    names = list(c.node("/figures", h5py.Group))
    for name in sorted(names, key=lambda n: (order.get(n, len(order)), n)):
        where = f"/figures/{name}"
        value = c.array(where, "iuf", 0)
        ci = level = None
        if c.attr(where, "ci_low", float, None) is not None:
            ci = (c.attr(where, "ci_low", float), c.attr(where, "ci_high", float))
            level = c.attr(where, "ci_level", float)
        figures[name] = Figure(float(value), ci, level,
                               determined=c.attr(where, "determined", bool, True),
                               interval_method=c.attr(where, "ci_method", str, None),
                               lower_bound=c.attr(where, "lower_bound", float, None),
                               touches_boundary=c.attr(where, "touches_boundary", bool, None),
                               lower_bound_method=c.attr(where, "lower_bound_method", str, None))
        if figures[name].interval_method not in (None,) + FIT_INTERVALS:
            raise _Damaged(f"{where}/@ci_method",
                           f"is {figures[name].interval_method!r}, expected one of "
                           + ", ".join(FIT_INTERVALS))
        if figures[name].lower_bound_method not in (None,) + LOWER_BOUND_METHODS:
            raise _Damaged(f"{where}/@lower_bound_method",
                           f"is {figures[name].lower_bound_method!r}, expected one of "
                           + ", ".join(LOWER_BOUND_METHODS))
        if figures[name].lower_bound is not None and level is None:
            figures[name].level = c.attr(where, "lower_bound_level", float)

    required = (("purity",) if state else ("purity", "trace", "min_eigenvalue")) + (
        (("state_fidelity",) if state else ("process_fidelity", "average_gate_fidelity"))
        if target is not None else ())
    for name in required:
        if name not in figures:
            raise _Damaged(f"/figures/{name}", "missing")

    # -- bootstrap
    boot = None
    if c.has("/bootstrap"):
        b = "/bootstrap"
        values = c.array(f"{b}/figures", "f", 2, finite=False)
        raw_names = c.node(f"{b}/figures").attrs.get("names")
        if raw_names is None:
            raise _Damaged(f"{b}/figures/@names", "missing")
        bnames = tuple(x.decode("utf-8") if isinstance(x, bytes) else str(x)
                       for x in np.asarray(raw_names).reshape(-1))
        if values.shape[1] != len(bnames):
            raise _Damaged(f"{b}/figures", f"has {values.shape[1]} columns for {len(bnames)} names")
        optional = {}
        for name, kinds in (("converged", "b"), ("choi_std", "fc"), ("chi_std", "fc"),
                            ("ptm_std", "f"), ("rho_std", "fc"), ("deviances", "f")):
            optional[name] = (c.array(f"{b}/{name}", kinds, finite=False)
                              if c.has(f"{b}/{name}") else None)
        boot = Bootstrap(values, bnames, c.attr(b, "kind", str), c.attr(b, "seed", int),
                         c.attr(b, "samples", int), c.attr(b, "failures", int, 0),
                         c.attr(b, "interval", str, "percentile"), errors=c.attr(b, "errors", int, 0),
                         method=c.attr(b, "method", str, ""), workers=c.attr(b, "workers", int, 1),
                         seconds=c.attr(b, "seconds", float, 0.0), **optional)

    # -- goodness of fit
    diagnostics = None
    if c.has("/diagnostics"):
        g = "/diagnostics"
        arrays = [c.array(f"{g}/{name}", "f", 1, finite=False)
                  for name in ("expected_counts", "pearson_residuals", "deviance_residuals")]
        for name, a in zip(("expected_counts", "pearson_residuals", "deviance_residuals"), arrays):
            if len(a) != n_rows:
                raise _Damaged(f"{g}/{name}", f"has {len(a)} rows, the counts {n_rows}")
        rows = (c.array(f"{g}/outlier_rows", "iu", 1) if c.has(f"{g}/outlier_rows")
                else np.zeros(0, dtype=np.int64))
        if np.any(rows < 0) or np.any(rows >= n_rows):
            raise _Damaged(f"{g}/outlier_rows", f"points outside the {n_rows} rows")
        lines = c.array(f"{g}/outlier_lines", "iu", 1) if c.has(f"{g}/outlier_lines") else None
        if lines is not None and len(lines) != len(rows):
            raise _Damaged(f"{g}/outlier_lines", "does not match /diagnostics/outlier_rows")
        diagnostics = Diagnostics(*arrays, c.attr(g, "chi2", float), c.attr(g, "deviance", float),
                                  c.attr(g, "dof", int), c.attr(g, "chi2_p_value", float, np.nan),
                                  c.attr(g, "deviance_p_value", float, np.nan),
                                  rows.astype(np.int64),
                                  None if lines is None else lines.astype(np.int64),
                                  c.attr(g, "bootstrap_p_value", float, np.nan),
                                  c.attr(g, "bootstrap_resamples", int, 0))

    # -- the rest
    # files written before the origin was recorded: a truth is marked by its method
    origin = c.attr("/", "origin", str, "truth" if method == "truth" else "fit")
    details = {}
    if c.has("/figures_extra"):
        extra = c.node("/figures_extra", h5py.Group)
        details = {name: c.data(f"/figures_extra/{name}") for name in extra}
        for key in extra.attrs:
            details[key] = c.attr("/figures_extra", key, object)
    prov = {key: c.attr("/provenance", key, object) for key in c.node("/provenance", h5py.Group).attrs}
    if prov.get("seed") == "":                     # format 1 wrote an empty seed for "none"
        del prov["seed"]
    warnings = tuple(c.strings("/warnings")) if c.has("/warnings") else ()
    toml_ds = "/input/experiment_toml"
    experiment_toml = c.data(toml_ds)
    if isinstance(experiment_toml, bytes):
        experiment_toml = experiment_toml.decode("utf-8", "replace")
    if not isinstance(experiment_toml, str):
        raise _Damaged(toml_ds, "is not text")
    return model | dict(
        choi=choi, chi=chi, ptm=ptm, rho=rho, figures=figures, method=method,
        converged=c.attr("/estimate", "converged", bool),
        iterations=iterations,
        log_likelihood=c.attr("/estimate", "log_likelihood", float),
        stop_reason=c.attr("/estimate", "stop_reason", str),
        seconds=c.attr("/estimate", "seconds", float), intensities=intensities,
        diagnostics=diagnostics, provenance=prov, experiment_toml=experiment_toml,
        toml_sha256=hashes["toml"], csv_sha256=hashes["csv"],
        counts_columns=counts, target=target, target_name=target_name, bootstrap=boot,
        created_utc=c.attr("/", "created_utc", str), figure_details=details, origin=origin,
        warnings=warnings, status=c.attr("/estimate", "status", str, None), kind=kind,
        conditions=_checked_conditions(c),
    )


def _checked_conditions(c: _Checked) -> dict:
    """/conditions, each a whole number, a finite number or a text (empty without it)."""
    if not c.has("/conditions"):
        return {}
    out = {}
    for name in c.node("/conditions", h5py.Group).attrs:
        value = c.attr("/conditions", name, object)
        if isinstance(value, bool) or not isinstance(value, (int, float, str)) or \
                (isinstance(value, float) and not np.isfinite(value)):
            raise _Damaged(f"/conditions/@{name}", f"is {value!r}: a condition is a number or a text")
        out[name] = value
    return out
