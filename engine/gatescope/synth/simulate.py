"""Synthetic experiments on known channels (the `simulate` command).

A simulated experiment is a complete product set: every preparation label
(the per-qubit SET to the power n) with every analyser projector, in that
order (preparation-major), which is also taken as the order of acquisition.
Row k has the expected counts

    ν_k = rate · seconds_k · f_k · Tr[(ρ_k^T ⊗ E_k) J] + b_k · f_k^c,

with ``rate = shots`` (``shots / IDEAL_SUCCESS`` for the postselected gate
of a ``distinguishability`` SPEC), ``seconds_k`` = 1 s, ρ_k and E_k the
states and effects the optics really make (the ideal ones unless the SPEC
has ``plates``), f_k the source's drift factors (1 without ``drift``), b_k
the accidental coincidences (``accidentals``; c detectors in a
coincidence). ``shots`` is thus the expected number of counts per
preparation and complete analyser basis of an ideal run (README,
"Commands"). Counts are Poisson draws from
``numpy.random.default_rng(seed)``; a ``drift-walk`` without its own seed
draws its walk from ``SeedSequence(seed).spawn(1)[0]``.

What the experiment file states is what a lab would know: the ideal labels,
``seconds`` and ``background`` columns with accidentals, and for the
postselected gate ``trace = "decreasing"`` with the known input rate. The
true channel is written beside the data as ``truth.h5``, a result file
whose origin is "truth" (method ``truth``): the figures of merit of the
true channel, no fit report and no goodness of fit.
"""

from __future__ import annotations

import csv
import io
import itertools
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..conventions import LABEL_SETS, builtin_states, density, kron_all, n_qubits_of, named_gate
from ..errors import InputError
from ..fileio import atomic_write_text
from ..likelihood import PoissonLikelihood
from ..merit import compute_figures
from ..model import build_model
from ..options import whole
from ..provenance import provenance
from ..reader import MAX_QUBITS, read_experiment
from ..result import build_result
from .lab import (IDEAL_SUCCESS, LabNoise, accidental_background, actual_optics,
                  detectors_in_coincidence, drift_factors)
from .noise import parse_channel_spec, spec_channel
from .plan import MAX_ROWS


@dataclass(frozen=True)
class Channel:
    """A known channel to simulate: its Choi matrix and how it was named.

    ``lab`` holds the bench imperfections of the SPEC (`gatescope.synth.lab`):
    the distinguishability is already in ``choi``; plates, accidentals and
    drift act when the counts are drawn (`acquisition`).

    A known state (`gatescope.synth.state`) is a channel from a one-dimensional
    input: ``choi`` is then its density matrix and ``target`` the name written as
    the experiment's ``target_state``.
    """

    choi: np.ndarray
    n_qubits: int
    target: str | None          # gate name written as the experiment's target
    spec: str
    lab: LabNoise = field(default_factory=LabNoise)


def channel_from_spec(spec: str, n_qubits: int = 2) -> Channel:
    """Channel of a SPEC string (`gatescope.synth.noise`), e.g. ``CZ+depolarizing:0.02``.

    ``n_qubits`` is used only by ``random:RANK[:SEED]``, which names no gate.
    """
    parsed = parse_channel_spec(spec)
    n = n_qubits if parsed.random is not None else \
        int(round(np.log2(named_gate(parsed.gate).shape[0])))
    return Channel(spec_channel(parsed, n), n, parsed.gate, spec, parsed.lab)


def label_set(text: str) -> tuple[str, ...]:
    """A SET option: ``pauli6``, ``pauli4`` or a comma list of single-qubit labels."""
    if text in LABEL_SETS:
        return LABEL_SETS[text]
    labels = tuple(p.strip() for p in text.split(",") if p.strip())
    known = builtin_states()
    bad = [p for p in labels if p not in known]
    if not labels or bad:
        raise ValueError(f"{text!r} is not pauli6, pauli4 or a comma list of built-in labels"
                         + (f" ({bad[0]!r} is unknown)" if bad else ""))
    return labels


def checked_set(text: str, option: str) -> tuple[str, ...]:
    """`label_set`, with a bad SET an InputError blaming ``option`` (``--prep``, ``--meas``)."""
    try:
        return label_set(text)
    except ValueError as exc:
        raise InputError(str(exc), key=option) from None


def checked_shots(shots: float) -> float:
    """``shots`` if it is a positive finite number, else an InputError blaming ``--shots``."""
    if not (np.isfinite(shots) and shots > 0):
        raise InputError(f"must be a positive number, got {shots}", key="--shots")
    return float(shots)


def simulation_seed(seed: int | None) -> int:
    """The seed of a simulation: ``seed``, or one drawn from the operating system (31 bits,
    so that it reads well in a recipe)."""
    return int(np.random.SeedSequence().entropy % (2**31)) if seed is None else seed


def _product_labels(single, n_qubits):
    joiner = "" if all(len(s) == 1 for s in single) else " "
    return [joiner.join(p) for p in itertools.product(single, repeat=n_qubits)]


def source_rate(channel: Channel, shots: float) -> float:
    """Pairs per second (per complete analyser basis) that give ``shots`` counts per
    preparation and basis with an ideal gate: ``shots``, or ``shots / IDEAL_SUCCESS``
    for the postselected gate of a ``distinguishability`` SPEC."""
    return float(shots) / IDEAL_SUCCESS if channel.lab.trace_decreasing else float(shots)


@dataclass(frozen=True)
class SimulatedRun:
    """The rows of one simulated run (file order = acquisition order).

    ``expected`` are the true expected counts ν_k (module docstring),
    ``counts`` the Poisson draws, ``factors`` the drift factors f_k.
    """

    prep: tuple[str, ...]
    meas: tuple[str, ...]
    expected: np.ndarray
    counts: np.ndarray
    factors: np.ndarray

    @property
    def rows(self) -> list[tuple]:
        """(prep label, meas label, expected, counts) of every row."""
        return [(p, m, e, int(c)) for p, m, e, c in
                zip(self.prep, self.meas, self.expected, self.counts)]


@dataclass(frozen=True)
class Acquisition:
    """The deterministic part of a simulated run: rows, probabilities, rate, background.

    ``probabilities`` are Tr[(ρ_k^T ⊗ E_k) J] with the optics as they really
    are (clipped at 0), ``background`` the nominal accidental counts (None
    without ``accidentals``), ``detectors`` the detectors in a coincidence
    (the power with which accidentals follow the drift). `draw` adds what a
    seed decides.
    """

    prep: tuple[str, ...]
    meas: tuple[str, ...]
    probabilities: np.ndarray
    rate: float
    seconds: np.ndarray
    background: np.ndarray | None
    detectors: int
    lab: LabNoise

    def factors(self, seed=None) -> np.ndarray:
        """Drift factors of the rows (ones without drift)."""
        n_rows = self.probabilities.size
        if self.lab.drift is None:
            return np.ones(n_rows)
        kind, size, walk_seed = self.lab.drift
        if kind == "walk" and walk_seed is None:
            walk_seed = np.random.SeedSequence(seed).spawn(1)[0]
        return drift_factors(n_rows, kind, size, walk_seed)

    def expected(self, factors: np.ndarray) -> np.ndarray:
        """ν_k for these drift factors (module docstring)."""
        nu = self.rate * self.seconds * factors * self.probabilities
        if self.background is not None:
            nu = nu + self.background * factors ** self.detectors
        return nu

    def draw(self, seed=None) -> SimulatedRun:
        """One run: drift factors and Poisson counts from ``seed``."""
        factors = self.factors(seed)
        nu = self.expected(factors)
        counts = np.random.default_rng(seed).poisson(nu)
        return SimulatedRun(self.prep, self.meas, nu, counts, factors)

    def columns(self) -> dict:
        """Optional counts.csv columns the experiment states: ``seconds`` (with
        accidentals, or rows that are not 1 s long) and ``background`` (with
        accidentals)."""
        out = {}
        if self.background is not None or np.any(self.seconds != 1.0):
            out["seconds"] = self.seconds
        if self.background is not None:
            out["background"] = self.background
        return out

    def toml_keys(self) -> str:
        """experiment.toml lines beyond the usual ones: for the postselected gate,
        ``trace = "decreasing"`` with ``normalization = "global"`` and the known input
        rate, so that the fit's model contains the true process (docs/file-formats.md)."""
        if not self.lab.trace_decreasing:
            return ""
        return ('normalization = "global"\ntrace = "decreasing"\n'
                f"input_rate = {self.rate!r}\n")


def _single_qubit_operators(labels, vectors) -> np.ndarray:
    """Ideal density matrices of the labels, shape (1, K, 2, 2), shared by every qubit."""
    return np.array([[density(vectors[s]) for s in labels]])


def _products(single: np.ndarray, n_qubits: int) -> np.ndarray:
    """Every product ⊗_q single[q or 0, s_q], qubit 1 first (shape (K^n, d, d))."""
    k = single.shape[1]
    return np.array([kron_all(single[q if single.shape[0] > 1 else 0, s]
                              for q, s in enumerate(parts))
                     for parts in itertools.product(range(k), repeat=n_qubits)])


def acquisition(channel: Channel, *, shots: float, prep_set=LABEL_SETS["pauli6"],
                meas_set=LABEL_SETS["pauli6"], right_circular: str = "H-iV",
                seconds: float = 1.0) -> Acquisition:
    """The rows and probabilities of a simulated run of ``channel`` (module docstring).

    Probabilities come from one table R·J'·Fᵀ over all (prep, meas) pairs
    (see :mod:`gatescope.model`), with the ideal states and effects, or
    with those the optics make when the SPEC has ``plates``
    (`gatescope.synth.lab.actual_optics`).
    """
    n = channel.n_qubits
    d = 2 ** n
    vectors = builtin_states(right_circular)
    errors = channel.lab.plate_errors(n)
    if errors is None:
        single_prep = _single_qubit_operators(prep_set, vectors)
        single_meas = _single_qubit_operators(meas_set, vectors)
    else:
        optics = actual_optics(prep_set, meas_set, errors, right_circular)
        single_prep, single_meas = optics.prep, optics.meas
    rho = _products(single_prep, n)
    eff = _products(single_meas, n)
    jp = channel.choi.reshape(d, d, d, d).transpose(0, 2, 1, 3).reshape(d * d, d * d)
    effects = eff.transpose(0, 2, 1).reshape(eff.shape[0], -1)
    table = (rho.reshape(rho.shape[0], -1) @ jp @ effects.T).real
    preps = _product_labels(prep_set, n)
    meass = _product_labels(meas_set, n)
    n_rows = len(preps) * len(meass)
    secs = np.full(n_rows, float(seconds))
    detectors = detectors_in_coincidence(n)
    background = None
    if channel.lab.accidentals is not None:
        singles, window_ns = channel.lab.accidentals
        background = accidental_background([singles] * detectors, window_ns * 1e-9, secs)
    return Acquisition(
        prep=tuple(p for p in preps for _ in meass), meas=tuple(m for _ in preps for m in meass),
        probabilities=np.maximum(table, 0.0).reshape(-1),
        rate=source_rate(channel, shots) / seconds,
        seconds=secs, background=background, detectors=detectors, lab=channel.lab)


def simulate_counts(channel: Channel, *, shots: float, prep_set=LABEL_SETS["pauli6"],
                    meas_set=LABEL_SETS["pauli6"], seed: int | None = None,
                    right_circular: str = "H-iV"):
    """Rows (prep label, meas label, expected, counts) of a simulated run.

    Rows are every preparation (SET^n, qubit 1 first) with every analyser
    projector (`acquisition`, then `Acquisition.draw` with ``seed``).
    """
    acq = acquisition(channel, shots=shots, prep_set=prep_set, meas_set=meas_set,
                      right_circular=right_circular)
    return acq.draw(seed).rows


def write_experiment(outdir: Path, channel: Channel, rows, *, title: str,
                     extra_toml: str = "", columns: dict | None = None) -> Path:
    """Write ``experiment.toml`` and ``counts.csv`` into outdir; returns the toml path.

    ``columns`` maps optional counts.csv columns (``seconds``, ``background``)
    to their per-row values, written at full precision.
    """
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    columns = columns or {}
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["prep", "meas", "counts"] + list(columns))
    for k, (prep, meas, _, count) in enumerate(rows):
        writer.writerow([prep, meas, count] + [repr(float(v[k])) for v in columns.values()])
    atomic_write_text(outdir / "counts.csv", buf.getvalue())
    lines = [f"title = {_toml_string(title)}", f"qubits = {channel.n_qubits}"]
    if channel.target is not None:
        lines.append(f"target = {_toml_string(channel.target)}")
    lines.append('counts = "counts.csv"')
    text = "\n".join(lines) + "\n" + extra_toml
    path = outdir / "experiment.toml"
    atomic_write_text(path, text)
    return path


def _toml_string(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


#: The bundled demo dataset (synthetic_data/cz_bench_b): an invented bench, see its RECIPE.md.
DEMO_RECIPE = {
    "channel": "CZ+zz:0.09+dephasing:0.015+depolarizing:0.04",
    "shots": 1500.0,
    "seed": 20261201,
    "title": "CZ gate on bench B: conditional-phase error and imperfect two-photon overlap (synthetic)",
    "bootstrap": 200,
}


def run_simulation(spec: str, outdir: Path, *, shots: float = 1000.0, prep: str = "pauli6",
                   meas: str = "pauli6", seed: int | None = None, n_qubits: int = 2,
                   title: str | None = None, command_line: str | None = None,
                   spec_option: str = "--channel") -> Path:
    """Write experiment.toml, counts.csv and truth.h5 for a known channel into ``outdir``.

    Everything is validated before the first file is written; ``spec_option``
    is the option a bad SPEC is blamed on. Returns the path of experiment.toml.
    """
    started = time.time()
    whole(n_qubits, "--qubits", 1, MAX_QUBITS)
    try:
        parsed = parse_channel_spec(spec)
        rnd = parsed.random
        size = n_qubits if rnd is not None else n_qubits_of(named_gate(parsed.gate).shape[0])
    except ValueError as exc:
        raise InputError(str(exc), key=spec_option) from None
    prep_set = checked_set(prep, "--prep")
    meas_set = checked_set(meas, "--meas")
    n_rows = (len(prep_set) * len(meas_set)) ** size
    if n_rows > MAX_ROWS:
        raise InputError(f"{size} qubits with these sets make {n_rows:,} rows (more than "
                         f"{MAX_ROWS:,})", key="--qubits" if rnd is not None else spec_option)
    try:
        channel = channel_from_spec(spec, n_qubits)
    except ValueError as exc:
        raise InputError(str(exc), key=spec_option) from None
    shots = checked_shots(shots)
    seed = simulation_seed(seed)
    acq = acquisition(channel, shots=shots, prep_set=prep_set, meas_set=meas_set)
    path = write_experiment(outdir, channel, acq.draw(seed).rows,
                            title=title or f"simulated {spec}", extra_toml=acq.toml_keys(),
                            columns=acq.columns())
    return save_truth(path, channel, shots=shots, seed=seed, started=started,
                      command_line=command_line)


def save_truth(path: Path, channel: Channel, *, shots: float, seed: int, started: float,
               command_line: str | None = None) -> Path:
    """Read back the experiment written at ``path`` and save its `truth_result` beside it
    as ``truth.h5``; returns ``path``."""
    exp = read_experiment(path)
    truth_result(exp, channel, shots=shots, seed=seed, started=started,
                 command_line=command_line).save(Path(path).parent / "truth.h5")
    return path


def truth_result(exp, channel: Channel, *, shots: float, seed: int, started: float,
                 command_line: str | None = None):
    """The `Result` of the true channel of a simulated experiment (origin "truth").

    Its figures are those of the true channel; its log-likelihood is that of
    the true channel at the simulated counts, with the intensities profiled
    as a fit would (for comparison with a fit's); it has no diagnostics. For
    a state experiment ``channel.choi`` is the true density matrix.
    """
    model = build_model(exp)
    log_likelihood = PoissonLikelihood(model).evaluate(channel.choi).log_likelihood
    details = {}
    target = exp.target_state if exp.kind == "state" else exp.target
    figures = compute_figures(channel.choi, target, details=details, kind=exp.kind)
    prov = provenance(seed=seed, command_line=command_line, started=started,
                      wall=time.time() - started)
    prov["channel"] = channel.spec
    return build_result(
        exp, channel.choi, figures, details, method="truth", converged=True, iterations=0,
        log_likelihood=log_likelihood,
        stop_reason=f"true {'state' if exp.kind == 'state' else 'channel'} of the simulation "
                    f"({channel.spec}, shots {shots:g}, seed {seed})",
        seconds=0.0, intensities=np.full(exp.n_groups, source_rate(channel, shots)),
        diagnostics=None,
        provenance=prov, origin="truth")
