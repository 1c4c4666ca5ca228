"""`Result`: everything a fit produced, in memory, and how it is assembled.

`build_result` puts together the input (the experiment as read), the
estimate, its figures of merit, the goodness of fit and the provenance;
`load_result` reads a result file back (`gatescope.result_file` holds its
layout).
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import result_file
from .bootstrap import Bootstrap
from .channels import choi_to_chi, choi_to_ptm, dim_of_choi
from .diagnostics import Diagnostics
from .intervals import Figure, interval, parameter_range
from .options import fraction
from .reader import Experiment


@dataclass
class Result:
    """Everything a fit produced; the in-memory form of the result file.

    Attributes
    ----------
    choi, chi, ptm : arrays in the conventions of the README ("Conventions");
        None for a state
    rho : the density matrix of a state (``kind == "state"``), else None
    figures : dict name → Figure
    method, converged, iterations, log_likelihood, stop_reason, seconds :
        the estimator's report (`gatescope.estimators.Fit`)
    intensities : fitted λ of every normalisation group
    diagnostics : Diagnostics, or None for the true channel of a simulation
    provenance : dict of str/number (`gatescope.provenance`)
    experiment_toml, toml_sha256, csv_sha256 : the input files
    counts_columns : dict column → array, the CSV as read (plus
        ``prep_index`` and ``meas_index``)
    prep_states, meas_effects : the model's density matrices and effects (None for
        a state)
    single_meas_effects, meas_parts : a state's analyser effects in product form:
        setting m measures ⊗_k single_meas_effects[meas_parts[m, k]] (None for
        a process)
    target : the target unitary or None; target_name its name. For a state the
        target state (a normalised ket or a density matrix) or None
    bootstrap : Bootstrap or None
    figure_details : dict of what belongs to the figures but is not one
        number (`gatescope.merit.compute_figures`): arrays such as
        ``nearest_unitary``, ``local_phases_before``/``_after``, and strings
        or numbers such as ``concurrence_input``; stored in /figures_extra
    origin : "fit" for an estimate from data, "truth" for the true channel
        of a simulation (`gatescope.synth.simulate`), which has no fit to
        test and so no diagnostics
    conditions : the experiment's ``[conditions]`` (name → int, float or
        str), stored as the attributes of /conditions
    kind : "process" or "state" (`gatescope.reader.KINDS`)
    warnings : the text of every warning the fit raised, each starting with
        its code in brackets (`gatescope.errors.WARNING_CODES`); /warnings
    status : how the estimate ended, one of `gatescope.checks.STATUSES`
        (None when unknown: a file written before it was recorded)
    """

    choi: np.ndarray
    chi: np.ndarray
    ptm: np.ndarray
    figures: dict
    method: str
    converged: bool
    iterations: int
    log_likelihood: float
    stop_reason: str
    seconds: float
    intensities: np.ndarray
    diagnostics: Diagnostics | None
    provenance: dict
    experiment_toml: str
    toml_sha256: str
    csv_sha256: str
    counts_columns: dict
    prep_states: np.ndarray
    meas_effects: np.ndarray
    target: np.ndarray | None = None
    target_name: str | None = None
    bootstrap: Bootstrap | None = None
    created_utc: str = field(default_factory=lambda: _dt.datetime.now(_dt.timezone.utc).isoformat())
    figure_details: dict = field(default_factory=dict)
    origin: str = "fit"
    conditions: dict = field(default_factory=dict)
    kind: str = "process"
    rho: np.ndarray | None = None
    single_meas_effects: np.ndarray | None = None
    meas_parts: np.ndarray | None = None
    warnings: tuple = ()
    status: str | None = None

    @property
    def dim(self) -> int:
        """d, the dimension of the qubits' Hilbert space (2^n)."""
        if self.kind == "state":
            return int(np.asarray(self.rho).shape[0])
        return dim_of_choi(np.asarray(self.choi))

    def save(self, path) -> Path:
        """Write the result file (docs/file-formats.md) to ``path`` atomically; returns the path."""
        return result_file.write(path, self)

    def attach_bootstrap(self, boot: Bootstrap, ci_level: float) -> None:
        """Set every bootstrapped figure's ``ci`` and ``level`` from ``boot``; keep ``boot``.

        The interval construction is ``boot.interval``; the point value is
        the figure's own; every interval is intersected with the range the
        true figure can take (`gatescope.intervals.parameter_range`).
        """
        fraction(ci_level, "ci_level")
        dim = self.dim
        for k, name in enumerate(boot.names):
            fig = self.figures.get(name)
            if fig is None:
                continue
            fig.ci = interval(boot.figures[:, k], fig.value, ci_level, boot.interval,
                              parameter_range(name, dim, self.kind))
            fig.level = float(ci_level)
            fig.interval_method = boot.interval
        self.bootstrap = boot



def counts_columns(exp: Experiment) -> dict:
    """The CSV columns as read, plus each row's ``prep_index``, ``meas_index`` and ``line``
    (its physical line in the CSV, header = line 1); a state has neither ``prep`` nor
    ``prep_index``."""
    cols = {"prep": np.array(exp.prep, dtype=object), "meas": np.array(exp.meas, dtype=object),
            "counts": np.asarray(exp.counts, dtype=np.int64)}
    if exp.kind == "state":
        del cols["prep"]
    for name in ("seconds", "background", "efficiency"):
        if name in exp.columns:
            cols[name] = np.asarray(getattr(exp, name), dtype=np.float64)
    if exp.group is not None:
        cols["group"] = np.array(exp.group, dtype=object)
    if exp.kind != "state":
        cols["prep_index"] = np.asarray(exp.prep_index, dtype=np.int64)
    cols["meas_index"] = np.asarray(exp.meas_index, dtype=np.int64)
    if exp.lines is not None:
        cols["line"] = np.asarray(exp.lines, dtype=np.int64)
    return cols


def build_result(exp: Experiment, choi: np.ndarray, figures: dict, details: dict, *,
                 method: str, converged: bool, iterations: int, log_likelihood: float,
                 stop_reason: str, seconds: float, intensities, diagnostics: Diagnostics | None,
                 provenance: dict, origin: str = "fit") -> Result:
    """Assemble a `Result` from an experiment and an estimate of its process.

    ``figures`` are the values of `gatescope.merit.compute_figures` for
    ``choi`` and ``details`` what it put beside them; chi and the Pauli
    transfer matrix are computed here. For a state experiment
    (``exp.kind == "state"``) ``choi`` is the density matrix, stored as ``rho``.
    """
    if exp.kind == "state":
        estimate = dict(choi=None, chi=None, ptm=None, rho=choi, kind="state",
                        prep_states=None, meas_effects=None,
                        single_meas_effects=np.asarray(exp.single_meas_effects),
                        meas_parts=np.asarray(exp.meas_parts), target=exp.target_state,
                        target_name=exp.target_state_name)
    else:
        estimate = dict(choi=choi, chi=choi_to_chi(choi), ptm=choi_to_ptm(choi),
                        prep_states=np.asarray(exp.prep_states),
                        meas_effects=np.asarray(exp.meas_effects), target=exp.target,
                        target_name=exp.target_name)
    return Result(
        figures={k: Figure(v) for k, v in figures.items()},
        method=method, converged=converged, iterations=iterations,
        log_likelihood=log_likelihood, stop_reason=stop_reason, seconds=seconds,
        intensities=np.asarray(intensities, dtype=float), diagnostics=diagnostics,
        provenance=provenance, experiment_toml=exp.toml_text, toml_sha256=exp.toml_sha256,
        csv_sha256=exp.csv_sha256, counts_columns=counts_columns(exp),
        figure_details=details, origin=origin, conditions=dict(exp.conditions), **estimate,
    )


def load_result(path) -> Result:
    """Read a result file written by `Result.save`.

    Raises
    ------
    InputError
        If the file is missing, not HDF5, or not a gatescope result.
    """
    return Result(**result_file.read(path))


__all__ = ["Result", "Figure", "build_result", "counts_columns", "load_result"]
