"""Plot of the coverage near the boundary (benchmarks/README.md, "Coverage near the boundary").

Reads the one-qubit CSVs of ``boundary_coverage.py`` (one per count level) and of
``lower_bound_coverage.py`` and draws, against the ratio of the infidelity to the spread
of the estimates, the coverage of the process fidelity's 95% intervals (top row) and
lower bounds (bottom row), one column per count level. Needs matplotlib (the ``plot``
extra).

    python benchmarks/boundary_plot.py
"""

from __future__ import annotations

import argparse
import csv
import math
import sys
from collections import defaultdict
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).parent / "results"
#: (count level, CSV of boundary_coverage.py) of the one-qubit map.
MAP = ((100, "boundary_coverage_100.csv"), (1000, "boundary_coverage.csv"),
       (10000, "boundary_coverage_10000.csv"))
CALIBRATED = ("lower_bound_coverage.csv", "two_sided_coverage.csv", "two_sided_coverage_100.csv",
              "two_sided_coverage_10000.csv")
MARKERS = {"white": "o", "overrotation": "s", "damping": "^"}


def _rows(name: str) -> list[dict]:
    path = RESULTS / name
    if not path.exists():
        return []
    with open(path, newline="") as fh:
        return [r for r in csv.DictReader(fh) if r.get("gate", "H") == "H"]


def _cells(rows, columns):
    """{(shots, kind, ratio): (infid./sd, {column: coverage})} of the rows."""
    groups = defaultdict(list)
    for r in rows:
        groups[(float(r["shots"]), r["kind"], float(r["ratio"]))].append(r)
    out = {}
    for key, g in groups.items():
        truth = np.array([float(r.get("pf_truth", r.get("truth"))) for r in g])
        est = np.array([float(r.get("pf_est", r.get("est"))) for r in g])
        if len(g) < 20:
            continue
        ratio = (1.0 - truth.mean()) / est.std(ddof=1)
        cov = {}
        for name, test in columns.items():
            try:
                cov[name] = float(np.mean(test(g, truth)))
            except (KeyError, ValueError):
                continue
        out[key] = (ratio, cov, len(g))
    return out


def _col(g, name):
    return np.array([float(r[name]) for r in g])


MAP_COLUMNS = {
    "normal": lambda g, t: (_col(g, "pf_normal_lo") <= t) & (t <= _col(g, "pf_normal_hi")),
    "profile": lambda g, t: (_col(g, "pf_prof_lo") <= t) & (t <= _col(g, "pf_prof_hi")),
    "normal LB": lambda g, t: _col(g, "pf_normal_lb") <= t,
    "profile LB": lambda g, t: _col(g, "pf_prof_lb") <= t,
}
CALIBRATED_COLUMNS = {
    "test inversion": lambda g, t: (_col(g, "ti_lo") <= t) & (t <= _col(g, "ti_hi")),
    "test-inversion LB": lambda g, t: _col(g, "ti_lb") <= t,
}
STYLE = {"normal": ("tab:gray", "normal (bootstrap)"), "profile": ("tab:blue", "profile likelihood"),
         "test inversion": ("tab:red", "test inversion"),
         "normal LB": ("tab:gray", "normal (bootstrap)"),
         "profile LB": ("tab:blue", "profile likelihood"),
         "test-inversion LB": ("tab:red", "test inversion")}


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--out", type=Path, default=RESULTS / "boundary_coverage.png")
    args = p.parse_args(argv)
    try:
        import matplotlib
        import matplotlib.ticker
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        print("boundary_plot.py needs matplotlib: pip install 'gatescope[plot]'", file=sys.stderr)
        return 2
    cells = {}
    for shots, name in MAP:
        cells.update(_cells(_rows(name), MAP_COLUMNS))
    for name in CALIBRATED:
        for key, (ratio, cov, n) in _cells(_rows(name), CALIBRATED_COLUMNS).items():
            if key in cells:
                cells[key][1].update(cov)
            else:
                cells[key] = (ratio, cov, n)
    levels = [s for s, _ in MAP]
    fig, axes = plt.subplots(2, len(levels), figsize=(11, 6.2), sharex=True, sharey=True,
                             constrained_layout=True)
    for col, shots in enumerate(levels):
        for row, names in enumerate((("normal", "profile", "test inversion"),
                                     ("normal LB", "profile LB", "test-inversion LB"))):
            ax = axes[row, col]
            ax.axhspan(0.93, 0.97, color="tab:green", alpha=0.12, lw=0)
            ax.axhline(0.95, color="tab:green", lw=0.8)
            for (s, kind, _), (ratio, cov, n) in sorted(cells.items()):
                if s != shots:
                    continue
                for k, name in enumerate(names):
                    if name in cov:
                        colour, _ = STYLE[name]
                        se = math.sqrt(max(cov[name] * (1 - cov[name]), 1e-4) / n)
                        ax.errorbar(ratio * (1.0 + 0.04 * (k - 1)), cov[name], yerr=se,
                                    fmt=MARKERS[kind], color=colour, ms=5, lw=0.8,
                                    mfc="none" if kind == "damping" else colour)
            ax.set_xscale("log")
            ax.set_xticks([0.3, 1, 3, 10])
            ax.xaxis.set_major_formatter(matplotlib.ticker.FormatStrFormatter("%g"))
            ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
            ax.set_xlim(0.15, 8)
            ax.set_ylim(0.80, 1.01)
            if row == 0:
                ax.set_title(f"{shots:g} counts per basis")
            if row == 1:
                ax.set_xlabel("infidelity / spread of the estimate")
        axes[0, 0].set_ylabel("coverage, two-sided 95%")
        axes[1, 0].set_ylabel("coverage, lower bound 95%")
    from matplotlib.lines import Line2D
    handles = [Line2D([], [], color=STYLE[n][0], marker="o", ls="", label=STYLE[n][1])
               for n in ("normal", "profile", "test inversion")]
    handles += [Line2D([], [], color="k", marker=m, ls="", label=k,
                       mfc="none" if k == "damping" else "k") for k, m in MARKERS.items()]
    fig.legend(handles=handles, loc="outside lower center", ncol=len(handles), fontsize=8)
    fig.suptitle("One qubit (Hadamard) near F = 1: coverage of the process fidelity's "
                 "95% intervals and bounds")
    fig.savefig(args.out, dpi=110)
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
