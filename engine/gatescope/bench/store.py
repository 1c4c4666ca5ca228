"""What a bench keeps in its folder (docs/file-formats.md, "Bench folder").

* ``settings.json`` — the settings every repetition depends on (seed, design,
  random-channel size, bootstrap size); a later run in the same folder must
  use the same ones.
* ``runs.jsonl`` — the journal: one JSON object per finished repetition,
  appended and flushed as each one comes back, so that an interrupted bench
  loses at most the repetitions that were running. A last line cut short by
  a crash is dropped (and that repetition is run again, with the same seed
  and so the same numbers).
* ``bench.h5`` — every repetition's numbers, the design, the truth, the
  bounds, the seeds, the table and the provenance, rebuilt from the journal
  and written atomically at the end of every run (also an interrupted one).
* ``bench.csv`` — the aggregated table (`gatescope.bench.table`).

Floats go through JSON as ``repr`` (exact round trip); NaN is written as
``NaN``, which Python's json module reads back.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import h5py
import numpy as np

from ..fileio import atomic_path, atomic_write_text

SETTINGS = "settings.json"
JOURNAL = "runs.jsonl"
H5 = "bench.h5"
CSV = "bench.csv"
FORMAT = "gatescope.bench"
FORMAT_VERSION = 1

_STR = h5py.string_dtype("utf-8")


def read_settings(folder) -> dict | None:
    """The settings of the bench in ``folder``, or None for a new folder."""
    path = Path(folder) / SETTINGS
    if not path.exists():
        return None
    return json.loads(path.read_text(encoding="utf-8"))


def write_settings(folder, settings: dict) -> None:
    atomic_write_text(Path(folder) / SETTINGS, json.dumps(settings, indent=1) + "\n")


class Journal:
    """The append-only record of finished repetitions (``runs.jsonl``)."""

    def __init__(self, folder):
        self.path = Path(folder) / JOURNAL
        self._fh = None

    def read(self) -> list[dict]:
        """Every complete record, in the order written (a cut-short last line is dropped)."""
        if not self.path.exists():
            return []
        records = []
        with open(self.path, encoding="utf-8") as fh:
            for line in fh:
                if not line.endswith("\n"):
                    break                      # cut short by a crash
                records.append(json.loads(line))
        return records

    def _complete_length(self) -> int:
        """Bytes up to the end of the last complete line."""
        with open(self.path, "rb") as fh:
            data = fh.read()
        return data.rfind(b"\n") + 1

    def __enter__(self):
        if self.path.exists():
            keep = self._complete_length()
            if keep != self.path.stat().st_size:
                os.truncate(self.path, keep)
        self._fh = open(self.path, "a", encoding="utf-8")
        return self

    def append(self, record: dict) -> None:
        """Write one record as one line and flush it to the operating system."""
        self._fh.write(json.dumps(record, allow_nan=True, separators=(",", ":")) + "\n")
        self._fh.flush()

    def __exit__(self, *exc):
        self._fh.close()
        self._fh = None
        return False


def _put(group, name: str, data):
    """A dataset; text as fixed-length UTF-8 (which compresses, unlike a variable-length
    heap), gzip for large arrays, as in the result file."""
    data = np.asarray(data)
    if data.dtype.kind in "OUS":
        encoded = [str(v).encode("utf-8") for v in data.reshape(-1)]
        width = max((len(e) for e in encoded), default=1) or 1
        data = np.array(encoded, dtype=h5py.string_dtype("utf-8", width)).reshape(data.shape)
    if data.size >= 4096 and data.ndim >= 1:
        return group.create_dataset(name, data=data, compression="gzip", compression_opts=4,
                                    shuffle=True)
    return group.create_dataset(name, data=data)


def _attr(value):
    if value is None:
        return ""
    if isinstance(value, (list, tuple)):
        if all(isinstance(v, str) for v in value):
            return np.array(list(value), dtype=_STR)
        return np.asarray(value)
    return value


#: What a bench of each kind stores per case: the group, its attributes and datasets.
CASE_LAYOUT = {
    "process": ("channels", ("spec", "qubits", "target", "trace", "full_rank"),
                ("choi", "figure_names", "figure_values", "prep", "meas")),
    "state": ("states", ("spec", "qubits", "target", "full_rank"),
              ("rho", "figure_names", "figure_values", "meas")),
}


def write_bench(path, *, settings: dict, provenance: dict, channels: list[dict],
                bounds: list[dict], runs: dict, figure_names: list[str], table: list[dict],
                columns: list[str], kind: str = "process") -> Path:
    """Write ``bench.h5`` atomically (layout in docs/file-formats.md).

    ``channels``: one dict per channel (``spec``, ``qubits``, ``target``,
    ``trace``, ``full_rank``, ``choi``, ``figure_names``, ``figure_values``,
    ``prep``, ``meas``); for ``kind="state"`` one dict per state (``spec``,
    ``qubits``, ``target``, ``full_rank``, ``rho``, ``figure_names``,
    ``figure_values``, ``meas``), written to ``/states``. ``bounds``: dicts
    ``channel`` (``state``), ``shots``, ``hs_crb``; ``runs``: column name →
    per-repetition values (equal lengths); ``table``: the rows of bench.csv
    with ``columns``.
    """
    path = Path(path)
    group_name, attr_keys, data_keys = CASE_LAYOUT[kind]
    index = group_name[:-1]
    with atomic_path(path) as tmp, h5py.File(tmp, "w") as f:
        f.attrs["format"] = FORMAT
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["kind"] = kind
        s = f.create_group("settings")
        for key, value in settings.items():
            s.attrs[key] = _attr(value)
        p = f.create_group("provenance")
        for key, value in provenance.items():
            p.attrs[key] = _attr(value)
        ch = f.create_group(group_name)
        for k, info in enumerate(channels):
            g = ch.create_group(str(k))
            for key in attr_keys:
                g.attrs[key] = _attr(info[key])
            for key in data_keys:
                value = info[key]
                if key in ("choi", "rho"):
                    value = np.asarray(value, dtype=np.complex128)
                elif key == "figure_values":
                    value = np.asarray(value, dtype=float)
                else:
                    value = np.array(value, dtype=object)
                _put(g, key, value)
        b = f.create_group("bounds")
        _put(b, index, np.array([x[index] for x in bounds], dtype=np.int64))
        _put(b, "shots", np.array([x["shots"] for x in bounds], dtype=float))
        _put(b, "hs_crb", np.array([np.nan if x["hs_crb"] is None else x["hs_crb"]
                                    for x in bounds], dtype=float))
        r = f.create_group("runs")
        r.attrs["figure_names"] = _attr(list(figure_names))
        for key, values in runs.items():
            _put(r, key, values)
        t = f.create_group("table")
        t.attrs["columns"] = _attr(list(columns))
        for col in columns:
            values = [row.get(col) for row in table]
            if all(isinstance(v, str) for v in values):
                _put(t, col, np.array(values, dtype=object))
            else:
                _put(t, col, np.array([np.nan if v is None else v for v in values], dtype=float))
    return path


def read_bench(path) -> dict:
    """The contents of a ``bench.h5``: ``kind`` (``process`` or ``state``), ``settings``,
    ``provenance`` (dicts of attributes), ``channels`` (list of dicts; ``states`` for a
    state bench), ``bounds`` and ``runs`` (name → array), ``table`` (column → array, in
    ``columns`` order)."""
    def attrs(obj):
        out = {}
        for key, value in obj.attrs.items():
            if isinstance(value, bytes):
                value = value.decode()
            elif isinstance(value, np.ndarray) and value.dtype.kind == "O":
                value = [v.decode() if isinstance(v, bytes) else v for v in value]
            out[key] = value
        return out

    def data(ds):
        if h5py.check_string_dtype(ds.dtype) is not None:
            values = [v.decode() if isinstance(v, bytes) else v for v in ds[...].reshape(-1)]
            return np.array(values, dtype=object).reshape(ds.shape)
        return ds[...]

    with h5py.File(path, "r") as f:
        if f.attrs.get("format") != FORMAT:
            raise ValueError(f"{path} is not a gatescope bench file")
        kind = f.attrs.get("kind", "process")
        kind = kind.decode() if isinstance(kind, bytes) else str(kind)
        group_name = CASE_LAYOUT[kind][0]
        channels = []
        for k in range(len(f[group_name])):
            g = f[group_name][str(k)]
            info = attrs(g)
            info.update({name: data(g[name]) for name in g})
            channels.append(info)
        return {"kind": kind, "settings": attrs(f["settings"]),
                "provenance": attrs(f["provenance"]), group_name: channels,
                "bounds": {name: data(ds) for name, ds in f["bounds"].items()},
                "runs": {name: data(ds) for name, ds in f["runs"].items()},
                "figure_names": attrs(f["runs"]).get("figure_names", []),
                "columns": attrs(f["table"])["columns"],
                "table": {name: data(ds) for name, ds in f["table"].items()}}


__all__ = ["Journal", "read_settings", "write_settings", "write_bench", "read_bench",
           "SETTINGS", "JOURNAL", "H5", "CSV"]
