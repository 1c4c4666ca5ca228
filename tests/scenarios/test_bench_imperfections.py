"""The real bench: mis-set wave plates, backgrounds and unequal efficiencies.

A two-qubit CZ bench whose preparation and analysis plates sit a fraction of
a degree off and whose retardances are not exactly 180°/90°, with accidental
coincidences and unequal detector efficiencies. When the experiment file
describes the plates as they are (`plates` states), the background and the
efficiencies, the fit recovers the true process within its error bars; when
it assumes ideal optics, the goodness-of-fit test says the model does not
describe the data.
"""

from __future__ import annotations

import gatescope as gs
import numpy as np
import pytest
from gatescope.synth.noise import build_channel
from gatescope.conventions import builtin_states
from gatescope.merit import process_fidelity
from gatescope.model import MeasurementModel
from gatescope.synth.plan import plate_angles

LABELS = ("H", "V", "D", "A", "R", "L")


# per label: (half-wave offset, quarter-wave offset, half retardance, quarter retardance), degrees
OFFSETS = {"H": (0.6, -0.4, 182.0, 91.5), "V": (-0.5, 0.3, 181.0, 88.8),
           "D": (0.8, 0.5, 178.5, 92.0), "A": (-0.7, -0.6, 183.0, 90.7),
           "R": (0.4, 0.9, 180.8, 87.9), "L": (-0.3, -0.8, 179.2, 92.4)}


def _states_toml():
    vectors = builtin_states()
    lines = []
    for lab in LABELS:
        dh, dq, rh, rq = OFFSETS[lab]
        h, q = plate_angles(vectors[lab], "prep")
        lines.append(f"[states.p{lab}]\nplates = [ {{ kind = \"half\", angle_deg = {h + dh}, "
                     f"retardance_deg = {rh} }}, {{ kind = \"quarter\", angle_deg = {q + dq}, "
                     f"retardance_deg = {rq} }} ]")
        q2, h2 = plate_angles(vectors[lab], "meas")
        # analysis: light meets the quarter-wave plate first
        lines.append(f"[states.m{lab}]\nplates = [ {{ kind = \"quarter\", angle_deg = {q2 - dq}, "
                     f"retardance_deg = {rq} }}, {{ kind = \"half\", angle_deg = {h2 - dh}, "
                     f"retardance_deg = {rh} }} ]")
    return "\n".join(lines) + "\n"


def _bench(folder, rng, *, describe_optics: bool, truth):
    """Write an experiment whose counts come from the mis-set optics."""
    rows = [(f"p{a} p{b}", f"m{c} m{e}") for a in LABELS for b in LABELS for c in LABELS for e in LABELS]
    seconds = rng.uniform(0.8, 1.2, len(rows))
    efficiency = rng.uniform(0.75, 1.0, len(rows))
    background = rng.uniform(0.5, 3.0, len(rows))
    folder.mkdir(parents=True, exist_ok=True)
    toml = 'qubits = 2\ntarget = "CZ"\ncounts = "counts.csv"\n' + _states_toml()
    (folder / "experiment.toml").write_text(toml)

    def write(counts, labels, with_columns):
        head = "prep,meas,counts" + (",seconds,efficiency,background" if with_columns else "")
        body = []
        for k, (p, m) in enumerate(labels):
            line = f"{p},{m},{counts[k]}"
            if with_columns:
                line += f",{seconds[k]:.17g},{efficiency[k]:.17g},{background[k]:.17g}"
            body.append(line)
        (folder / "counts.csv").write_text(head + "\n" + "\n".join(body) + "\n")

    write(np.zeros(len(rows), dtype=int), rows, True)
    model = MeasurementModel(gs.read_experiment(folder / "experiment.toml"))
    expected = 1500.0 * seconds * efficiency * model.forward(truth) + background
    counts = rng.poisson(expected)
    if describe_optics:
        write(counts, rows, True)
    else:     # the same counts, read as if the optics were ideal and nothing were lost
        ideal = [(p.replace("p", ""), m.replace("m", "")) for p, m in rows]
        write(counts, ideal, False)
    return gs.read_experiment(folder / "experiment.toml")


def test_described_optics_fit_the_truth_within_error_bars(tmp_path):
    rng = np.random.default_rng(2024)
    truth = build_channel("CZ", [("zz", 0.08), ("depolarizing", 0.04)], 2)
    exp = _bench(tmp_path / "bench", rng, describe_optics=True, truth=truth)
    # the bootstrap's normal interval: this test is about the described optics; the
    # two-qubit default (test inversion, tens of seconds) is tested in test_profile and
    # by the demo (test_cli)
    res = gs.fit(exp, "mle", bootstrap=40, seed=11, workers=1, interval="normal")
    f_true = process_fidelity(truth, gs.conventions.named_gate("CZ"))
    lo, hi = res.figures["process_fidelity"].ci
    assert lo <= f_true <= hi
    assert res.diagnostics.chi2_p_value > 1e-3


def test_ideal_optics_assumed_is_flagged(tmp_path):
    rng = np.random.default_rng(2024)
    truth = build_channel("CZ", [("zz", 0.08), ("depolarizing", 0.04)], 2)
    exp = _bench(tmp_path / "bench", rng, describe_optics=False, truth=truth)
    with pytest.warns(gs.GatescopeWarning, match="does not describe the data"):
        res = gs.fit(exp, "mle")
    assert res.diagnostics.chi2_p_value < 1e-3
