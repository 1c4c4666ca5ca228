"""Figures of gatescope's reports, drawn with matplotlib (the optional ``plot`` extra).

This is the only module that imports matplotlib, and it does so inside the
functions that draw, with the non-interactive ``Agg`` backend, so that
importing gatescope never needs matplotlib or a display. Every drawing
function takes plain data (lists and numbers, not gatescope objects),
writes one PNG file atomically and returns its path; without matplotlib it
raises `PlotUnavailable`, which callers turn into a note ("plot skipped").

* `error_against_counts` — the bench's mean squared error against the
  counts, log–log, one panel per channel.
"""

from __future__ import annotations

import math
from pathlib import Path

from ..fileio import atomic_path

#: Resolution of the PNG files.
DPI = 120


class PlotUnavailable(RuntimeError):
    """matplotlib is not installed: the plot cannot be drawn."""


def _pyplot():
    """matplotlib.pyplot on the Agg backend, or PlotUnavailable."""
    try:
        import matplotlib
    except ImportError:
        raise PlotUnavailable("it needs matplotlib, the plot extra "
                              "(pip install 'gatescope[plot]')") from None
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path) -> Path:
    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=DPI)
    return path


def error_against_counts(panels: list[dict], path) -> Path:
    """Draw the mean squared Hilbert–Schmidt error against the counts, one panel per channel.

    Parameters
    ----------
    panels : list of dict
        Each with ``title`` (the channel), ``series`` (method → dict with
        ``shots``, ``value`` (hs_mse), ``error`` (its standard error) and
        ``slope`` (the fitted log–log slope, or None)) and ``bound``
        ((shots, hs_crb) lists, empty when the bound does not apply).
    path : file
        The PNG to write.

    Both axes are logarithmic; every method is drawn with error bars and its
    slope in the legend, the Cramér–Rao bound as a dashed line.
    """
    plt = _pyplot()
    n = max(len(panels), 1)
    cols = min(n, 3)
    rows = math.ceil(n / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(4.6 * cols, 3.6 * rows), squeeze=False)
    try:
        for ax, panel in zip(axes.flat, panels):
            for method, s in panel["series"].items():
                if not s["shots"]:
                    continue
                slope = s.get("slope")
                label = method if slope is None else f"{method} (slope {slope:+.2f})"
                ax.errorbar(s["shots"], s["value"], yerr=s["error"], marker="o", ms=4,
                            capsize=2, label=label)
            shots, bound = panel["bound"]
            if shots:
                ax.plot(shots, bound, "k--", lw=1, label="Cramér–Rao bound")
            ax.set_xscale("log")
            ax.set_yscale("log")
            ax.set_title(panel["title"], fontsize=9)
            ax.set_xlabel("counts per preparation and basis")
            ax.set_ylabel("mean ‖Ĵ − J‖²")
            ax.grid(True, which="both", alpha=0.3)
            if ax.get_legend_handles_labels()[0]:
                ax.legend(fontsize=7)
        for ax in list(axes.flat)[len(panels):]:
            ax.set_visible(False)
        fig.tight_layout()
        return _save(fig, path)
    finally:
        plt.close(fig)


__all__ = ["PlotUnavailable", "error_against_counts", "DPI"]
