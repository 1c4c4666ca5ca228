"""Helpers shared by the tests (a plain module, importable as ``support``)."""

from __future__ import annotations

import itertools

import numpy as np

from gatescope.reader import read_experiment
from gatescope.synth.noise import build_channel
from gatescope.synth.simulate import Channel, channel_from_spec, simulate_counts, write_experiment

#: Counts per second a lossless gate gives in one complete analyser basis, in the
#: postselected experiments below.
POSTSELECTED_RATE = 9000.0


def simulated_experiment(folder, spec: str, *, shots: float = 1000.0, seed: int = 1,
                         prep=("H", "V", "D", "A", "R", "L"), meas=("H", "V", "D", "A", "R", "L"),
                         n_qubits: int = 2, exact: bool = False):
    """Write and read back a simulated experiment; returns (Experiment, true Choi matrix).

    With ``exact=True`` the counts are the expected counts rounded to whole
    numbers instead of Poisson draws (for "ideal data" checks use a large
    ``shots``).
    """
    channel = channel_from_spec(spec, n_qubits)
    rows = simulate_counts(channel, shots=shots, prep_set=prep, meas_set=meas, seed=seed)
    if exact:
        rows = [(p, m, e, int(round(e))) for p, m, e, _ in rows]
    path = write_experiment(folder, channel, rows, title=f"test {spec}")
    return read_experiment(path), channel.choi


def random_density(d: int, rank: int, seed: int) -> np.ndarray:
    """ρ = G G†/Tr(G G†), G a d × rank matrix of complex Gaussian entries (rank-deficient
    when rank < d)."""
    rng = np.random.default_rng(seed)
    g = rng.normal(size=(d, rank)) + 1j * rng.normal(size=(d, rank))
    rho = g @ g.conj().T
    return rho / np.trace(rho).real


def random_ket(d: int, seed: int) -> np.ndarray:
    """A normalised vector of d complex Gaussian entries."""
    rng = np.random.default_rng(seed)
    v = rng.normal(size=d) + 1j * rng.normal(size=d)
    return v / np.linalg.norm(v)


def simulated_state_experiment(folder, spec: str, *, shots: float = 1000.0, seed: int = 1,
                               meas=("H", "V", "D", "A", "R", "L"), n_qubits: int = 2,
                               exact: bool = False):
    """Write and read back a simulated state experiment (`gatescope.synth.state`); returns
    (Experiment, true density matrix). ``exact=True`` writes the expected counts rounded
    to whole numbers instead of Poisson draws."""
    from gatescope.synth.state import (simulate_state_counts, state_from_spec,
                                       write_state_experiment)

    state = state_from_spec(spec, n_qubits)
    rows = simulate_state_counts(state, shots=shots, meas_set=meas, seed=seed)
    if exact:
        rows = [(m, e, int(round(e))) for m, e, _ in rows]
    path = write_state_experiment(folder, state, rows, title=f"test state {spec}")
    return read_experiment(path), state.choi


def postselected_experiment(folder, success, seed=5, noise=(("depolarizing", 0.05),),
                            rate: float = POSTSELECTED_RATE, exact: bool = False):
    """A CZ that succeeds with probability ``success``, Φ = success · (CZ + noise), as a
    trace = "decreasing" experiment with a known input rate; returns (Experiment, Choi).

    ``exact=True`` writes the expected counts rounded to whole numbers.
    """
    choi = success * build_channel("CZ", list(noise), 2)
    channel = Channel(choi, 2, "CZ", "postselected CZ")
    rows = simulate_counts(channel, shots=rate, seed=seed)
    if exact:
        rows = [(p, m, e, int(round(e))) for p, m, e, _ in rows]
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "counts.csv").write_text(
        "prep,meas,counts\n" + "".join(f"{p},{m},{c}\n" for p, m, _, c in rows))
    (folder / "experiment.toml").write_text(
        'qubits = 2\ntarget = "CZ"\ncounts = "counts.csv"\nnormalization = "global"\n'
        f'trace = "decreasing"\ninput_rate = {rate}\n')
    return read_experiment(folder / "experiment.toml"), choi


def with_background(exp, truth, background, *, scale: float = 1e7):
    """Rewrite ``exp``'s counts as the rounded expected counts scale·p + background with
    a background column (the row model, README "Input"); returns the re-read Experiment."""
    from gatescope.model import MeasurementModel

    p = MeasurementModel(exp).forward(truth)
    expected = scale * p + np.asarray(background, dtype=float)
    lines = ["prep,meas,counts,background"]
    for k in range(exp.n_rows):
        lines.append(f"{exp.prep[k]},{exp.meas[k]},{int(round(expected[k]))},"
                     f"{background[k]:.17g}")
    exp.counts_path.write_text("\n".join(lines) + "\n")
    return read_experiment(exp.path)


def square_task(shared, item):
    """A task for the parallel runner's tests: shared offset plus the item squared, and
    the worker's pid."""
    import os

    return shared + item * item, os.getpid()


def report_and_sleep(shared, item):
    """A task that writes its worker's pid into the folder ``shared``, then sleeps."""
    import os
    import time
    from pathlib import Path

    tmp = Path(shared, f".worker-{os.getpid()}")
    tmp.write_text(str(os.getpid()))
    tmp.replace(Path(shared, f"worker-{os.getpid()}"))      # whole, for the reader
    time.sleep(120)
    return item


def dark_experiment(folder, spec, *, shots=1000.0, seed=7, n_dark=6, n_qubits=2):
    """Simulated data plus 1–2 counts in ``n_dark`` rows expected below 1e−3 of the shots
    (dark counts, accidentals: a few counts where the gate predicts almost none)."""
    channel = channel_from_spec(spec, n_qubits)
    rows = list(simulate_counts(channel, shots=shots, seed=seed))
    rng = np.random.default_rng(seed + 1000)
    low = [k for k, row in enumerate(rows) if row[2] < 1e-3 * shots]
    for k in rng.choice(low, size=n_dark, replace=False):
        p, m, e, c = rows[k]
        rows[k] = (p, m, e, c + int(rng.integers(1, 3)))
    return read_experiment(write_experiment(folder, channel, rows, title=f"dark {spec}")), channel.choi


def compile_in_worker(shared, item):
    """A task that compiles a new numba function where it runs (every compile makes
    numba re-read its environment) and returns shared + item from it."""
    import numba

    @numba.njit
    def add(a, b):
        return a + b

    return add(shared, item)


def experiment_tree(root, names, *, spec: str = "H+depolarizing:0.1", n_qubits: int = 1,
                    shots: float = 500.0, conditions: bool = True):
    """Simulated experiments in ``root/<name>/`` (names may contain slashes), each with
    its own seed and, with ``conditions``, a ``[conditions]`` table (delay_ps = 10·k,
    run = "night 1"); returns the experiment files."""
    from pathlib import Path

    paths = []
    for k, name in enumerate(names):
        exp, _ = simulated_experiment(Path(root, name), spec, shots=shots, seed=100 + k,
                                      n_qubits=n_qubits)
        if conditions:
            with open(exp.path, "a", encoding="utf-8") as fh:
                fh.write(f'\n[conditions]\ndelay_ps = {10 * k}\nrun = "night 1"\n')
        paths.append(exp.path)
    return paths


def write_full_1q(folder, spec="H+amplitude-damping:0.1", shots=800, seed=3):
    """A one-qubit six-state run with seconds, background and efficiency columns, its
    counts drawn from the row model of docs/file-formats.md with those columns."""
    folder.mkdir(parents=True, exist_ok=True)
    channel = channel_from_spec(spec, 1)
    rows = simulate_counts(channel, shots=shots, seed=seed)
    rng = np.random.default_rng(seed)
    lines = ["prep,meas,counts,seconds,background,efficiency"]
    for k, (p, m, expected, _) in enumerate(rows):
        seconds, background, efficiency = 1.0 + 0.5 * (k % 2), 0.25 * (k % 3), 0.9 + 0.05 * (k % 2)
        n = rng.poisson(expected * seconds * efficiency + background)
        lines.append(f"{p},{m},{n},{seconds},{background},{efficiency}")
    (folder / "counts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "experiment.toml").write_text(
        'title = "one qubit with every column"\nqubits = 1\ntarget = "H"\ncounts = "counts.csv"\n',
        encoding="utf-8")
    return read_experiment(folder / "experiment.toml")


#: The light-leak bench: a CZ with depolarising noise at 2000 counts per basis, where
#: room light reached the detector behind photon 2's analyser in its V setting while
#: photon 1 was prepared in D or A (an invented scenario), 60 counts on top of small
#: accidentals everywhere.
LEAK_SPEC = "CZ+depolarizing:0.1"
LEAK_SHOTS = 2000.0


def leaky(prep_label: str, meas_label: str) -> bool:
    """The rows the light leak reaches."""
    return prep_label[0] in "DA" and meas_label[1] == "V"


def light_leak_bench(folder, *, with_background: bool, seed: int = 7):
    """The light-leak bench written to ``folder``, with or without its background column:
    (Experiment, mask of the leaking rows)."""
    folder.mkdir(parents=True, exist_ok=True)
    channel = channel_from_spec(LEAK_SPEC, 2)
    rng = np.random.default_rng(seed)
    rows = simulate_counts(channel, shots=LEAK_SHOTS, seed=seed)
    lines = ["prep,meas,counts" + (",background" if with_background else "")]
    flags = []
    for k, (prep, meas, expected, _) in enumerate(rows):
        background = 1.5 + 0.5 * (k % 3) + (60.0 if leaky(prep, meas) else 0.0)
        n = rng.poisson(expected + background)
        lines.append(f"{prep},{meas},{n}" + (f",{background}" if with_background else ""))
        flags.append(leaky(prep, meas))
    (folder / "counts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (folder / "experiment.toml").write_text(
        'title = "CZ with a light leak"\nqubits = 2\ntarget = "CZ"\ncounts = "counts.csv"\n',
        encoding="utf-8")
    return read_experiment(folder / "experiment.toml"), np.array(flags)


#: The analyser projector whose counts the report tests' miscalibrated experiment scales up,
#: and by how much (a 30% excess: tens of standard deviations at its counts).
MISCALIBRATED_MEAS = "DA"
MISCALIBRATION = 1.3


def cnot_chi_textbook() -> np.ndarray:
    """χ of CNOT (qubit 1 controls) from CNOT = (II + IX + ZI − ZX)/2 (common practice:
    |0><0| = (I + Z)/2, |1><1| = (I − Z)/2): Φ(ρ) = UρU† = Σ c_m c_n* P_m ρ P_n, so
    χ = c c† with c_II = c_IX = c_ZI = 1/2, c_ZX = −1/2."""
    labels = ["".join(p) for p in itertools.product("IXYZ", repeat=2)]
    c = np.zeros(16)
    for label, value in (("II", 0.5), ("IX", 0.5), ("ZI", 0.5), ("ZX", -0.5)):
        c[labels.index(label)] = value
    return np.outer(c, c)


def check_self_contained_page(text: str) -> dict:
    """Parse an HTML report with the standard library's html.parser and check what every
    report promises: well nested, no script, nothing loaded from the network, every image
    an inline PNG that decodes (PIL, which matplotlib depends on). Returns the page's
    ``text`` (its visible words, joined by spaces), ``images`` (each (width, height) in
    pixels), ``ids`` and ``links`` (every href)."""
    import base64
    import io
    from html.parser import HTMLParser

    from PIL import Image

    void = {"meta", "img", "br", "hr", "link", "input", "source", "wbr", "col", "area", "base"}

    class Page(HTMLParser):
        def __init__(self):
            super().__init__(convert_charrefs=True)
            self.stack, self.words, self.images, self.ids, self.links = [], [], [], [], []
            self.tags = set()
            self.style = ""

        def handle_starttag(self, tag, attrs):
            self.tags.add(tag)
            attrs = dict(attrs)
            for name, value in attrs.items():
                value = (value or "").strip().lower()
                assert not value.startswith(("http:", "https:", "//", "ftp:")), (tag, name, value)
                assert not name.startswith("on"), f"an event handler: {tag} {name}"
            if "id" in attrs:
                self.ids.append(attrs["id"])
            if "href" in attrs:
                self.links.append(attrs["href"])
            if tag == "img":
                src = attrs["src"]
                assert src.startswith("data:image/png;base64,"), src[:40]
                data = base64.b64decode(src.split(",", 1)[1], validate=True)
                with Image.open(io.BytesIO(data)) as im:
                    im.load()                                   # decodes every pixel
                    self.images.append(im.size)
                assert attrs.get("alt"), "an image without alt text"
            if tag not in void:
                self.stack.append(tag)

        def handle_endtag(self, tag):
            if tag in void:
                return
            assert self.stack and self.stack[-1] == tag, f"</{tag}> closes {self.stack[-1:]}"
            self.stack.pop()

        def handle_data(self, data):
            if self.stack and self.stack[-1] == "style":
                self.style += data
            elif data.strip():
                self.words.append(data.strip())

    page = Page()
    page.feed(text)
    page.close()
    assert text.startswith("<!DOCTYPE html>")
    assert page.stack == [], f"unclosed: {page.stack}"
    assert not page.tags & {"script", "link", "iframe", "object", "embed", "base"}, page.tags
    assert "url(" not in page.style and "@import" not in page.style
    return {"text": " ".join(page.words), "images": page.images, "ids": page.ids,
            "links": page.links}
