"""The factored maximum-likelihood solver against the projected-gradient one, as ratios.

    python benchmarks/solver_speed.py [--cases 2q-dark 2q-near 2q-full 3q-full ...]
                                        [--repeats 7] [--repeats-3q 3] [--resamples 50]
                                        [--skip-4q] [--old-4q] [--json PATH]

Both solvers (``mle-pg``, `gatescope.estimators.mle.fit_mle`, FISTA with CPTP
projections, and ``mle``, `gatescope.estimators.factored.fit_mle_factored`,
Riemannian L-BFGS over the Kraus isometry) run on the same data in this one process, one thread (the thread
variables are set before numpy is imported), warm: each solver fits every
data set once before anything is timed, so the numba kernels are compiled
(or loaded from the cache) first. Timed runs alternate old, new, old, new, …
and the table gives the medians and the ratio old/new (> 1: the factored
solver is faster), the iterations, whether each converged, and the relative
likelihood difference (ℓ_new − ℓ_old)/|ℓ_old| (≥ 0: the factored estimate
is at least as likely).

Data (simulated full six-state sets, 1000 expected counts per preparation
and analyser basis; an invented bench):

* ``2q-dark``: CZ+zz:0.2 plus dark counts — 1 or 2 counts added to six rows
  whose expected counts are below 1e−3 of the shots;
* ``2q-near``: CZ+zz:0.2; ``2q-full``: CZ+depolarizing:0.2;
* ``3q-full``, ``3q-full-dark``: a Toffoli (qubits 1 and 2 control) followed
  by zz:0.1 and depolarizing:0.03, without and with six dark rows
  (``3q-full-dark`` is reported as not run: at this depolarisation no row
  expects fewer than 1e−3 of the shots);
* ``3q-light``, ``3q-light-dark``: the same with depolarizing:0.003 (still
  full rank, small eigenvalues), without and with six dark rows;
* ``3q-near``, ``3q-near-dark``: the Toffoli followed by zz:0.2;
* ``2q-tni-1/9``, ``2q-tni-0.5``: lossy gates fitted over trace non-increasing
  maps (``trace = "decreasing"``, known input rate 9000 per second and basis,
  global normalisation): a CZ with depolarizing:0.05 succeeding with
  probability 1/9, and a CZ with zz:0.2 succeeding with probability 0.5 (the
  old solver projects with Dykstra's alternating projections, the factored
  one uses the completed isometry);
* ``4q`` (once; ``--skip-4q`` leaves it out): CNOT⊗CNOT followed by zz:0.1
  and depolarizing:0.03, the factored solver only unless ``--old-4q``; wall
  and CPU time (one thread, so the CPU time is what the fit costs on a busy
  machine) and peak resident memory (VmHWM of this process after a reset
  before the fit; the resident data are included);
* ``boot``: bootstrap refits of ``2q-dark`` and ``2q-near``: parametric
  Poisson resamples of the fitted model (the old solver's point estimate,
  which is also every refit's start, as in ``gatescope.bootstrap``), each
  refitted by the old solver and by the factored solver warm started in its
  two modes (``warm="mix"``: mixed with 1e−3 of the depolarising channel like
  a cold start; ``warm="rank"``: at the rank of the start). Medians per
  refit, ratio of medians, and the worst relative likelihood difference;
* ``kernels``: the factored solver with its numba kernels (forced at every
  size) against the same solver with their NumPy twins swapped in, on
  ``2q-dark``, ``2q-full`` and ``3q-near`` (does compiling pay? the solver
  itself uses the kernels up to d = 4 only).

Prints a Markdown table; ``--json`` also writes the raw numbers with the
command line, the commit, the time and the load average of the machine
before and after the run (timings on a shared machine drift with its load;
the ratios, same process and alternating, much less).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

THREAD_VARS = ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")
for _var in THREAD_VARS:
    os.environ[_var] = "1"

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from memory import peak_mb, reset_peak  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "engine"))

from gatescope.channels import choi_from_unitary, compose  # noqa: E402
from gatescope.conventions import named_gate  # noqa: E402
from gatescope.estimators import factored  # noqa: E402
from gatescope.estimators.factored import fit_mle_factored  # noqa: E402
from gatescope.estimators.mle import fit_mle  # noqa: E402
from gatescope.reader import read_experiment  # noqa: E402
from gatescope.model import MeasurementModel  # noqa: E402
from gatescope.synth.noise import noise_channel  # noqa: E402
from gatescope.synth.simulate import Channel, channel_from_spec, simulate_counts, write_experiment  # noqa: E402

SHOTS = 1000.0
SEED = 7
DARK_ROWS = 6

CASES = {
    "2q-dark": ("CZ+zz:0.2", 2, True),
    "2q-near": ("CZ+zz:0.2", 2, False),
    "2q-full": ("CZ+depolarizing:0.2", 2, False),
    "3q-full": ("Toffoli+zz:0.1+depolarizing:0.03", 3, False),
    "3q-full-dark": ("Toffoli+zz:0.1+depolarizing:0.03", 3, True),
    "3q-light": ("Toffoli+zz:0.1+depolarizing:0.003", 3, False),
    "3q-light-dark": ("Toffoli+zz:0.1+depolarizing:0.003", 3, True),
    "3q-near": ("Toffoli+zz:0.2", 3, False),
    "3q-near-dark": ("Toffoli+zz:0.2", 3, True),
}
CASE_4Q = ("CNOT⊗CNOT+zz:0.1+depolarizing:0.03", 4, False)
TNI_RATE = 9000.0
TNI_CASES = {"2q-tni-1/9": (1 / 9, "depolarizing:0.05"), "2q-tni-0.5": (0.5, "zz:0.2")}
BOOT_CASES = ("2q-dark", "2q-near")


def make_channel(spec: str, n_qubits: int) -> Channel:
    """A named gate via the channel SPEC; from three qubits a Toffoli or CNOT⊗CNOT."""
    if n_qubits <= 2:
        return channel_from_spec(spec, n_qubits)
    gate, *noise = spec.split("+")
    if gate == "Toffoli":
        u = np.eye(8, dtype=complex)
        u[6:, 6:] = [[0, 1], [1, 0]]
    else:
        u = np.kron(named_gate("CNOT"), named_gate("CNOT"))
    choi = choi_from_unitary(u)
    for term in noise:
        kind, value = term.split(":")
        choi = compose(choi, noise_channel(kind, float(value), n_qubits))
    return Channel(choi, n_qubits, None, spec)


def make_model(spec: str, n_qubits: int, dark: bool, folder: Path):
    """Simulated experiment → MeasurementModel; with ``dark``, 1–2 counts added to
    DARK_ROWS rows whose expected counts are below 1e−3·SHOTS."""
    channel = make_channel(spec, n_qubits)
    rows = list(simulate_counts(channel, shots=SHOTS, seed=SEED))
    dark_rows = []
    if dark:
        rng = np.random.default_rng(SEED + 1000)
        low = [k for k, row in enumerate(rows) if row[2] < 1e-3 * SHOTS]
        if len(low) < DARK_ROWS:
            return None, f"only {len(low)} rows expect fewer than {1e-3 * SHOTS:g} counts"
        for k in rng.choice(low, size=DARK_ROWS, replace=False):
            prep, meas, expected, count = rows[k]
            extra = int(rng.integers(1, 3))
            rows[k] = (prep, meas, expected, count + extra)
            dark_rows.append((prep, meas, float(expected), count + extra))
    path = write_experiment(folder, channel, rows, title=f"factored bench {spec}")
    return MeasurementModel(read_experiment(path)), dark_rows


def make_tni_model(success: float, noise: str, folder: Path):
    """A postselected CZ, Φ = success·(CZ + noise), fitted over trace non-increasing maps."""
    from gatescope.synth.noise import build_channel

    kind, value = noise.split(":")
    choi = success * build_channel("CZ", [(kind, float(value))], 2)
    rows = simulate_counts(Channel(choi, 2, "CZ", "postselected CZ"), shots=TNI_RATE, seed=SEED)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "counts.csv").write_text(
        "prep,meas,counts\n" + "".join(f"{p},{m},{c}\n" for p, m, _, c in rows))
    (folder / "experiment.toml").write_text(
        'qubits = 2\ntarget = "CZ"\ncounts = "counts.csv"\nnormalization = "global"\n'
        f'trace = "decreasing"\ninput_rate = {TNI_RATE}\n')
    return MeasurementModel(read_experiment(folder / "experiment.toml"))


def rel(new: float, old: float) -> float:
    return (new - old) / abs(old)


def time_pair(model, repeats: int, **common):
    """Alternate old and new ``repeats`` times; medians, last fits."""
    t_old, t_new = [], []
    old = new = None
    for _ in range(repeats):
        t = time.perf_counter()
        old = fit_mle(model, **common)
        t_old.append(time.perf_counter() - t)
        t = time.perf_counter()
        new = fit_mle_factored(model, **common)
        t_new.append(time.perf_counter() - t)
    return float(np.median(t_old)), float(np.median(t_new)), old, new


def run_case(name, spec, n_qubits, dark, folder, repeats):
    if name in TNI_CASES:
        success, noise = TNI_CASES[name]
        model, dark_rows = make_tni_model(success, noise, folder / name.replace("/", "_")), []
        spec = f"{success:.3g}·(CZ+{noise})"
    else:
        model, dark_rows = make_model(spec, n_qubits, dark, folder / name)
    if model is None:
        return {"case": name, "spec": spec, "qubits": n_qubits, "skipped": dark_rows}
    warm = dict(maxiter=3) if n_qubits >= 3 else {}
    fit_mle(model, **warm)                      # compile / load kernels, warm caches
    fit_mle_factored(model, **warm)
    t_old, t_new, old, new = time_pair(model, repeats)
    return {"case": name, "spec": spec, "qubits": n_qubits, "rows": model.n_rows,
            "dark_rows": dark_rows, "repeats": repeats,
            "old_s": t_old, "new_s": t_new, "ratio": t_old / t_new,
            "old_iterations": old.iterations, "new_iterations": new.iterations,
            "old_converged": old.converged, "new_converged": new.converged,
            "old_ll": old.log_likelihood, "new_ll": new.log_likelihood,
            "rel_ll": rel(new.log_likelihood, old.log_likelihood),
            "old_residual": old.info["optimality_residual"],
            "new_residual": new.info["optimality_residual"],
            "new_rank": new.info["rank"], "new_gap_bound": new.info["gap_bound"],
            "new_stop": new.stop_reason}


def run_4q(folder, with_old: bool):
    spec, n, dark = CASE_4Q
    t = time.perf_counter()
    model, _ = make_model(spec, n, dark, folder / "4q")
    read_s = time.perf_counter() - t
    fit_mle_factored(model, maxiter=2)            # kernels
    out = {"case": "4q", "spec": spec, "qubits": 4, "rows": model.n_rows, "read_s": read_s,
           "peak_mb_after_read": peak_mb()}
    reset_peak()
    t = time.perf_counter()
    c = time.process_time()
    new = fit_mle_factored(model)
    out.update(new_s=time.perf_counter() - t, new_cpu_s=time.process_time() - c,
               new_peak_mb=peak_mb(), new_ll=new.log_likelihood,
               new_iterations=new.iterations, new_converged=new.converged,
               new_residual=new.info["optimality_residual"], new_rank=new.info["rank"],
               new_stop=new.stop_reason, new_gap_bound=new.info["gap_bound"])
    if with_old:
        fit_mle(model, maxiter=2)
        reset_peak()
        t = time.perf_counter()
        c = time.process_time()
        old = fit_mle(model)
        out.update(old_s=time.perf_counter() - t, old_cpu_s=time.process_time() - c,
                   old_peak_mb=peak_mb(),
                   old_ll=old.log_likelihood, old_iterations=old.iterations,
                   old_converged=old.converged, old_residual=old.info["optimality_residual"],
                   ratio=(time.perf_counter() - t) / out["new_s"],
                   rel_ll=rel(new.log_likelihood, old.log_likelihood))
        out["ratio"] = out["old_s"] / out["new_s"]
    return out


def run_bootstrap(name, folder, resamples: int):
    spec, n, dark = CASES[name]
    model, _ = make_model(spec, n, dark, folder / f"boot-{name}")
    point = fit_mle(model)
    fit_mle_factored(model, start=point.choi)
    fit_mle_factored(model, start=point.choi, warm="rank")
    means = np.maximum(model.expected_counts(point.choi, point.intensities), 0.0)
    solvers = {
        "old": lambda c: fit_mle(model, counts=c, start=point.choi),
        "new-mix": lambda c: fit_mle_factored(model, counts=c, start=point.choi, warm="mix"),
        "new-rank": lambda c: fit_mle_factored(model, counts=c, start=point.choi, warm="rank"),
    }
    times = {k: [] for k in solvers}
    lls = {k: [] for k in solvers}
    conv = {k: 0 for k in solvers}
    iters = {k: [] for k in solvers}
    for ss in np.random.SeedSequence(SEED).spawn(resamples):
        counts = np.random.default_rng(ss).poisson(means).astype(float)
        for key, fn in solvers.items():
            t = time.perf_counter()
            fit = fn(counts)
            times[key].append(time.perf_counter() - t)
            lls[key].append(fit.log_likelihood)
            conv[key] += bool(fit.converged)
            iters[key].append(fit.iterations)
    old_ll = np.array(lls["old"])
    out = {"case": f"boot/{name}", "spec": spec, "resamples": resamples,
           "old_s": float(np.median(times["old"])), "old_total_s": float(np.sum(times["old"])),
           "old_converged": conv["old"], "old_iterations": float(np.median(iters["old"]))}
    for key in ("new-mix", "new-rank"):
        ll = np.array(lls[key])
        out[key] = {"median_s": float(np.median(times[key])),
                    "total_s": float(np.sum(times[key])),
                    "ratio_of_medians": float(np.median(times["old"]) / np.median(times[key])),
                    "median_ratio": float(np.median(np.array(times["old"]) / np.array(times[key]))),
                    "worst_rel_ll": float(np.min((ll - old_ll) / np.abs(old_ll))),
                    "converged": conv[key], "median_iterations": float(np.median(iters[key]))}
    return out


KERNEL_CASES = ("2q-dark", "2q-full", "3q-near")
KERNELS = ("lbfgs_direction", "lbfgs_pair", "polar_rows", "tangent_project")


def run_kernels(folder, repeats: int):
    """Factored solver with the numba kernels vs. with their NumPy twins, alternating."""
    compiled = {name: getattr(factored, name) for name in KERNELS}
    twins = {name: getattr(factored, name + "_numpy") for name in KERNELS}
    max_dim = factored.KERNEL_MAX_DIM
    factored.KERNEL_MAX_DIM = 1 << 30          # the kernels at every size, for this comparison
    out = []
    for name in KERNEL_CASES:
        spec, n, dark = CASES[name]
        model, _ = make_model(spec, n, dark, folder / f"kern-{name}")
        times = {"numba": [], "numpy": []}
        fits = {}
        for _ in range(1 + (repeats if n <= 2 else max(1, repeats // 2))):
            for label, table_ in (("numba", compiled), ("numpy", twins)):
                for k, fn in table_.items():
                    setattr(factored, k, fn)
                t = time.perf_counter()
                fits[label] = fit_mle_factored(model)
                times[label].append(time.perf_counter() - t)
        for k, fn in compiled.items():
            setattr(factored, k, fn)
        factored.KERNEL_MAX_DIM = max_dim if name == KERNEL_CASES[-1] else 1 << 30
        t_nb = float(np.median(times["numba"][1:]))
        t_np = float(np.median(times["numpy"][1:]))
        out.append({"case": f"kernels/{name}", "numba_s": t_nb, "numpy_s": t_np,
                    "ratio": t_np / t_nb, "iterations": [fits["numba"].iterations,
                                                         fits["numpy"].iterations]})
    return out


def fmt(x, digits=3):
    if x is None:
        return ""
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, (int, np.integer)):
        return str(x)
    return f"{x:.{digits}g}"


def table(results) -> str:
    lines = ["| case | rows | old (s) | new (s) | old/new | iterations old/new | converged old/new "
             "| (ℓ_new − ℓ_old)/|ℓ_old| | residual old/new | rank new |",
             "|---|---|---|---|---|---|---|---|---|---|"]
    for r in results:
        if r["case"].startswith(("boot/", "kernels/")) or r["case"] == "4q":
            continue
        if "skipped" in r:
            lines.append(f"| {r['case']} | | | | | | | | | not run: {r['skipped']} |")
            continue
        lines.append(
            f"| {r['case']} | {r['rows']} | {fmt(r.get('old_s'))} | {fmt(r['new_s'])} "
            f"| {fmt(r.get('ratio'), 3)} | {fmt(r.get('old_iterations'))}/{fmt(r['new_iterations'])} "
            f"| {fmt(r.get('old_converged'))}/{fmt(r['new_converged'])} | {fmt(r.get('rel_ll'), 2)} "
            f"| {fmt(r.get('old_residual'), 2)}/{fmt(r['new_residual'], 2)} | {r['new_rank']} |")
    boots = [r for r in results if r["case"].startswith("boot/")]
    if boots:
        lines += ["", "| bootstrap refits | resamples | old median (s) | solver | median (s) "
                  "| ratio of medians | median of ratios | total old/new (s) | worst (ℓ_new − ℓ_old)/|ℓ_old| "
                  "| converged old/new | median iterations old/new |",
                  "|---|---|---|---|---|---|---|---|---|---|---|"]
        for r in boots:
            for key in ("new-mix", "new-rank"):
                b = r[key]
                lines.append(
                    f"| {r['case']} | {r['resamples']} | {fmt(r['old_s'])} | {key} | {fmt(b['median_s'])} "
                    f"| {fmt(b['ratio_of_medians'])} | {fmt(b['median_ratio'])} "
                    f"| {fmt(r['old_total_s'])}/{fmt(b['total_s'])} | {fmt(b['worst_rel_ll'], 2)} "
                    f"| {r['old_converged']}/{b['converged']} "
                    f"| {fmt(r['old_iterations'])}/{fmt(b['median_iterations'])} |")
    kern = [r for r in results if r["case"].startswith("kernels/")]
    if kern:
        lines += ["", "| factored solver | numba kernels (s) | NumPy twins (s) | twins/kernels | iterations |",
                  "|---|---|---|---|---|"]
        for r in kern:
            lines.append(f"| {r['case']} | {fmt(r['numba_s'])} | {fmt(r['numpy_s'])} "
                         f"| {fmt(r['ratio'])} | {r['iterations'][0]}/{r['iterations'][1]} |")
    for r in results:
        if r["case"] == "4q":
            lines += ["", f"4 qubits ({r['rows']} rows): factored {fmt(r['new_s'])} s "
                      f"({fmt(r['new_cpu_s'])} s CPU), peak "
                      f"{fmt(r['new_peak_mb'])} MB (process, data included; "
                      f"{fmt(r['peak_mb_after_read'])} MB after reading), {r['new_iterations']} "
                      f"iterations, converged {fmt(r['new_converged'])}, residual "
                      f"{fmt(r['new_residual'], 2)}, rank {r['new_rank']}"
                      + (f"; old {fmt(r['old_s'])} s ({fmt(r['old_cpu_s'])} s CPU), peak "
                         f"{fmt(r['old_peak_mb'])} MB, "
                         f"{r['old_iterations']} iterations, ratio {fmt(r['ratio'])}, "
                         f"(ℓ_new − ℓ_old)/|ℓ_old| = {fmt(r['rel_ll'], 2)}" if "old_s" in r else "")]
    return "\n".join(lines)


def _commit() -> str | None:
    import subprocess

    try:
        return subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=HERE,
                              capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return None


def _loadavg():
    try:
        return list(os.getloadavg())
    except OSError:
        return None


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="*", default=list(CASES) + list(TNI_CASES) + ["boot", "kernels"],
                    help="cases to run (default all; 'boot': the bootstrap refits, "
                         "'kernels': numba kernels vs NumPy twins)")
    ap.add_argument("--repeats", type=int, default=7, help="timed runs per solver, 2 qubits")
    ap.add_argument("--repeats-3q", type=int, default=3, help="timed runs per solver, 3 qubits")
    ap.add_argument("--resamples", type=int, default=50, help="bootstrap resamples per data set")
    ap.add_argument("--skip-4q", action="store_true", help="leave out the 4-qubit fit")
    ap.add_argument("--old-4q", action="store_true", help="also run the old solver at 4 qubits")
    ap.add_argument("--json", type=Path, default=None, help="also write the raw numbers here")
    args = ap.parse_args(argv)
    meta = {"command": " ".join([Path(sys.argv[0]).name] + (argv if argv is not None else sys.argv[1:])),
            "commit": _commit(), "started_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "loadavg_before": _loadavg()}
    results = []
    with tempfile.TemporaryDirectory(prefix="factored-bench-") as tmp:
        folder = Path(tmp)
        for name in args.cases:
            if name in ("boot", "kernels"):
                continue
            spec, n, dark = CASES[name] if name in CASES else (None, 2, False)
            r = run_case(name, spec, n, dark, folder, args.repeats if n <= 2 else args.repeats_3q)
            results.append(r)
            if "skipped" in r:
                print(f"{name}: not run ({r['skipped']})", flush=True)
                continue
            print(f"{name}: old {r['old_s']:.4g} s, new {r['new_s']:.4g} s, ratio {r['ratio']:.3g}, "
                  f"rel ℓ {r['rel_ll']:.2g}", flush=True)
        if "boot" in args.cases:
            for name in BOOT_CASES:
                r = run_bootstrap(name, folder, args.resamples)
                print(f"boot/{name}: " + ", ".join(
                    f"{k} ratio {r[k]['ratio_of_medians']:.3g}" for k in ("new-mix", "new-rank")),
                    flush=True)
                results.append(r)
        if "kernels" in args.cases:
            for r in run_kernels(folder, args.repeats):
                print(f"{r['case']}: twins/kernels {r['ratio']:.3g}", flush=True)
                results.append(r)
        if not args.skip_4q:
            r = run_4q(folder, args.old_4q)
            print(f"4q: new {r['new_s']:.4g} s, peak {r['new_peak_mb']} MB", flush=True)
            results.append(r)
    print()
    print(table(results))
    if args.json:
        meta["loadavg_after"] = _loadavg()
        args.json.write_text(json.dumps({"meta": meta, "results": results}, indent=1,
                                        default=float))


if __name__ == "__main__":
    main()
