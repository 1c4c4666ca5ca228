"""Figures for papers (gatescope.report.paper)."""

from __future__ import annotations

import pytest

import gatescope as gs
from gatescope.errors import InputError
from gatescope.report import paper, views

pytest.importorskip("matplotlib")


def test_maps_become_one_figure_per_panel(state_result):
    plots = views.result_plots(gs.load_result(state_result))
    names = [p.name for p in paper.paper_plots(plots)]
    assert names == ["rho_estimate", "rho_target", "rho_difference", "counts", "residuals",
                     "bootstrap"]
    assert all(len(p.data["panels"]) == 1 for p in paper.paper_plots(plots)[:3])


def test_every_figure_is_written_in_three_formats_and_not_replaced(state_result, tmp_path):
    from PIL import Image

    plots = views.result_plots(gs.load_result(state_result))[:1]
    written = paper.write_figures(plots, tmp_path / "fig")
    assert sorted(p.name for p in written) == sorted(
        f"rho_{k}.{fmt}" for k in ("estimate", "target", "difference")
        for fmt in ("svg", "pdf", "png"))
    with Image.open(tmp_path / "fig" / "rho_estimate.png") as im:
        assert im.info["dpi"][0] == pytest.approx(300, abs=0.01)
    with pytest.raises(InputError, match="exists"):
        paper.write_figures(plots, tmp_path / "fig")
    before = (tmp_path / "fig" / "rho_target.pdf").read_bytes()
    paper.write_figures(plots, tmp_path / "fig", force=True)
    assert (tmp_path / "fig" / "rho_target.pdf").read_bytes() == before   # reproducible bytes
    (tmp_path / "file").write_text("")
    with pytest.raises(InputError, match="is a file"):
        paper.check_figures(plots, tmp_path / "file")
