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

from pathlib import Path

import h5py
import numpy as np

from .bootstrap import Bootstrap
from .diagnostics import Diagnostics
from .errors import InputError
from .fileio import atomic_path
from .intervals import Figure
from .merit import FIGURE_NAMES, STATE_FIGURE_ORDER

FORMAT = "gatescope.result"
FORMAT_VERSION = 1


def write(path, r) -> Path:
    """Write result ``r`` to ``path`` atomically; returns the path."""
    path = Path(path)
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as f:
            _write(f, r)
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
        _put(counts, name, values)

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
        est.create_dataset("rho", data=np.asarray(r.rho, dtype=np.complex128))
    else:
        est.create_dataset("choi", data=np.asarray(r.choi, dtype=np.complex128))
        est.create_dataset("chi", data=np.asarray(r.chi, dtype=np.complex128))
        est.create_dataset("ptm", data=np.asarray(r.ptm, dtype=np.float64))
    est.create_dataset("intensities", data=np.asarray(r.intensities, dtype=np.float64))
    est.attrs["method"] = r.method
    est.attrs["converged"] = bool(r.converged)
    est.attrs["iterations"] = int(r.iterations)
    est.attrs["log_likelihood"] = float(r.log_likelihood)
    est.attrs["stop_reason"] = r.stop_reason
    est.attrs["seconds"] = float(r.seconds)

    figs = f.create_group("figures")
    for name, fig in r.figures.items():
        ds = figs.create_dataset(name, data=np.float64(fig.value))
        if fig.ci is not None:
            ds.attrs["ci_low"] = float(fig.ci[0])
            ds.attrs["ci_high"] = float(fig.ci[1])
            ds.attrs["ci_level"] = float(fig.level)
    extra = f.create_group("figures_extra")
    for name, value in r.figure_details.items():
        if isinstance(value, np.ndarray):
            extra.create_dataset(name, data=value)
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
                            ("ptm_std", np.float64), ("rho_std", np.complex128)):
            value = getattr(r.bootstrap, name)
            if value is not None:
                b.create_dataset(name, data=np.asarray(value, dtype=dtype))

    prov = f.create_group("provenance")
    for key, value in r.provenance.items():
        prov.attrs[key] = "" if value is None else value

    write_conditions(f, r.conditions)

    d = r.diagnostics
    if d is None:                      # the true channel of a simulation has no fit to test
        return
    dg = f.create_group("diagnostics")
    _put(dg, "expected_counts", np.asarray(d.expected_counts, dtype=np.float64))
    _put(dg, "pearson_residuals", np.asarray(d.pearson_residuals, dtype=np.float64))
    _put(dg, "deviance_residuals", np.asarray(d.deviance_residuals, dtype=np.float64))
    dg.attrs["chi2"] = float(d.chi2)
    dg.attrs["deviance"] = float(d.deviance)
    dg.attrs["dof"] = int(d.dof)
    dg.attrs["chi2_p_value"] = float(d.chi2_p_value)
    dg.attrs["deviance_p_value"] = float(d.deviance_p_value)
    dg.create_dataset("outlier_rows", data=np.asarray(d.outlier_rows, dtype=np.int64))


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


def _read_state_estimate(f) -> dict:
    """The fields of `Result` that differ for a state: its estimate, and its model as
    `_write_state_model` stored it."""
    model = f["model"]
    out = dict(single_meas_effects=model["single_meas_effects"][()],
               meas_parts=model["meas_parts"][()], prep_states=None, meas_effects=None,
               target=None, target_name=None, rho=f["estimate/rho"][()], choi=None, chi=None,
               ptm=None)
    if "target_state" in model:
        out["target"] = model["target_state"][()]
        out["target_name"] = _attr(model["target_state"], "name")
    return out


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


def read(path) -> dict:
    """Read a result file written by `write`: the keyword arguments of `Result`.

    Raises
    ------
    InputError
        If the file is missing, not HDF5, or not a gatescope result.
    """
    path = Path(path)
    if not path.exists():
        raise InputError("file not found", file=str(path))
    try:
        f = h5py.File(path, "r")
    except OSError:
        raise InputError("not an HDF5 file", file=str(path)) from None
    with f:
        if _attr(f, "format") != FORMAT:
            raise InputError(f"not a {FORMAT} file (attribute 'format' is {_attr(f, 'format')!r})",
                             file=str(path), key="/format")
        version = _attr(f, "format_version")
        if version != FORMAT_VERSION:
            raise InputError(f"format_version {version} is not supported (this reader: {FORMAT_VERSION})",
                             file=str(path), key="/format_version")
        kind = _attr(f, "kind", "process")          # files without it hold a process
        counts = {}
        for name, ds in f["input/counts"].items():
            if h5py.check_string_dtype(ds.dtype) is not None:
                counts[name] = np.array([s.decode("utf-8") if isinstance(s, bytes) else s
                                         for s in ds[()]], dtype=object)
            else:
                counts[name] = ds[()]
        figures = {}
        order = {name: k for k, name in enumerate(FIGURE_NAMES if kind == "process"
                                                  else STATE_FIGURE_ORDER)}
        for name in sorted(f["figures"], key=lambda n: (order.get(n, len(order)), n)):
            ds = f["figures"][name]
            ci = None
            level = None
            if "ci_low" in ds.attrs:
                ci = (float(ds.attrs["ci_low"]), float(ds.attrs["ci_high"]))
                level = float(ds.attrs["ci_level"])
            figures[name] = Figure(float(ds[()]), ci, level)
        est = f["estimate"]
        boot = None
        if "bootstrap" in f:
            b = f["bootstrap"]
            names = tuple(s.decode("utf-8") if isinstance(s, bytes) else str(s)
                          for s in b["figures"].attrs["names"])
            optional = {name: (b[name][()] if name in b else None)
                        for name in ("converged", "choi_std", "chi_std", "ptm_std", "rho_std")}
            boot = Bootstrap(b["figures"][()], names, _attr(b, "kind"), int(_attr(b, "seed")),
                             int(_attr(b, "samples")), int(_attr(b, "failures", 0)),
                             _attr(b, "interval", "percentile"), errors=int(_attr(b, "errors", 0)),
                             method=_attr(b, "method", ""), workers=int(_attr(b, "workers", 1)),
                             seconds=float(_attr(b, "seconds", 0.0)), **optional)
        target = target_name = None
        if "target_unitary" in f["model"]:
            target = f["model/target_unitary"][()]
            target_name = _attr(f["model/target_unitary"], "name")
        diagnostics = None
        if "diagnostics" in f:
            dg = f["diagnostics"]
            diagnostics = Diagnostics(dg["expected_counts"][()], dg["pearson_residuals"][()],
                                      dg["deviance_residuals"][()], float(_attr(dg, "chi2")),
                                      float(_attr(dg, "deviance")), int(_attr(dg, "dof")),
                                      float(_attr(dg, "chi2_p_value", np.nan)),
                                      float(_attr(dg, "deviance_p_value", np.nan)),
                                      dg["outlier_rows"][()] if "outlier_rows" in dg
                                      else np.zeros(0, dtype=np.int64))
        # files written before the origin was recorded: a truth is marked by its method
        origin = _attr(f, "origin", "truth" if _attr(est, "method") == "truth" else "fit")
        details = {}
        if "figures_extra" in f:
            extra = f["figures_extra"]
            details = {name: extra[name][()] for name in extra}
            details.update({key: _attr(extra, key) for key in extra.attrs})
        prov = {k: _attr(f["provenance"], k) for k in f["provenance"].attrs}
        estimate = (_read_state_estimate(f) if kind == "state" else
                    dict(choi=est["choi"][()], chi=est["chi"][()], ptm=est["ptm"][()],
                         prep_states=f["model/prep_states"][()],
                         meas_effects=f["model/meas_effects"][()], target=target,
                         target_name=target_name))
        return estimate | dict(
            figures=figures,
            method=_attr(est, "method"), converged=bool(_attr(est, "converged")),
            iterations=int(_attr(est, "iterations")), log_likelihood=float(_attr(est, "log_likelihood")),
            stop_reason=_attr(est, "stop_reason"), seconds=float(_attr(est, "seconds")),
            intensities=est["intensities"][()], diagnostics=diagnostics, provenance=prov,
            experiment_toml=_text(f["input/experiment_toml"]),
            toml_sha256=_attr(f["input/experiment_toml"], "sha256"),
            csv_sha256=_attr(f["input/counts"], "sha256"), counts_columns=counts,
            bootstrap=boot, created_utc=_attr(f, "created_utc"), figure_details=details,
            origin=origin, kind=kind, conditions=read_conditions(f),
        )
