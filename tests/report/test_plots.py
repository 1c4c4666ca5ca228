"""Figures of the reports (gatescope.report.plots)."""

from __future__ import annotations

import subprocess
import sys

import pytest

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
