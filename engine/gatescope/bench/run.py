"""`gatescope bench`: estimators on known channels or states, repetition after repetition.

For every channel (a SPEC of `gatescope.synth.noise`), every count level
(``shots``, as in `simulate`) and every estimator, the bench draws
``repeats`` independent simulated runs of the same design, fits each one,
and measures how far the estimate lands from the truth
(`gatescope.bench.measures`); the table (`gatescope.bench.table`) sets the
mean squared error beside the Cramér–Rao bound (`gatescope.bench.crb`).

A state bench (``states``, the SPECs of `gatescope.synth.state`; ``bench
--state``) does the same for known states measured by analysers only
(`gatescope.synth.state.state_acquisition`: every product of the ``meas``
set, ``shots`` expected counts per analyser basis, one global intensity).
One bench holds channels or states, never both: the kind is a fixed setting
of its folder. Everywhere below "channel" reads "state" for a state bench;
its seeds use the state SPEC in the key.

Seeds. Repetition r of channel c at shots N with method m draws its run from
the seed ``repetition_seed(seed, c, qubits, N, m, r)``: the first 63 bits of
the SHA-256 of that key. Its numbers therefore depend on nothing but the
bench seed and the key — not on the number of workers, the order in which
repetitions finish, an interruption, or which other channels, count levels
or methods the bench holds. Its bootstrap (``bootstrap`` B > 0, parametric,
for the coverage of the intervals) is seeded the same way with the key
extended by ``"bootstrap"``.

Resuming. Finished repetitions are appended to the folder's journal
(`gatescope.bench.store`); a later run in the same folder with the same
seed, design, random-channel size and bootstrap size does only the
repetitions that are missing (more channels, count levels, methods or
repeats extend the bench). The table, ``bench.h5`` and the plot describe
the channels × shots × methods × repetitions 0 … R−1 of the run that wrote
them, also when it was interrupted (Ctrl-C writes them before stopping).

Parallel work goes through `gatescope.parallel.Runner`, a few repetitions
per task; the workers receive the simulated experiments once.
"""

from __future__ import annotations

import hashlib
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..bootstrap import draw_seed
from ..errors import InputError
from ..estimators import METHODS
from ..intervals import DEFAULT_INTERVAL, INTERVALS
from ..merit import FIGURE_NAMES, STATE_FIGURE_ORDER
from ..model import MeasurementModel, StateModel
from ..options import choice, flag, fraction, positive, whole
from ..options import seed as check_seed
from ..options import workers as check_workers
from ..parallel import Runner
from ..progress import Progress
from ..provenance import provenance
from ..reader import read_experiment
from ..synth.simulate import acquisition, channel_from_spec, label_set, write_experiment
from ..synth.state import state_acquisition, state_from_spec, write_state_experiment
from . import crb, store, table
from .measures import Case, Truth, repetition

DEFAULT_SHOTS = (100.0, 1000.0, 10000.0)
DEFAULT_REPEATS = 50
#: Repetitions per task: small, so that an interruption loses little and the progress
#: bar moves, yet several, so that the fast estimators are not dominated by messaging.
CHUNK = 4
#: Settings every repetition depends on; a folder keeps them for good.
FIXED_SETTINGS = ("seed", "prep", "meas", "qubits", "bootstrap", "kind")
#: Python argument → command-line option, for messages about options.
OPTION_FLAGS = {"channels": "--channel", "states": "--state", "address": "--dask",
                "outdir": "--output"}
#: The argument that lists the cases of a bench of each kind.
CASE_ARGUMENT = {"process": "channels", "state": "states"}


def repetition_seed(seed: int, channel: str, qubits: int, shots: float, method: str,
                    rep: int, *extra: str) -> int:
    """The seed of one repetition: the first 63 bits of SHA-256 of its key."""
    text = "|".join([str(int(seed)), channel, str(int(qubits)), repr(float(shots)), method,
                     str(int(rep)), *extra])
    return int.from_bytes(hashlib.sha256(text.encode("utf-8")).digest()[:8], "little") >> 1


def _number_list(value, key: str) -> tuple[float, ...]:
    """``"100,1000"`` or a sequence of numbers → positive floats, in the order given."""
    parts = [p.strip() for p in value.split(",")] if isinstance(value, str) else list(value)
    out = []
    for part in parts:
        try:
            number = float(part)
        except (TypeError, ValueError):
            raise InputError(f"{part!r} is not a number (give a comma list such as "
                             "100,1000,10000)", key=key) from None
        out.append(positive(number, key))
    if not out or len(set(out)) != len(out):
        raise InputError("give one or more different count levels", key=key)
    return tuple(out)


def _name_list(value, key: str, choices, what: str) -> tuple[str, ...]:
    parts = [p.strip() for p in value.split(",")] if isinstance(value, str) else list(value)
    if not parts or len(set(parts)) != len(parts):
        raise InputError(f"give one or more different {what}s", key=key)
    return tuple(choice(p, choices, key, what) for p in parts)


@dataclass(frozen=True)
class BenchOptions:
    """The checked options of a bench (see `run_bench`). ``channels`` holds the SPECs of
    the cases: channels, or states when ``kind`` is ``"state"`` (``prep`` empty)."""

    channels: tuple[str, ...]
    shots: tuple[float, ...]
    methods: tuple[str, ...]
    prep: tuple[str, ...]
    meas: tuple[str, ...]
    qubits: int
    repeats: int
    bootstrap: int
    interval: str
    ci_level: float
    seed: int | None
    workers: int
    kind: str = "process"


def _spec_list(specs) -> tuple[str, ...]:
    if isinstance(specs, str):
        specs = [specs]
    return tuple(str(c).strip() for c in specs or ())


def check_bench_options(channels, *, states=None, shots=DEFAULT_SHOTS, methods=None, prep=None,
                        meas="pauli6", qubits: int = 2, repeats: int = DEFAULT_REPEATS,
                        bootstrap: int = 0, interval: str = DEFAULT_INTERVAL,
                        ci_level: float = 0.95, seed=None, workers=None,
                        command_line: bool = False) -> BenchOptions:
    """Check every option before any computation: an InputError naming the option
    (by its command-line flag with ``command_line``).

    ``channels`` or ``states`` (not both) lists the cases; ``prep`` (default
    ``pauli6``) applies to channels only.
    """
    def name(key):
        return OPTION_FLAGS.get(key, flag(key)) if command_line else key

    channels, states = _spec_list(channels), _spec_list(states)
    if channels and states:
        raise InputError("a bench holds channels or states, not both: give --channel or "
                         "--state, and bench the other kind in another folder",
                         key=name("states"))
    kind = "state" if states else "process"
    specs, what = (states, "state") if states else (channels, "channel")
    argument = CASE_ARGUMENT[kind]
    if not specs:
        raise InputError("give at least one channel SPEC (or state SPEC)", key=name("channels"))
    if len(set(specs)) != len(specs):
        raise InputError(f"a {what} is listed twice", key=name(argument))
    if kind == "state" and prep is not None:
        raise InputError("a state bench has no preparations (its analysers are --meas)",
                         key=name("prep"))
    qubits = whole(qubits, name("qubits"), 1, 6)
    from_spec = state_from_spec if kind == "state" else channel_from_spec
    for spec in specs:
        try:
            from_spec(spec, qubits)
        except ValueError as exc:
            raise InputError(str(exc), key=name(argument)) from None
    sets = {"prep": ()}
    wanted = [("meas", meas)]
    if kind == "process":
        wanted.insert(0, ("prep", "pauli6" if prep is None else prep))
    for key, value in wanted:
        try:
            sets[key] = label_set(value)
        except ValueError as exc:
            raise InputError(str(exc), key=name(key)) from None
    bootstrap = whole(bootstrap, name("bootstrap"), 0)
    if bootstrap == 1:
        raise InputError("a bootstrap needs at least 2 resamples (0: none)", key=name("bootstrap"))
    return BenchOptions(
        channels=specs, shots=_number_list(shots, name("shots")),
        methods=_name_list(METHODS if methods is None else methods, name("methods"), METHODS,
                           "method"),
        prep=sets["prep"], meas=sets["meas"], qubits=qubits,
        repeats=whole(repeats, name("repeats"), 1), bootstrap=bootstrap,
        interval=choice(interval, INTERVALS, name("interval"), "interval"),
        ci_level=fraction(ci_level, name("ci_level")), seed=check_seed(seed, name("seed")),
        workers=check_workers(workers, name("workers")), kind=kind)


@dataclass
class BenchOutcome:
    """What `run_bench` did and wrote."""

    rows: list[dict]
    columns: list[str]
    folder: Path
    csv: Path
    h5: Path
    plot: Path | None
    notes: list[str]
    new: int
    reused: int
    seed: int
    kind: str = "process"


# --------------------------------------------------------------------------
# Cases: the simulated experiments, built once in the calling process
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class _Item:
    case: int
    method: str
    rep: int
    seed: int


def _design(opts: BenchOptions, source, shots: float, folder: Path, spec: str):
    """The acquisition of one case, its experiment written into ``folder`` and read back
    (as a fit would see it) and its model: every (prep, meas) pair of a channel, or every
    analyser of a state (one global intensity, the experiment `simulate --state` writes)."""
    if opts.kind == "state":
        acq = state_acquisition(source, shots=shots, meas_set=opts.meas)
        run = acq.draw(0)
        exp = read_experiment(write_state_experiment(
            folder, source, list(zip(acq.meas, run.expected, run.counts)),
            title=f"bench {spec}"))
        return acq, exp, StateModel.from_experiment(exp)
    acq = acquisition(source, shots=shots, prep_set=opts.prep, meas_set=opts.meas)
    exp = read_experiment(write_experiment(folder, source, acq.draw(0).rows,
                                           title=f"bench {spec}", extra_toml=acq.toml_keys(),
                                           columns=acq.columns()))
    return acq, exp, MeasurementModel(exp)


def _info(opts: BenchOptions, spec: str, source, acq, model, truth: Truth) -> dict:
    """What bench.h5 keeps of a case's truth and design (`store.write_bench`)."""
    info = {"spec": spec, "qubits": source.n_qubits, "target": source.target or "",
            "figure_names": list(truth.figures), "figure_values": list(truth.figures.values()),
            "meas": list(acq.meas)}
    if opts.kind == "state":
        return {**info, "full_rank": crb.full_rank(source.choi), "rho": source.choi}
    return {**info, "trace": "decreasing" if model.trace_decreasing else "preserving",
            "full_rank": crb.full_rank(source.choi, trace_decreasing=model.trace_decreasing),
            "choi": source.choi, "prep": list(acq.prep)}


def _build_cases(opts: BenchOptions, workdir: Path):
    """One `Case` per channel (or state) × shots (`_design`), the truth of every case and
    its bound at every shots."""
    cases, bounds, notes, infos = [], [], [], []
    from_spec = state_from_spec if opts.kind == "state" else channel_from_spec
    for c, spec in enumerate(opts.channels):
        source = from_spec(spec, opts.qubits)
        truth = None
        for s, shots in enumerate(opts.shots):
            acq, exp, model = _design(opts, source, shots, workdir / f"{c}-{s}", spec)
            if truth is None:
                target = exp.target_state if opts.kind == "state" else exp.target
                truth = Truth.of(source.choi, target, kind=opts.kind)
                infos.append(_info(opts, spec, source, acq, model, truth))
            intensities = (None if model.fixed_intensities is not None
                           else np.full(model.n_groups, acq.rate))
            try:
                bound = crb.hs_crb(model, source.choi, intensities)
            except ValueError as exc:          # too large for the dense information
                bound = None
                if s == 0:
                    notes.append(f"{spec}: no Cramér–Rao bound ({exc})")
            bounds.append({"channel": c, "shots": shots, "hs_crb": bound})
            cases.append(Case(spec, source.n_qubits, shots, model, acq, truth, kind=opts.kind))
    return cases, bounds, notes, infos


def _repetition_task(shared, item: _Item) -> dict:
    """One repetition in a worker: draw the run, fit, measure (`measures.repetition`)."""
    cases, bootstrap, seed = shared
    case = cases[item.case]
    run = case.acquisition.draw(item.seed)
    boot_seed = (repetition_seed(seed, case.channel, case.qubits, case.shots, item.method,
                                 item.rep, "bootstrap") if bootstrap else None)
    record = repetition(case, run.counts, item.method, bootstrap=bootstrap,
                        bootstrap_seed=boot_seed)
    return {"channel": case.channel, "qubits": case.qubits, "shots": case.shots,
            "method": item.method, "repetition": item.rep, "seed": item.seed,
            "bootstrap": bootstrap, **record}


def _key(record) -> tuple:
    return (record["channel"], int(record["qubits"]), float(record["shots"]), record["method"],
            int(record["repetition"]))


# --------------------------------------------------------------------------
# The bench
# --------------------------------------------------------------------------

def _settings(opts: BenchOptions, folder: Path, names) -> dict:
    """The folder's fixed settings: those stored, checked against these options; or new."""
    mine = {"format": store.FORMAT, "seed": opts.seed, "prep": list(opts.prep),
            "meas": list(opts.meas), "qubits": opts.qubits, "bootstrap": opts.bootstrap,
            "kind": opts.kind}
    stored = store.read_settings(folder)
    if stored is None:
        if mine["seed"] is None:
            mine["seed"] = draw_seed()
        store.write_settings(folder, mine)
        return mine
    if mine["seed"] is None:
        mine["seed"] = stored["seed"]
    stored.setdefault("kind", "process")          # folders written before state benches
    if stored["kind"] != mine["kind"]:
        raise InputError(f"the bench in {folder} holds {CASE_ARGUMENT[stored['kind']]}, not "
                         f"{CASE_ARGUMENT[mine['kind']]}: bench them in another folder",
                         key=names(CASE_ARGUMENT[mine["kind"]]))
    for key in FIXED_SETTINGS:
        if stored.get(key) != mine[key]:
            raise InputError(f"the bench in {folder} was run with {key} {stored.get(key)!r}, "
                             f"not {mine[key]!r}: use the same value to extend it, or another "
                             "folder", key=names(key))
    return stored


def run_bench(channels, outdir, *, states=None, shots=DEFAULT_SHOTS, methods=None, prep=None,
              meas="pauli6", qubits: int = 2, repeats: int = DEFAULT_REPEATS,
              bootstrap: int = 0, interval: str = DEFAULT_INTERVAL, ci_level: float = 0.95,
              seed: int | None = None, workers: int | None = None, address: str | None = None,
              progress: bool = False, plot: bool = True, command_line: str | None = None,
              flags: bool = False) -> BenchOutcome:
    """Run (or extend) a bench in folder ``outdir`` and write its table, file and plot.

    Parameters
    ----------
    channels : SPEC or list of SPECs, or None
        Known channels (`gatescope.synth.noise`: gates with noise, bench
        imperfections, ``random:RANK[:SEED]``); None (or empty) for a state
        bench.
    outdir : folder
        Holds settings.json, runs.jsonl, bench.h5, bench.csv and bench.png.
    states : SPEC or list of SPECs, optional
        Known states instead of channels (`gatescope.synth.state`:
        ``STATE[+KIND:P]...``, ``random:RANK[:SEED]``); not with ``channels``.
    shots : sequence of numbers or a comma list
        Count levels: expected counts per preparation and analyser basis
        (per analyser basis for a state).
    methods : sequence of names or a comma list, optional
        Estimators (default: every registered one).
    prep, meas : str
        ``pauli6``, ``pauli4`` or a comma list of single-qubit labels
        (``prep`` default ``pauli6``; an error for a state bench).
    qubits : int
        Size of ``random:`` channels (of GHZ, W and random states).
    repeats : int
        Repetitions per channel × shots × method.
    bootstrap : int
        Parametric-bootstrap resamples per repetition (0: none) for the
        coverage of the intervals of every bootstrapped figure.
    interval, ci_level : str, float
        The interval construction and level whose coverage the table
        reports (`gatescope.intervals`); the bootstrap values are stored, so
        these may change between runs of one folder.
    seed : int, optional
        The bench seed (drawn and recorded for a new folder; a folder's own
        seed is used when not given).
    workers : int, optional
        Local processes (default: every core); ``address`` a dask scheduler.
    progress, plot : bool
        Show progress on stderr; draw bench.png (needs matplotlib, the
        ``plot`` extra; skipped with a note without it).
    flags : bool
        Name options by their command-line flags in errors.

    Returns
    -------
    BenchOutcome

    Raises
    ------
    InputError
        For a bad option, or settings that differ from the folder's.
    """
    opts = check_bench_options(channels, states=states, shots=shots, methods=methods, prep=prep,
                               meas=meas, qubits=qubits, repeats=repeats, bootstrap=bootstrap,
                               interval=interval, ci_level=ci_level, seed=seed, workers=workers,
                               command_line=flags)

    def names(key):
        return OPTION_FLAGS.get(key, flag(key)) if flags else key

    folder = Path(outdir)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"{folder} is not a folder", key=names("outdir"))
    folder.mkdir(parents=True, exist_ok=True)
    started = time.time()
    t0 = time.perf_counter()
    settings = _settings(opts, folder, names)
    bench_seed = int(settings["seed"])
    with tempfile.TemporaryDirectory(prefix="gatescope-bench-") as tmp:
        cases, bounds, notes, infos = _build_cases(opts, Path(tmp))

    journal = store.Journal(folder)
    records = {_key(r): r for r in journal.read()}
    wanted = []
    for index, case in enumerate(cases):
        for method in opts.methods:
            for rep in range(opts.repeats):
                wanted.append((index, method, rep))
    todo = [_Item(i, m, r, repetition_seed(bench_seed, cases[i].channel, cases[i].qubits,
                                           cases[i].shots, m, r))
            for i, m, r in wanted
            if (cases[i].channel, cases[i].qubits, cases[i].shots, m, r) not in records]
    reused = len(wanted) - len(todo)
    new = 0
    try:
        if todo:
            with journal, Runner(opts.workers, shared=(cases, opts.bootstrap, bench_seed),
                                 address=address) as runner, \
                    Progress(len(todo), "bench", "fit", enabled=progress) as bar:
                for _, record in runner.map(_repetition_task, todo, chunk=CHUNK):
                    journal.append(record)
                    records[_key(record)] = record
                    new += 1
                    bar.update(1)
    except KeyboardInterrupt:
        _write_outputs(opts, folder, cases, bounds, infos, records, settings, notes, plot,
                       command_line, started, time.perf_counter() - t0, new, reused)
        raise
    return _write_outputs(opts, folder, cases, bounds, infos, records, settings, notes, plot,
                          command_line, started, time.perf_counter() - t0, new, reused)


def _write_outputs(opts, folder, cases, bounds, infos, records, settings, notes, plot,
                   command_line, started, wall, new, reused) -> BenchOutcome:
    """The table, bench.csv, bench.h5 and bench.png of the requested repetitions."""
    rows, chosen = [], []
    for index, case in enumerate(cases):
        c = opts.channels.index(case.channel)
        for method in opts.methods:
            group = [records[k] for k in
                     ((case.channel, case.qubits, case.shots, method, rep)
                      for rep in range(opts.repeats)) if k in records]
            chosen += [(c, r) for r in group]
            row = {"channel": case.channel, "qubits": case.qubits, "shots": case.shots,
                   "method": method}
            row.update(table.summarise(group, hs_crb=bounds[index]["hs_crb"],
                                       true_fidelity=case.truth.target_fidelity,
                                       truth_figures=case.truth.figures,
                                       dim=case.model.dim, interval=opts.interval,
                                       level=opts.ci_level, kind=opts.kind))
            rows.append(row)
    table.add_slopes(rows)
    rows = table.named_for(rows, opts.kind)
    columns = table.columns_of(rows, opts.kind)
    csv_path = table.write_csv(folder / store.CSV, rows, columns)
    word = table.case_column(opts.kind)
    runs, figure_names = _runs_arrays(chosen, opts.bootstrap, opts.kind)
    bounds = [{word: b["channel"], "shots": b["shots"], "hs_crb": b["hs_crb"]} for b in bounds]
    prov = provenance(seed=settings["seed"], command_line=command_line, started=started, wall=wall)
    h5_settings = {**{k: settings[k] for k in FIXED_SETTINGS},
                   f"{word}s": list(opts.channels), "shots": list(opts.shots),
                   "methods": list(opts.methods), "repeats": opts.repeats,
                   "bootstrap_kind": "parametric", "interval": opts.interval,
                   "ci_level": opts.ci_level, "chunk": CHUNK}
    h5_path = store.write_bench(folder / store.H5, settings=h5_settings, provenance=prov,
                                channels=infos, bounds=bounds, runs=runs,
                                figure_names=figure_names, table=rows, columns=columns,
                                kind=opts.kind)
    plot_path = None
    notes = list(notes)
    if plot:
        from ..report.plots import PlotUnavailable, error_against_counts

        try:
            plot_path = error_against_counts(_panels(rows, word), folder / "bench.png",
                                             **PLOT_LABELS[opts.kind])
        except PlotUnavailable as exc:
            notes.append(f"plot skipped: {exc}")
    return BenchOutcome(rows, columns, folder, csv_path, h5_path, plot_path, notes, new, reused,
                        int(settings["seed"]), opts.kind)


def _runs_arrays(chosen, bootstrap: int, kind: str = "process"):
    """Per-repetition columns of bench.h5 (NaN where a fit raised); the index of the case
    is the column ``channel`` (``state`` for a state bench)."""
    recs = [r for _, r in chosen]
    nan = float("nan")

    def col(name, default=nan):
        return [default if r.get("error") is not None else r[name] for r in recs]

    runs = {table.case_column(kind): np.array([c for c, _ in chosen], dtype=np.int64),
            "shots": np.array([r["shots"] for r in recs], dtype=float),
            "method": np.array([r["method"] for r in recs], dtype=object),
            "repetition": np.array([r["repetition"] for r in recs], dtype=np.int64),
            "seed": np.array([r["seed"] for r in recs], dtype=np.int64),
            "error": np.array([r.get("error") or "" for r in recs], dtype=object)}
    for name in ("hs_error", "infidelity", "trace_distance", "fidelity_error", "seconds"):
        runs[name] = np.array(col(name), dtype=float)
    runs["iterations"] = np.array(col("iterations", -1), dtype=np.int64)
    runs["converged"] = np.array(col("converged", False), dtype=bool)
    names = []
    if bootstrap:
        present = {n for r in recs for n in r.get("figure_names", [])}
        order = STATE_FIGURE_ORDER if kind == "state" else FIGURE_NAMES
        names = [n for n in order if n in present]
        point = np.full((len(recs), len(names)), nan)
        values = np.full((len(recs), bootstrap, len(names)), nan)
        failures = np.full(len(recs), -1, dtype=np.int64)
        for i, r in enumerate(recs):
            if r.get("error") is not None:
                continue
            cols = [names.index(n) for n in r["figure_names"]]
            point[i, cols] = r["point_figures"]
            values[i][:, cols] = np.array(r["bootstrap_values"], dtype=float)
            failures[i] = r["bootstrap_failures"]
        runs.update({"point_figures": point, "bootstrap_values": values,
                     "bootstrap_failures": failures})
    return runs, names


#: Axis labels of bench.png for each kind of bench.
PLOT_LABELS = {"process": {},
               "state": {"xlabel": "counts per analyser basis", "ylabel": "mean ‖ρ̂ − ρ‖²"}}


def _panels(rows: list[dict], word: str = "channel") -> list[dict]:
    """The data of the error-against-counts plot: one panel per channel (per state, with
    ``word`` ``"state"``)."""
    panels: dict = {}
    for r in rows:
        p = panels.setdefault((r[word], r["qubits"]), {
            "title": r[word], "series": {}, "bound": ([], [])})
        s = p["series"].setdefault(r["method"], {"shots": [], "value": [], "error": [],
                                                 "slope": r.get("hs_mse_slope")})
        if r["hs_mse"] is not None:
            s["shots"].append(r["shots"])
            s["value"].append(r["hs_mse"])
            s["error"].append(r["hs_mse_se"] or 0.0)
        bound = r.get("hs_crb")
        if bound is not None and np.isfinite(bound) and r["shots"] not in p["bound"][0]:
            p["bound"][0].append(r["shots"])
            p["bound"][1].append(bound)
    return list(panels.values())


__all__ = ["run_bench", "check_bench_options", "repetition_seed", "BenchOptions", "BenchOutcome",
           "DEFAULT_SHOTS", "DEFAULT_REPEATS", "CHUNK"]
