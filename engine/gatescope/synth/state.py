"""Synthetic state experiments on known states (``simulate --state``).

A state SPEC names a state followed by noise, ``STATE[+KIND:P]...``, or a
random state, ``random:RANK[:SEED]`` (README, "State tomography"). STATE is
anything a ``target_state`` may name: a product label (``HV``), a Bell state
(``phi+``, ``phi-``, ``psi+``, ``psi-``), ``GHZ`` or ``W`` (three qubits or
more; ``--qubits`` says how many). A Bell state followed by noise reads
``phi++visibility:0.9``; the noise can also be given with ``--noise``. The
noise kinds act on the state in the order given:

* ``depolarizing:p`` — white noise, ρ ↦ (1−p)ρ + p·I/d (the channel kind of
  the same name, `gatescope.synth.noise`, acting on a state);
* ``dephasing:p`` — ρ ↦ (1−p)ρ + p·ZρZ on every qubit;
* ``amplitude-damping:g`` — the Kraus pair of `gatescope.synth.noise` on
  every qubit;
* ``zz:phi`` — exp(−i·phi·Z⊗Z/2) on each neighbouring pair;
* ``visibility:v`` — ρ ↦ vρ + (1−v)·diag(ρ): every coherence between
  different H/V basis states scaled by v (a phi+ source then shows
  visibility v in the D/A basis and 1 in the H/V basis).

A simulated state experiment analyses every product of the single-qubit
SET (``--meas``) on every qubit, one row each; the expected counts of a row
are ``shots · Tr(E ρ)``, so that ``shots`` is the expected number of counts
per complete analyser basis; counts are Poisson draws from
``numpy.random.default_rng(seed)``. The true state is written beside the
data as ``truth.h5`` (origin "truth", `gatescope.synth.simulate.truth_result`).
"""

from __future__ import annotations

import csv
import io
import re
import time
from pathlib import Path

import numpy as np

from ..conventions import (BELL_STATES, LABEL_SETS, MANY_QUBIT_STATES, builtin_states, density,
                           named_state)
from ..errors import InputError
from ..fileio import atomic_write_text
from ..model import StateModel
from ..model.state import full_grid
from ..reader import MAX_QUBITS
from .noise import (NOISE_KINDS, amplitude_damping_kraus, check_noise_parameter, dephasing_kraus,
                    parse_noise, parse_random, zz_diagonal)
from .simulate import (Acquisition, Channel, _product_labels, _toml_string, checked_set,
                       checked_shots, save_truth, simulation_seed)

#: Noise kinds of a state SPEC: the channel kinds, and the visibility of a state.
STATE_NOISE_KINDS = NOISE_KINDS + ("visibility",)
_NOISE_SPLIT = re.compile(r"\+(?=(?:" + "|".join(map(re.escape, STATE_NOISE_KINDS)) + r"):)")

#: The bundled demo pair source (synthetic_data/pair_source_c): an invented source, see its
#: RECIPE.md.
STATE_DEMO_RECIPE = {
    "state": "psi-+visibility:0.94+depolarizing:0.03",
    "shots": 2000.0,
    "seed": 20261202,
    "title": "Pair source C: psi- with partly distinguishable emission and accidental "
             "coincidences (synthetic)",
    "bootstrap": 200,
    "folder": "pair_source_c",
}


def parse_state_noise(text: str) -> tuple[str, float]:
    """Parse one ``KIND:P`` term of a state SPEC (`STATE_NOISE_KINDS`)."""
    kind, _, value = text.partition(":")
    if kind != "visibility":
        return parse_noise(text)
    try:
        v = float(value)
    except ValueError:
        raise ValueError(f"noise {text!r}: {value!r} is not a number") from None
    if not 0.0 <= v <= 1.0:
        raise ValueError(f"noise {text!r}: a visibility lies in [0, 1]")
    return kind, v


def parse_state_spec(spec: str):
    """Parse a state SPEC, ``STATE[+KIND:P]...`` or ``random:RANK[:SEED]``.

    Returns
    -------
    name : str or None
        The state's name (the experiment's target), None for a random state.
    noise : list of (kind, value)
    random : tuple (rank, seed) or None
    """
    pieces = _NOISE_SPLIT.split(spec.strip())
    head, terms = pieces[0].strip(), pieces[1:]
    if head.startswith("random:"):
        rnd = parse_random(head, f"state {spec!r}")
        return None, [parse_state_noise(t) for t in terms], rnd
    if ":" in head or not head:
        raise ValueError(f"state {spec!r}: expected STATE[+KIND:P]... with KIND one of "
                         f"{', '.join(STATE_NOISE_KINDS)} (a Bell state followed by noise "
                         f"reads phi++visibility:0.9)")
    return head, [parse_state_noise(t) for t in terms], None


def state_qubits(name: str, n_qubits: int) -> int:
    """The number of qubits a state name means: 2 for a Bell state, the parts of a product
    label, and ``n_qubits`` for GHZ and W."""
    if name in BELL_STATES:
        return 2
    if name in MANY_QUBIT_STATES:
        return n_qubits
    parts = [p for p in re.split(r"[\s,]+", name.strip()) if p]
    if len(parts) > 1 or parts[0] in builtin_states():
        return len(parts)
    return len(parts[0])


def random_state(n_qubits: int, rank: int, seed: int | None = None) -> np.ndarray:
    """A random density matrix of the given rank: G G†/Tr(G G†), G a 2^n × rank matrix of
    independent complex Gaussian entries."""
    d = 2 ** n_qubits
    if not 1 <= rank <= d:
        raise ValueError(f"rank must lie in 1..{d}, got {rank}")
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(d, rank)) + 1j * rng.normal(size=(d, rank))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def _on_every_qubit(rho: np.ndarray, kraus, n_qubits: int) -> np.ndarray:
    """ρ ↦ Σ_K K_k ρ K_k† for the single-qubit Kraus operators ``kraus`` on every qubit k."""
    n = n_qubits
    t = np.asarray(rho, dtype=complex).reshape((2,) * (2 * n))     # rows x1..xn, columns y1..yn
    for k in range(n):
        total = 0
        for op in kraus:
            u = np.moveaxis(np.tensordot(op, t, axes=([1], [k])), 0, k)
            total = total + np.moveaxis(np.tensordot(u, op.conj(), axes=([n + k], [1])), -1, n + k)
        t = total
    d = 2 ** n
    return t.reshape(d, d)


def apply_state_noise(rho: np.ndarray, kind: str, value: float, n_qubits: int) -> np.ndarray:
    """One noise term (`STATE_NOISE_KINDS`, module docstring) applied to a state."""
    d = 2 ** n_qubits
    if kind == "visibility":
        return value * rho + (1.0 - value) * np.diag(np.diag(rho))
    check_noise_parameter(kind, value)
    if kind == "depolarizing":
        return (1.0 - value) * rho + value * np.eye(d) / d
    if kind == "dephasing":
        return _on_every_qubit(rho, dephasing_kraus(value), n_qubits)
    if kind == "amplitude-damping":
        return _on_every_qubit(rho, amplitude_damping_kraus(value), n_qubits)
    if kind == "zz":
        u = zz_diagonal(value, n_qubits)
        return rho * np.outer(u, u.conj())
    raise ValueError(f"unknown noise kind {kind!r}; known: {', '.join(STATE_NOISE_KINDS)}")


def state_from_spec(spec: str, n_qubits: int = 2) -> Channel:
    """The known state of a SPEC, as a `Channel` from a one-dimensional input (its
    ``choi`` is the density matrix); ``n_qubits`` is used by GHZ, W and random states."""
    name, noise, rnd = parse_state_spec(spec)
    if rnd is not None:
        rho = random_state(n_qubits, *rnd)
        n = n_qubits
    else:
        n = state_qubits(name, n_qubits)
        if not 1 <= n <= MAX_QUBITS:
            raise ValueError(f"state {spec!r}: {n} qubits; a state experiment has 1 to "
                             f"{MAX_QUBITS}")
        rho = density(named_state(name, n))
    for kind, value in noise:
        rho = apply_state_noise(rho, kind, value, n)
    return Channel(0.5 * (rho + rho.conj().T), n, name, spec)


def state_acquisition(state: Channel, *, shots: float, meas_set=LABEL_SETS["pauli6"],
                      right_circular: str = "H-iV") -> Acquisition:
    """The deterministic part of a simulated state run, as an `Acquisition`.

    Rows are every product of ``meas_set`` (qubit 1 first; labels in
    ``meas``), probabilities Tr(E ρ) from `gatescope.model.StateModel`
    (clipped at 0), the rate ``shots`` and 1 s rows without background or
    drift, so that ``draw(seed)`` has expected counts ``shots · Tr(E ρ)`` and
    Poisson counts from ``numpy.random.default_rng(seed)``. A state experiment
    has no preparations: ``prep`` is empty (use ``meas`` with the drawn
    ``expected`` and ``counts``, as `simulate_state_counts` does).
    """
    n = state.n_qubits
    vectors = builtin_states(right_circular)
    single = np.array([density(vectors[s]) for s in meas_set])
    parts = full_grid(n, len(meas_set))
    rows = np.arange(len(parts))
    p = StateModel(single, parts, rows, np.zeros(rows.size)).forward(state.choi)
    return Acquisition(prep=(), meas=tuple(_product_labels(meas_set, n)),
                       probabilities=np.maximum(p, 0.0), rate=float(shots),
                       seconds=np.ones(rows.size), background=None, detectors=n, lab=state.lab)


def simulate_state_counts(state: Channel, *, shots: float, meas_set=LABEL_SETS["pauli6"],
                          seed: int | None = None, right_circular: str = "H-iV"):
    """Rows (meas label, expected, counts) of a simulated state experiment: every product
    of ``meas_set`` (qubit 1 first), probabilities from `gatescope.model.StateModel`
    (`state_acquisition`, then one draw with ``seed``)."""
    acq = state_acquisition(state, shots=shots, meas_set=meas_set, right_circular=right_circular)
    run = acq.draw(seed)
    return [(m, e, int(c)) for m, e, c in zip(acq.meas, run.expected, run.counts)]


def write_state_experiment(outdir: Path, state: Channel, rows, *, title: str) -> Path:
    """Write ``experiment.toml`` (``kind = "state"``) and ``counts.csv`` (``meas,counts``)
    into outdir; returns the toml path."""
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(["meas", "counts"])
    for meas, _, count in rows:
        writer.writerow([meas, count])
    atomic_write_text(outdir / "counts.csv", buf.getvalue())
    lines = [f"title = {_toml_string(title)}", 'kind = "state"', f"qubits = {state.n_qubits}"]
    if state.target is not None:
        lines.append(f"target_state = {_toml_string(state.target)}")
    lines.append('counts = "counts.csv"')
    path = outdir / "experiment.toml"
    atomic_write_text(path, "\n".join(lines) + "\n")
    return path


def run_state_simulation(spec: str, outdir: Path, *, shots: float = 1000.0,
                         meas: str = "pauli6", seed: int | None = None, n_qubits: int = 2,
                         title: str | None = None, command_line: str | None = None,
                         spec_option: str = "--state") -> Path:
    """Write experiment.toml, counts.csv and truth.h5 of a known state into ``outdir``.

    Everything is validated before the first file is written; ``spec_option``
    is the option a bad SPEC is blamed on. Returns the path of experiment.toml.
    """
    started = time.time()
    try:
        state = state_from_spec(spec, n_qubits)
    except ValueError as exc:
        raise InputError(str(exc), key=spec_option) from None
    meas_set = checked_set(meas, "--meas")
    shots = checked_shots(shots)
    seed = simulation_seed(seed)
    rows = simulate_state_counts(state, shots=shots, meas_set=meas_set, seed=seed)
    path = write_state_experiment(outdir, state, rows, title=title or f"simulated state {spec}")
    return save_truth(path, state, shots=shots, seed=seed, started=started,
                      command_line=command_line)


__all__ = ["STATE_NOISE_KINDS", "STATE_DEMO_RECIPE", "parse_state_spec", "parse_state_noise",
           "state_qubits", "random_state", "apply_state_noise", "state_from_spec",
           "state_acquisition", "simulate_state_counts", "write_state_experiment",
           "run_state_simulation"]
