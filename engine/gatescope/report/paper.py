"""Figures for papers: every plot of a report as its own file, one column wide.

`write_figures` writes each plot of a report as ``<name>.svg`` and
``<name>.pdf`` (vector; PDF fonts embedded as TrueType, SVG text drawn as
outlines, so neither needs the font where it is opened) and ``<name>.png``
(300 dpi), 86 mm wide (`gatescope.report.plots.COLUMN_WIDTH_IN`). A map of
several panels (estimate, target, difference) becomes one file per panel,
each with its legend: ``chi_estimate``, ``chi_target``, ``chi_difference``.
Existing files are replaced only with ``force``; every file is written
atomically (`gatescope.fileio`).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from ..fileio import atomic_path, check_output
from .plots import Plot, render

#: Formats of a paper figure.
PAPER_FORMATS = ("svg", "pdf", "png")
_PANEL_NAMES = ("estimate", "target", "difference")


def paper_plots(plots: list[Plot]) -> list[Plot]:
    """The plots as figures for a paper: maps split into one plot per panel."""
    out = []
    for plot in plots:
        panels = plot.data.get("panels") if plot.kind == "magnitude_phase" else None
        if panels is None or len(panels) == 1:
            out.append(plot)
            continue
        for suffix, panel in zip(_PANEL_NAMES, panels):
            out.append(replace(plot, name=f"{plot.name}_{suffix}",
                               data={**plot.data, "panels": [panel]}))
    return out


def figure_paths(plots: list[Plot], folder) -> list[Path]:
    """Every file `write_figures` writes for ``plots`` into ``folder``."""
    folder = Path(folder)
    return [folder / f"{p.name}.{fmt}" for p in paper_plots(plots) for fmt in PAPER_FORMATS]


def check_figures(plots: list[Plot], folder, *, force: bool = False,
                  option: str = "--figures") -> None:
    """Refuse, before any drawing, a folder that holds one of the figures already (unless
    ``force``) or that cannot be written."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        from ..errors import InputError

        raise InputError("is a file; give a folder for the figures", file=str(folder),
                         key=option)
    for path in figure_paths(plots, folder):
        check_output(path, force=force, option=option, what="figure")


def write_figures(plots: list[Plot], folder, *, force: bool = False) -> list[Path]:
    """Write every plot as SVG, PDF and PNG (300 dpi), one column wide; returns the paths."""
    check_figures(plots, folder, force=force)
    folder = Path(folder)
    written = []
    for plot in paper_plots(plots):
        files = render(plot, PAPER_FORMATS, "column")
        for fmt in PAPER_FORMATS:
            path = folder / f"{plot.name}.{fmt}"
            with atomic_path(path) as tmp:
                tmp.write_bytes(files[fmt])
            written.append(path)
    return written


__all__ = ["paper_plots", "figure_paths", "check_figures", "write_figures", "PAPER_FORMATS"]
