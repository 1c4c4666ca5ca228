"""Figures of the reports (gatescope.report.plots)."""

from __future__ import annotations

import io
import subprocess
import sys
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from support import cnot_chi_textbook

from gatescope.report import plots

PANELS = [
    {"title": "CZ+depolarizing:0.1", "bound": ([100.0, 1000.0], [1e-1, 1e-2]),
     "series": {"mle": {"shots": [100.0, 1000.0], "value": [0.08, 0.009],
                        "error": [0.004, 0.0005], "slope": -0.95},
                "lin": {"shots": [100.0, 1000.0], "value": [0.2, 0.02], "error": [0.01, 0.001],
                        "slope": None}}},
    {"title": "CZ+zz:0.1", "bound": ([], []),
     "series": {"mle": {"shots": [], "value": [], "error": [], "slope": None}}},
]


def test_error_against_counts_writes_a_png(tmp_path):
    pytest.importorskip("matplotlib")
    path = plots.error_against_counts(PANELS, tmp_path / "bench.png")
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
    assert not list(tmp_path.glob(".*.tmp"))                 # written atomically


def test_without_matplotlib_the_plot_is_unavailable(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)     # import matplotlib fails
    with pytest.raises(plots.PlotUnavailable, match="plot extra"):
        plots.error_against_counts(PANELS, tmp_path / "bench.png")
    assert not (tmp_path / "bench.png").exists()


def test_importing_gatescope_does_not_import_matplotlib():
    code = ("import sys, gatescope, gatescope.report.plots, gatescope.bench, gatescope.cli; "
            "print('matplotlib' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


# --------------------------------------------------------------------------
# Magnitude–phase maps
# --------------------------------------------------------------------------

def _map_plot(matrix, labels, scale):
    return plots.Plot("m", "magnitude_phase",
                      {"panels": [{"title": "t", "matrix": matrix, "scale": scale}],
                       "labels": labels, "axis": "", "block": 4})


def test_cells_have_an_area_proportional_to_the_magnitude():
    m = np.array([[0.25, -0.0625j], [1e-5, 0.0]])
    rows, cols, side, phase = plots.map_cells(m, 0.25)
    assert list(zip(rows, cols)) == [(0, 0), (0, 1)]        # 1e-5 < 0.1% of the scale
    np.testing.assert_allclose(side ** 2, [1.0, 0.25])      # area = |entry| / scale
    np.testing.assert_allclose(phase, [0.0, -np.pi / 2])


def test_phase_colours_follow_the_documented_cyclic_map():
    matplotlib = pytest.importorskip("matplotlib")
    twilight = matplotlib.colormaps["twilight"]
    np.testing.assert_allclose(plots.phase_colour(0.0), twilight(0.25))
    np.testing.assert_allclose(plots.phase_colour(np.pi), twilight(0.75))
    # cyclic: −π and π are one colour
    np.testing.assert_allclose(plots.phase_colour(-np.pi), plots.phase_colour(np.pi), atol=1e-9)


def _linear(rgb):
    rgb = np.asarray(rgb, dtype=float)[..., :3]
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


# Colour-vision-deficiency simulation, severity 1, on linear RGB: Machado, Oliveira &
# Fernandes, IEEE Trans. Vis. Comput. Graph. 15, 1291 (2009), Table 1 (values from memory).
CVD = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
}


@pytest.mark.parametrize("kind", sorted(CVD))
def test_the_signs_of_real_and_imaginary_entries_stay_apart_for_colour_blind_readers(kind):
    pytest.importorskip("matplotlib")
    seen = {phi: np.clip(CVD[kind] @ _linear(plots.phase_colour(phi)), 0, 1)
            for phi in (0.0, np.pi, np.pi / 2, -np.pi / 2)}
    # phase 0 against π and +π/2 against −π/2: clearly different after the simulation
    # (a distance in linear RGB of 0.1 is well above what an eye needs; common practice)
    assert np.linalg.norm(seen[0.0] - seen[np.pi]) > 0.1
    assert np.linalg.norm(seen[np.pi / 2] - seen[-np.pi / 2]) > 0.3


def test_the_cnot_chi_map_fills_exactly_its_cells_with_the_phase_colours():
    pytest.importorskip("matplotlib")
    from matplotlib.image import imread
    import matplotlib.pyplot as plt

    from gatescope.channels import choi_from_unitary, choi_to_chi
    from gatescope.conventions import named_gate, pauli_labels

    chi = choi_to_chi(choi_from_unitary(named_gate("CNOT")))
    np.testing.assert_allclose(chi, cnot_chi_textbook(), atol=1e-12)
    nonzero = np.abs(chi) > 1e-9
    assert nonzero.sum() == 16 and np.allclose(np.abs(chi[nonzero]), 0.25)
    fig = plots.draw(_map_plot(chi, pauli_labels(2), 0.25), "page")
    try:
        ax = fig.axes[0]
        fig.canvas.draw()
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=fig.dpi)
        height = fig.canvas.get_width_height()[1]
        centres = ax.transData.transform([(j + 0.5, i + 0.5) for i in range(16)
                                          for j in range(16)])
    finally:
        plt.close(fig)
    image = imread(io.BytesIO(buf.getvalue()))[..., :3]
    zero, pi = plots.phase_colour(0.0)[:3], plots.phase_colour(np.pi)[:3]
    for k, (x, y) in enumerate(centres):
        i, j = divmod(k, 16)
        pixel = image[int(round(height - y)), int(round(x))]
        if not nonzero[i, j]:
            np.testing.assert_allclose(pixel, 1.0, atol=0.02, err_msg=f"cell {i},{j} not empty")
        elif chi[i, j].real > 0:
            np.testing.assert_allclose(pixel, zero, atol=0.02, err_msg=f"cell {i},{j}")
        else:
            np.testing.assert_allclose(pixel, pi, atol=0.02, err_msg=f"cell {i},{j}")
    # the sign pattern: χ_mn < 0 where exactly one of m, n is ZX (6 cells)
    assert (chi < -1e-9).sum() == 6


def test_labels_are_thinned_on_large_maps():
    assert plots.label_step(16) == 1 and plots.label_step(36) == 1
    assert plots.label_step(64) == 4                         # 16 Pauli labels of 64
    assert np.ceil(216 / plots.label_step(216)) <= 18        # three-qubit preparations


# --------------------------------------------------------------------------
# Every kind, every layout and format
# --------------------------------------------------------------------------

def _examples():
    rng = np.random.default_rng(2)
    values = rng.normal(size=(6, 6))
    values[2, 3] = np.nan
    return [
        _map_plot(rng.normal(size=(4, 4)) + 1j * rng.normal(size=(4, 4)), ["HH", "HV", "VH", "VV"],
                  3.0),
        plots.Plot("r", "residual_map", {"values": values, "outliers": np.abs(values) > 1.5,
                                         "row_labels": list("HVDARL"), "col_labels": list("HVDARL"),
                                         "row_title": "preparation", "col_title": "analyser"}),
        plots.Plot("c", "observed_expected", {"observed": [0, 10, 400], "expected": [0.0, 12.0, 390.0],
                                              "outliers": [1], "nonpositive": [0]}),
        plots.Plot("h", "histograms", {"panels": [
            {"title": "a", "values": rng.normal(size=50), "point": 0.1, "ci": (-1, 1),
             "level": 0.95, "note": "not determined by the data"}]}),
        plots.Plot("g", "against", {"x": None, "categories": ["a", "b"], "xlabel": "name",
                                    "panels": [{"title": "f", "values": [0.9, 0.8],
                                                "low": [0.85, np.nan], "high": [0.95, np.nan]}]}),
    ]


@pytest.mark.parametrize("plot", _examples(), ids=lambda p: p.kind)
def test_every_kind_renders_in_both_layouts(plot):
    pytest.importorskip("matplotlib")
    from PIL import Image

    page = plots.render(plot, ("png",), "page")["png"]
    w, h = plots.figure_size(plot, "page")
    with Image.open(io.BytesIO(page)) as im:
        assert im.size == pytest.approx((w * plots.PAGE_DPI, h * plots.PAGE_DPI), abs=1)
    files = plots.render(plot, ("png", "svg", "pdf"), "column")
    with Image.open(io.BytesIO(files["png"])) as im:
        # one column: 86 mm at 300 dpi (common practice for two-column journals)
        assert im.size[0] == pytest.approx(86 / 25.4 * 300, abs=1)
        assert im.info["dpi"][0] == pytest.approx(300, abs=0.01)
    svg = ET.fromstring(files["svg"])
    assert svg.tag.endswith("svg") and svg.get("width").endswith("pt")
    assert float(svg.get("width")[:-2]) == pytest.approx(86 / 25.4 * 72, abs=0.01)
    assert b"<text" not in files["svg"]                      # text drawn as outlines
    assert files["pdf"].startswith(b"%PDF") and b"/FontFile2" in files["pdf"]   # TrueType inside
    assert plots.render(plot, ("svg",), "column") == {"svg": files["svg"]}     # no dates inside
