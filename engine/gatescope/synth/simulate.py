"""Synthetic experiments on known channels (the `simulate` command).

A simulated experiment is a complete product set: every preparation label
(the per-qubit SET to the power n) with every analyser projector. The
expected counts of a row are ``shots · p_k``, so that ``shots`` is the
expected number of counts per preparation and complete analyser basis,
summed over that basis' outcomes (README, "Commands"); counts are Poisson
draws from ``numpy.random.default_rng(seed)``.

The true channel is written beside the data as ``truth.h5``, a result file
whose origin is "truth" (method ``truth``): the figures of merit of the
true channel, no fit report and no goodness of fit.
"""

from __future__ import annotations

import csv
import io
import itertools
import time
from dataclasses import dataclass
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
from .noise import build_channel, parse_channel_spec, random_channel
from .plan import MAX_ROWS


@dataclass(frozen=True)
class Channel:
    """A known channel to simulate: its Choi matrix and how it was named.

    A known state (`gatescope.synth.state`) is a channel from a one-dimensional
    input: ``choi`` is then its density matrix and ``target`` the name written as
    the experiment's ``target_state``.
    """

    choi: np.ndarray
    n_qubits: int
    target: str | None          # gate name written as the experiment's target
    spec: str


def channel_from_spec(spec: str, n_qubits: int = 2) -> Channel:
    """Channel of a SPEC string (`gatescope.synth.noise`), e.g. ``CZ+depolarizing:0.02``.

    ``n_qubits`` is used only by ``random:RANK[:SEED]``, which names no gate.
    """
    gate, noise, rnd = parse_channel_spec(spec)
    if rnd is not None:
        rank, seed = rnd
        return Channel(random_channel(n_qubits, rank, seed), n_qubits, None, spec)
    n = int(round(np.log2(named_gate(gate).shape[0])))
    return Channel(build_channel(gate, noise, n), n, gate, spec)


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


def simulate_counts(channel: Channel, *, shots: float, prep_set=LABEL_SETS["pauli6"],
                    meas_set=LABEL_SETS["pauli6"], seed: int | None = None,
                    right_circular: str = "H-iV"):
    """Rows (prep label, meas label, expected, counts) of a simulated run.

    Rows are every preparation (SET^n, qubit 1 first) with every analyser
    projector; probabilities come from one table R·J'·Fᵀ over all pairs
    (see :mod:`gatescope.model`).
    """
    n = channel.n_qubits
    d = 2 ** n
    vectors = builtin_states(right_circular)
    rng = np.random.default_rng(seed)
    preps = _product_labels(prep_set, n)
    meass = _product_labels(meas_set, n)
    rho = np.array([kron_all(density(vectors[s]) for s in parts)
                    for parts in itertools.product(prep_set, repeat=n)])
    eff = np.array([kron_all(density(vectors[s]) for s in parts)
                    for parts in itertools.product(meas_set, repeat=n)])
    jp = channel.choi.reshape(d, d, d, d).transpose(0, 2, 1, 3).reshape(d * d, d * d)
    table = (rho.reshape(len(preps), -1) @ jp @ eff.transpose(0, 2, 1).reshape(len(meass), -1).T).real
    expected = shots * np.maximum(table, 0.0).reshape(-1)
    counts = rng.poisson(expected)
    labels = [(p, m) for p in preps for m in meass]
    return [(p, m, e, int(c)) for (p, m), e, c in zip(labels, expected, counts)]


def write_experiment(outdir: Path, channel: Channel, rows, *, title: str,
                     extra_toml: str = "") -> Path:
    """Write ``experiment.toml`` and ``counts.csv`` into outdir; returns the toml path."""
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["prep", "meas", "counts"])
    for prep, meas, _, count in rows:
        writer.writerow([prep, meas, count])
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
        gate, _, rnd = parse_channel_spec(spec)
        size = n_qubits if rnd is not None else n_qubits_of(named_gate(gate).shape[0])
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
    rows = simulate_counts(channel, shots=shots, prep_set=prep_set, meas_set=meas_set, seed=seed)
    path = write_experiment(outdir, channel, rows, title=title or f"simulated {spec}")
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
        seconds=0.0, intensities=np.full(exp.n_groups, float(shots)), diagnostics=None,
        provenance=prov, origin="truth")
