"""Figures of gatescope's reports, drawn with matplotlib (the optional ``plot`` extra).

This is the only module that imports matplotlib, and it does so inside the
functions that draw, with the non-interactive ``Agg`` backend, so that
importing gatescope never needs matplotlib or a display. Without matplotlib
drawing raises `PlotUnavailable`, which callers turn into a message (the
``report`` command: exit status 2) or a note ("plot skipped", the bench).

A figure is described by a `Plot`: plain data (numbers, arrays, text) and a
``kind`` naming its drawing. `render` draws it in one of two layouts —
``page`` (the HTML report: wide, PNG at twice the screen resolution) or
``column`` (a one-column figure for a paper: 86 mm wide, PNG at 300 dpi,
vector SVG and PDF with their fonts embedded) — and returns the bytes of
every format asked for. The kinds:

* ``magnitude_phase`` — complex matrices (chi, Pauli transfer matrix,
  density matrix, their difference to the target) as square maps: in every
  cell a square whose *area* is proportional to |entry| (a whole cell is
  the map's ``scale``, stated in its title) and whose colour is the phase
  arg(entry) on a cyclic scale (`phase_colour`);
* ``residual_map`` — Pearson residuals over preparation × analyser labels,
  on a diverging scale centred at 0;
* ``observed_expected`` — observed against expected counts of every row;
* ``histograms`` — bootstrap values of figures with the point estimate and
  the interval;
* ``against`` — figures of a batch against a condition, with intervals.

`error_against_counts` draws the bench's plot (`gatescope.bench`).

The phase scale. Phase φ is drawn with matplotlib's ``twilight`` colour map
at (φ/2π + 1/4) mod 1. ``twilight`` is cyclic (its two ends meet, so
φ = −π and φ = π look the same) and perceptually uniform with a lightness
symmetric about its middle. The quarter turn puts the phases of real
entries on its two saturated hues: φ = 0 is blue, φ = π is red-brown; the
imaginary ones are told apart by lightness: φ = +π/2 is nearly black,
φ = −π/2 nearly white (every square has a thin grey outline, so a pale one
stays visible). Blue against red-brown survives red–green colour blindness
(deuteranopes and protanopes see blue against yellow-brown; the tests
check it with a simulation of both), and dark against pale needs no colour
vision at all, so the four phases that matter most — the signs of real and
of imaginary entries — are readable by colour-blind readers.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..fileio import atomic_path

#: Resolution of the bench's PNG file.
DPI = 120
#: Layouts of `render`: the HTML page, or one column of a paper.
LAYOUTS = ("page", "column")
#: Formats `render` can write.
FORMATS = ("png", "svg", "pdf")
#: PNG resolution of the page layout: twice the 96 pixels per inch of a CSS inch, so that
#: the images stay sharp on high-resolution screens.
PAGE_DPI = 192
#: PNG resolution of a figure for a paper.
COLUMN_DPI = 300
#: Width of a one-column figure: 86 mm, the single column of two-column journals
#: (common practice).
COLUMN_WIDTH_IN = 86 / 25.4
#: The cyclic colour map of phases and the quarter turn that puts φ = 0 and π on its hues.
PHASE_COLORMAP = "twilight"
PHASE_OFFSET = 0.25
#: Entries smaller than this fraction of a map's scale are not drawn (their square would
#: be narrower than 1/30 of a cell, which no eye reads); the legend says so.
DRAW_THRESHOLD = 1e-3
#: Diverging colour map of the residuals (ColorBrewer's RdBu, readable with red–green
#: colour blindness), reversed so that more counts than expected is red.
RESIDUAL_COLORMAP = "RdBu_r"
#: The residual scale spans at least ± this (a fitting model's residuals are mostly
#: within ±2: they stay pale, and a setting that does not fit stands out).
RESIDUAL_MIN_LIMIT = 4.0
#: Colours of the house style.
INK = "#222222"
MUTED = "#6b6b6b"
GRID = "#d9d9d9"
ACCENT = "#2a5d8f"
FLAG = "#b3261e"


class PlotUnavailable(RuntimeError):
    """matplotlib is not installed: the plot cannot be drawn."""


@dataclass
class Plot:
    """One figure of a report, as plain data.

    Attributes
    ----------
    name : file stem of the figure (``chi``, ``residuals``): `render` of a
        paper figure writes ``<name>.svg`` and so on
    kind : the drawing (module docstring)
    data : what the drawing needs (documented at each ``_draw_<kind>``)
    title : heading of the figure on the page
    caption : what it shows, in words (conventions, scales)
    alt : a short description for readers who cannot see the image
    """

    name: str
    kind: str
    data: dict
    title: str = ""
    caption: str = ""
    alt: str = ""


def available() -> bool:
    """Whether matplotlib can be imported (the ``plot`` extra is installed)."""
    try:
        _pyplot()
    except PlotUnavailable:
        return False
    return True


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


def _style(layout: str) -> dict:
    """matplotlib settings of the house style: plain axes, one sans-serif font (DejaVu Sans,
    which matplotlib ships, so every machine draws the same), fonts embedded in vector files
    (PDF: TrueType fonts, Type 42; SVG: text as outlines), no dates in the files."""
    size = 7.0 if layout == "column" else 8.5
    return {
        "font.family": "DejaVu Sans", "font.size": size, "axes.titlesize": size + 0.5,
        "axes.labelsize": size, "xtick.labelsize": size - 1, "ytick.labelsize": size - 1,
        "legend.fontsize": size - 1, "axes.edgecolor": MUTED, "axes.labelcolor": INK,
        "text.color": INK, "xtick.color": MUTED, "ytick.color": MUTED,
        "xtick.labelcolor": INK, "ytick.labelcolor": INK, "axes.linewidth": 0.6,
        "xtick.major.width": 0.6, "ytick.major.width": 0.6, "axes.spines.top": False,
        "axes.spines.right": False, "axes.titleweight": "normal", "axes.titlepad": 4.0,
        "pdf.fonttype": 42, "ps.fonttype": 42, "svg.fonttype": "path",
        "svg.hashsalt": "gatescope", "savefig.facecolor": "white",
        "figure.facecolor": "white", "image.interpolation": "nearest",
    }


# --------------------------------------------------------------------------
# Phases
# --------------------------------------------------------------------------

def phase_position(phase):
    """Where phase φ (radians) sits on the colour map: (φ/2π + `PHASE_OFFSET`) mod 1."""
    return np.mod(np.asarray(phase, dtype=float) / (2 * np.pi) + PHASE_OFFSET, 1.0)


def phase_colour(phase) -> np.ndarray:
    """RGBA colour(s) of phase φ in radians (module docstring, "The phase scale")."""
    plt = _pyplot()
    return np.asarray(plt.get_cmap(PHASE_COLORMAP)(phase_position(phase)))


def map_cells(matrix, scale: float, threshold: float = DRAW_THRESHOLD):
    """The squares of a magnitude–phase map of ``matrix`` (rows top to bottom).

    Returns (rows, cols, side, phase): for every entry with
    |entry| ≥ threshold·scale its row and column, the side of its square as a
    fraction of the cell, √(min(|entry|/scale, 1)) (so that the *area* is
    proportional to |entry|, a whole cell at |entry| = scale), and its phase
    arg(entry) in (−π, π].
    """
    m = np.asarray(matrix, dtype=complex)
    mag = np.abs(m)
    if not (scale > 0 and np.isfinite(scale)):
        scale = 1.0
    rows, cols = np.nonzero(mag >= threshold * scale)
    side = np.sqrt(np.minimum(mag[rows, cols] / scale, 1.0))
    return rows, cols, side, np.angle(m[rows, cols])


def label_step(n: int) -> int:
    """Label every k-th row and column of an n × n map: all up to 36, then thinned to at
    most 16–18 labels (every 4th Pauli string of 64, every 12th preparation of 216)."""
    if n <= 36:
        return 1
    for step in (2, 3, 4, 6, 8, 12, 16, 24, 32, 48, 64):
        if math.ceil(n / step) <= 18:
            return step
    return math.ceil(n / 18)


# --------------------------------------------------------------------------
# Rendering
# --------------------------------------------------------------------------

def draw(plot: Plot, layout: str = "page"):
    """The matplotlib figure of ``plot`` in ``layout`` (the caller closes it with
    ``matplotlib.pyplot.close``); `render` is what reports use."""
    plt = _pyplot()
    import matplotlib

    if layout not in LAYOUTS:
        raise ValueError(f"unknown layout {layout!r}")
    with matplotlib.rc_context(_style(layout)):
        return _DRAWERS[plot.kind](plt, plot.data, layout)


def render(plot: Plot, formats=("png",), layout: str = "page") -> dict:
    """Draw ``plot`` and return {format: bytes} for every format in ``formats``.

    ``layout`` is ``page`` (sized for the HTML report, PNG at `PAGE_DPI`) or
    ``column`` (`COLUMN_WIDTH_IN` wide, PNG at `COLUMN_DPI`; SVG and PDF with
    their fonts embedded). Raises `PlotUnavailable` without matplotlib.
    """
    plt = _pyplot()
    import matplotlib

    fig = draw(plot, layout)
    try:
        out = {}
        with matplotlib.rc_context(_style(layout)):
            for fmt in formats:
                buf = io.BytesIO()
                dpi = COLUMN_DPI if layout == "column" else PAGE_DPI
                fig.savefig(buf, format=fmt, dpi=dpi, metadata=_METADATA[fmt])
                out[fmt] = buf.getvalue()
        return out
    finally:
        plt.close(fig)


#: No dates and no program versions in the files: the same plot gives the same bytes.
_METADATA = {"png": {"Software": None}, "svg": {"Date": None, "Creator": None},
             "pdf": {"CreationDate": None, "Creator": None, "Producer": None}}


def figure_size(plot: Plot, layout: str = "page") -> tuple[float, float]:
    """(width, height) in inches that `render` gives ``plot`` in ``layout``."""
    return _SIZES[plot.kind](plot.data, layout)


# --------------------------------------------------------------------------
# Magnitude–phase maps
# --------------------------------------------------------------------------

def _map_size(data: dict, layout: str) -> tuple[float, float]:
    panels = len(data["panels"])
    if layout == "column":
        return COLUMN_WIDTH_IN, COLUMN_WIDTH_IN * 0.80
    if len(data["labels"]) > 16:
        return 5.0 * panels + 1.45, 5.3
    return 3.5 * panels + 1.45, 3.75


def _draw_magnitude_phase(plt, data: dict, layout: str):
    """``data``: ``panels`` (list of dicts with ``title``, ``matrix`` (n × n complex) and
    ``scale`` (the |entry| that fills a cell)), ``labels`` (the n row/column labels),
    ``axis`` (what the labels are, under the maps), ``block`` (optional: draw a faint line
    every ``block`` rows and columns)."""
    from matplotlib.collections import PolyCollection
    from matplotlib.gridspec import GridSpec

    panels, labels = data["panels"], list(data["labels"])
    n = len(labels)
    fig = plt.figure(figsize=_map_size(data, layout))
    column = layout == "column"
    k = len(panels)
    gs = GridSpec(2, k + 1, figure=fig, width_ratios=[1.0] * k + [0.38 if column else 0.36],
                  height_ratios=[1.0, 1.0], left=0.13 if column else 0.055, right=0.985,
                  bottom=0.14 if n > 16 else 0.12, top=0.9, wspace=0.28 if column else 0.22,
                  hspace=0.35)
    step = label_step(n)
    ticks = np.arange(0, n, step) + 0.5
    tick_text = labels[::step]
    mono = {"family": "DejaVu Sans Mono", "size": (5.0 if column else 6.5) if n > 8 else
            (6.0 if column else 7.5)}
    block = data.get("block")
    for p, panel in enumerate(panels):
        ax = fig.add_subplot(gs[:, p])
        ax.set_xlim(0, n)
        ax.set_ylim(n, 0)
        ax.set_aspect("equal")
        ax.set_facecolor("white")
        for side in ("top", "right"):
            ax.spines[side].set_visible(True)
        if block and block < n:
            for b in range(block, n, block):
                ax.axhline(b, color=GRID, lw=0.6, zorder=0)
                ax.axvline(b, color=GRID, lw=0.6, zorder=0)
        rows, cols, side, phase = map_cells(panel["matrix"], panel["scale"])
        x0 = cols + 0.5 - side / 2
        y0 = rows + 0.5 - side / 2
        verts = np.stack([np.stack([x0, y0], -1), np.stack([x0 + side, y0], -1),
                          np.stack([x0 + side, y0 + side], -1), np.stack([x0, y0 + side], -1)],
                         axis=1)
        edge = 0.25 if n > 16 else 0.4
        ax.add_collection(PolyCollection(verts, facecolors=phase_colour(phase),
                                         edgecolors="#8a8a8a", linewidths=edge, zorder=2))
        ax.set_xticks(ticks)
        ax.set_yticks(ticks)
        ax.set_xticklabels(tick_text, rotation=90, fontdict=mono)
        ax.set_yticklabels(tick_text if p == 0 else [], fontdict=mono)
        ax.tick_params(length=2, pad=1.5)
        ax.set_title(panel["title"], loc="left")
        if p == 0 and data.get("axis"):
            ax.set_xlabel(data["axis"], color=MUTED, fontsize=(6 if column else 7.5))
    _phase_legend(fig, gs[0, k], column)
    _size_legend(fig, gs[1, k], column)
    return fig


def _phase_legend(fig, cell, column: bool) -> None:
    """A ring of the phase colours with 0, π/2, π, −π/2 marked (0 at the right, counter-
    clockwise, as in the complex plane); one image, not hundreds of patches."""
    ax = fig.add_subplot(cell)
    grid = np.linspace(-1.0, 1.0, 161)
    x, y = np.meshgrid(grid, -grid)
    radius = np.hypot(x, y)
    rgba = phase_colour(np.arctan2(y, x))
    rgba[..., 3] = ((radius >= 0.55) & (radius <= 1.0)).astype(float)
    ax.imshow(rgba, extent=(-1, 1, -1, 1), interpolation="bilinear")
    size = 6 if column else 7.5
    for text, (tx, ty, ha, va) in {"0": (1.08, 0, "left", "center"),
                                   "π/2": (0, 1.1, "center", "bottom"),
                                   "π": (-1.08, 0, "right", "center"),
                                   "−π/2": (0, -1.1, "center", "top")}.items():
        ax.text(tx, ty, text, ha=ha, va=va, fontsize=size)
    ax.set_xlim(-1.6, 1.6)
    ax.set_ylim(-1.45, 1.45)
    ax.set_aspect("equal")
    ax.axis("off")
    ax.set_title("phase", fontsize=6.5 if column else 8, pad=2)


def _size_legend(fig, cell, column: bool) -> None:
    """Squares at 1, 1/2, 1/4 and 1/10 of the scale, labelled as fractions of it."""
    ax = fig.add_subplot(cell)
    ax.set_xlim(0, 2.6)
    ax.set_ylim(4.3, -0.3)
    ax.set_aspect("equal")
    ax.axis("off")
    fractions = (1.0, 0.5, 0.25, 0.1)
    for k, f in enumerate(fractions):
        s = math.sqrt(f) * 0.85
        y = k * 1.0 + 0.5
        ax.add_patch(_square(0.5 - s / 2, y - s / 2, s, phase_colour(0.0)))
        ax.add_patch(_cell_frame(0.5 - 0.425, y - 0.425, 0.85))
        ax.text(1.15, y, f"{f:g}", va="center", fontsize=6 if column else 7.5)
    ax.set_title("|entry| / scale\n(area)", fontsize=6.5 if column else 8, pad=3)


def _square(x, y, s, colour):
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), s, s, facecolor=colour, edgecolor="#8a8a8a", linewidth=0.4)


def _cell_frame(x, y, s):
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), s, s, facecolor="none", edgecolor=GRID, linewidth=0.6)


# --------------------------------------------------------------------------
# Data view
# --------------------------------------------------------------------------

def _residual_size(data: dict, layout: str) -> tuple[float, float]:
    rows, cols = np.shape(data["values"])
    if layout == "column":
        width, margins = COLUMN_WIDTH_IN, (0.75 + 0.95, 0.82)
    else:
        width, margins = (7.4 if cols > 12 else 4.6), (0.85 + 0.95, 0.82)
    plot_width = width - margins[0]
    height = plot_width * rows / cols + margins[1]
    return width, float(min(max(height, 1.5), 8.5 if layout == "page" else 4.5))


def _draw_residual_map(plt, data: dict, layout: str):
    """``data``: ``values`` (rows × cols Pearson residuals, NaN where nothing was measured),
    ``row_labels``, ``col_labels``, ``row_title``, ``col_title``, ``outliers`` (boolean
    rows × cols: cells to ring), ``limit`` (optional colour-scale limit), ``row_blocks`` and
    ``col_blocks`` (optional: indices where a faint line separates groups)."""
    from matplotlib.colors import Normalize

    values = np.asarray(data["values"], dtype=float)
    nr, nc = values.shape
    column = layout == "column"
    width, height = _residual_size(data, layout)
    fig = plt.figure(figsize=(width, height))
    left, bottom, right, top = (0.75 if column else 0.85), 0.7, 0.95, 0.12
    ax = fig.add_axes((left / width, bottom / height, (width - left - right) / width,
                       (height - bottom - top) / height))
    cax = fig.add_axes(((width - right + 0.12) / width, bottom / height, 0.1 / width,
                        (height - bottom - top) / height))
    finite = values[np.isfinite(values)]
    limit = data.get("limit") or max(RESIDUAL_MIN_LIMIT,
                                     float(np.max(np.abs(finite))) if finite.size else 0.0)
    cmap = plt.get_cmap(RESIDUAL_COLORMAP).with_extremes(bad="#efefef")
    image = ax.imshow(np.ma.masked_invalid(values), cmap=cmap, norm=Normalize(-limit, limit),
                      aspect="auto", interpolation="nearest", extent=(0, nc, nr, 0))
    for b in data.get("row_blocks", ()):
        ax.axhline(b, color="white", lw=0.8)
    for b in data.get("col_blocks", ()):
        ax.axvline(b, color="white", lw=0.8)
    ring = np.argwhere(np.asarray(data.get("outliers", np.zeros_like(values, bool))))
    if ring.size:
        ax.scatter(ring[:, 1] + 0.5, ring[:, 0] + 0.5, s=(16 if max(nr, nc) <= 36 else 6),
                   facecolors="none", edgecolors=INK, linewidths=0.7)
    mono = {"family": "DejaVu Sans Mono",
            "size": (5.0 if column else 6.5) if max(nr, nc) > 12 else (6.5 if column else 8.5)}
    for axis, labels, n in ((ax.xaxis, data["col_labels"], nc), (ax.yaxis, data["row_labels"], nr)):
        step = label_step(n)
        axis.set_ticks(np.arange(0, n, step) + 0.5)
        axis.set_ticklabels(list(labels)[::step], fontdict=mono)
    for tick in ax.get_xticklabels():
        tick.set_rotation(90)
    ax.tick_params(length=2, pad=1.5)
    ax.set_xlabel(data["col_title"])
    ax.set_ylabel(data["row_title"])
    for side in ("top", "right"):
        ax.spines[side].set_visible(True)
    bar = fig.colorbar(image, cax=cax)
    bar.set_label("Pearson residual (n − ν)/√ν")
    bar.outline.set_linewidth(0.5)
    return fig


def _observed_size(data: dict, layout: str) -> tuple[float, float]:
    if layout == "column":
        return COLUMN_WIDTH_IN, COLUMN_WIDTH_IN * 0.9
    return 5.2, 4.4


def _draw_observed_expected(plt, data: dict, layout: str):
    """``data``: ``observed`` and ``expected`` counts of every row, ``outliers`` (row
    indices to mark), ``nonpositive`` (rows whose expected counts are ≤ 0: drawn at 0 with
    a cross). Both axes on a square-root scale, where Poisson noise has about the same
    width (±1/2 in √counts) at every level."""
    obs = np.asarray(data["observed"], dtype=float)
    exp = np.asarray(data["expected"], dtype=float)
    fig, ax = plt.subplots(figsize=_observed_size(data, layout))
    sqrt = ("function", (lambda v: np.sqrt(np.maximum(v, 0.0)), lambda v: np.square(v)))
    ax.set_xscale(*sqrt[:1], functions=sqrt[1])
    ax.set_yscale(*sqrt[:1], functions=sqrt[1])
    top = max(float(np.max(obs, initial=0.0)), float(np.max(exp, initial=0.0)), 1.0) * 1.05
    line = np.linspace(0, top, 200)
    band = np.square(np.maximum(np.sqrt(line) - 1.0, 0.0)), np.square(np.sqrt(line) + 1.0)
    ax.fill_between(line, band[0], band[1], color="#e8eef5", lw=0, zorder=0,
                    label="expected ± 2σ (√counts ± 1)")
    ax.plot(line, line, color=ACCENT, lw=0.8, zorder=1, label="observed = expected")
    bad = np.zeros(obs.size, bool)
    bad[np.asarray(data.get("outliers", []), dtype=int)] = True
    nonpos = np.zeros(obs.size, bool)
    nonpos[np.asarray(data.get("nonpositive", []), dtype=int)] = True
    ok = ~bad & ~nonpos
    small = 5 if obs.size < 2000 else 2
    ax.scatter(exp[ok], obs[ok], s=small, color=INK, alpha=0.55, lw=0, zorder=2,
               label=f"rows ({int(ok.sum())})")
    if bad.any() and (bad & ~nonpos).any():
        sel = bad & ~nonpos
        ax.scatter(exp[sel], obs[sel], s=22, facecolors="none", edgecolors=FLAG, lw=0.9,
                   zorder=3, label=f"|residual| > 4 ({int(sel.sum())})")
    if nonpos.any():
        ax.scatter(np.zeros(int(nonpos.sum())), obs[nonpos], s=22, marker="x", color=FLAG,
                   lw=0.9, zorder=3, label=f"expected ≤ 0 ({int(nonpos.sum())})")
    ax.set_xlim(0, top)
    ax.set_ylim(0, top)
    ax.set_xlabel("expected counts ν (√ scale)")
    ax.set_ylabel("observed counts n (√ scale)")
    ax.grid(True, color=GRID, lw=0.5)
    ax.legend(loc="upper left", frameon=False)
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=0.62 / w, bottom=0.5 / h, right=1 - 0.15 / w, top=1 - 0.12 / h)
    return fig


# --------------------------------------------------------------------------
# Bootstrap histograms
# --------------------------------------------------------------------------

def _grid(n: int, layout: str) -> tuple[int, int]:
    cols = 2 if layout == "column" else 3
    cols = max(1, min(cols, n))
    return math.ceil(max(n, 1) / cols), cols


def _histograms_size(data: dict, layout: str) -> tuple[float, float]:
    rows, cols = _grid(len(data["panels"]), layout)
    if layout == "column":
        return COLUMN_WIDTH_IN, 1.35 * rows + 0.2
    return 3.1 * cols, 2.15 * rows + 0.2


def _draw_histograms(plt, data: dict, layout: str):
    """``data``: ``panels``, each with ``title``, ``values`` (the bootstrap values; NaN
    ignored), ``point`` (the estimate), ``ci`` ((low, high) or None), ``level``, and
    ``note`` (a line under the title, or "")."""
    panels = data["panels"]
    rows, cols = _grid(len(panels), layout)
    fig, axes = plt.subplots(rows, cols, figsize=_histograms_size(data, layout), squeeze=False)
    for ax, panel in zip(axes.flat, panels):
        values = np.asarray(panel["values"], dtype=float)
        values = values[np.isfinite(values)]
        if panel.get("ci") is not None:
            lo, hi = panel["ci"]
            ax.axvspan(lo, hi, color="#e8eef5", lw=0, zorder=0,
                       label=f"{100 * panel['level']:g}% interval")
        if values.size:
            spread = float(np.ptp(values))
            bins = int(np.clip(2 * math.sqrt(values.size), 8, 40)) if spread > 0 else 1
            ax.hist(values, bins=bins, color="#8fa9c4", edgecolor="white", linewidth=0.3,
                    zorder=1)
        ax.axvline(panel["point"], color=INK, lw=1.0, zorder=2, label="estimate")
        title = panel["title"] + (f"\n{panel['note']}" if panel.get("note") else "")
        ax.set_title(title, loc="left", fontsize=7 if layout == "column" else 8.5)
        ax.set_yticks([])
        ax.spines["left"].set_visible(False)
        ax.ticklabel_format(axis="x", useOffset=False)
        ax.xaxis.set_major_locator(plt.MaxNLocator(4))
    for ax in list(axes.flat)[len(panels):]:
        ax.set_visible(False)
    if panels:
        handles, labels = axes.flat[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower right", frameon=False, ncol=2)
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=0.15 / w, right=1 - 0.15 / w, bottom=0.62 / h,
                        top=1 - (0.42 if any(p.get("note") for p in panels) else 0.3) / h,
                        wspace=0.12 * cols, hspace=0.55 / rows * 2)
    return fig


# --------------------------------------------------------------------------
# Batch overview
# --------------------------------------------------------------------------

def _against_size(data: dict, layout: str) -> tuple[float, float]:
    rows, cols = _grid(len(data["panels"]), layout)
    extra = 0.5 if data.get("categories") else 0.0
    if layout == "column":
        return COLUMN_WIDTH_IN, (1.6 + extra) * rows
    return 3.4 * cols, (2.5 + extra) * rows


def _draw_against(plt, data: dict, layout: str):
    """``data``: ``x`` (numbers, or None for categories), ``categories`` (labels when x is
    None, in order), ``xlabel``, ``panels`` each with ``title``, ``values``, ``low`` and
    ``high`` (NaN where there is no interval)."""
    panels = data["panels"]
    rows, cols = _grid(len(panels), layout)
    fig, axes = plt.subplots(rows, cols, figsize=_against_size(data, layout), squeeze=False)
    categories = data.get("categories")
    x = np.arange(len(categories), dtype=float) if categories else np.asarray(data["x"], float)
    for ax, panel in zip(axes.flat, panels):
        y = np.asarray(panel["values"], dtype=float)
        lo = np.asarray(panel["low"], dtype=float)
        hi = np.asarray(panel["high"], dtype=float)
        order = np.argsort(x, kind="stable")
        ok = np.isfinite(y)
        with np.errstate(invalid="ignore"):
            err = np.vstack([np.where(np.isfinite(lo), y - lo, 0.0),
                             np.where(np.isfinite(hi), hi - y, 0.0)])
        ax.plot(x[order][ok[order]], y[order][ok[order]], color=GRID, lw=0.8, zorder=1)
        ax.errorbar(x[ok], y[ok], yerr=np.maximum(err[:, ok], 0.0), fmt="o", ms=3.5,
                    color=ACCENT, ecolor=ACCENT, elinewidth=0.9, capsize=2, zorder=2)
        ax.set_title(panel["title"], loc="left")
        ax.grid(True, axis="y", color=GRID, lw=0.5)
        ax.ticklabel_format(axis="y", useOffset=False)
        if categories:
            step = label_step(len(categories))
            ax.set_xticks(x[::step])
            ax.set_xticklabels(list(categories)[::step], rotation=60, ha="right",
                               fontsize=6 if layout == "column" else 7)
            ax.set_xlim(-0.6, len(categories) - 0.4)
        ax.set_xlabel(data["xlabel"])
    for ax in list(axes.flat)[len(panels):]:
        ax.set_visible(False)
    fig.tight_layout()
    return fig


_DRAWERS = {"magnitude_phase": _draw_magnitude_phase, "residual_map": _draw_residual_map,
            "observed_expected": _draw_observed_expected, "histograms": _draw_histograms,
            "against": _draw_against}
_SIZES = {"magnitude_phase": _map_size, "residual_map": _residual_size,
          "observed_expected": _observed_size, "histograms": _histograms_size,
          "against": _against_size}
KINDS = tuple(_DRAWERS)


# --------------------------------------------------------------------------
# The bench
# --------------------------------------------------------------------------

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
    import matplotlib

    n = max(len(panels), 1)
    cols = min(n, 3)
    rows = math.ceil(n / cols)
    with matplotlib.rc_context(_style("page")):
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
                ax.grid(True, which="both", color=GRID, lw=0.5)
                if ax.get_legend_handles_labels()[0]:
                    ax.legend(frameon=False)
            for ax in list(axes.flat)[len(panels):]:
                ax.set_visible(False)
            fig.tight_layout()
            return _save(fig, path)
        finally:
            plt.close(fig)


__all__ = ["PlotUnavailable", "Plot", "draw", "render", "figure_size", "available", "phase_colour",
           "phase_position", "map_cells", "label_step", "error_against_counts", "DPI", "KINDS",
           "LAYOUTS", "FORMATS", "PAGE_DPI", "COLUMN_DPI", "COLUMN_WIDTH_IN"]
