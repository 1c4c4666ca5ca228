"""The overview of a batch output folder (gatescope.report.overview)."""

from __future__ import annotations

import csv

import pytest
from support import check_self_contained_page

import gatescope as gs
from gatescope.errors import InputError
from gatescope.report import overview
from gatescope.report.page import report_html

pytest.importorskip("matplotlib")


def test_the_table_is_read_as_batch_wrote_it(batch_folder):
    entries, figures, conditions = overview.read_summary(batch_folder)
    with open(batch_folder / "summary.csv", newline="", encoding="utf-8") as f:
        rows = {row["name"]: row for row in csv.DictReader(f)}      # the standard reader
    assert {e.name for e in entries} == set(rows) == {"broken", "delay_0", "delay_50",
                                                      "delay_100"}
    assert conditions == ["delay_ps", "run"] and "process_fidelity" in figures
    for e in entries:
        assert e.status == rows[e.name]["status"]
        assert e.conditions["delay_ps"] == int(rows[e.name]["delay_ps"])
        if e.status == "done":
            value, low, high = e.figures["process_fidelity"]
            assert value == float(rows[e.name]["process_fidelity"])
            assert low < value < high
            assert e.conditions["run"] == "night <3>"


def test_the_figures_are_plotted_against_a_numeric_condition(batch_folder):
    batch = overview.load_batch(batch_folder, "delay_ps")
    data = batch.plot.data
    assert data["x"] == [0.0, 50.0, 100.0] and data["categories"] is None
    fid = next(p for p in data["panels"] if p["title"] == "process fidelity")
    # the conditional phase grows with the delay: the fidelity falls
    assert fid["values"][0] > fid["values"][1] > fid["values"][2]
    for name, value in zip(("delay_0", "delay_50", "delay_100"), fid["values"]):
        assert value == gs.load_result(batch_folder / f"{name}.h5").figures[
            "process_fidelity"].value


def test_by_default_against_the_name(batch_folder):
    batch = overview.load_batch(batch_folder)
    assert batch.column == overview.BY_NAME
    assert batch.plot.data["categories"] == ["delay_0", "delay_100", "delay_50"]


def test_an_unknown_condition_is_an_input_error_naming_the_known_ones(batch_folder):
    with pytest.raises(InputError, match="delay_ps, run") as info:
        overview.load_batch(batch_folder, "temperature")
    assert info.value.key == "--against"


def test_the_page_lists_every_experiment_and_links_existing_reports(batch_folder, tmp_path):
    page = batch_folder / "delay_50.html"
    page.write_text(report_html(gs.load_result(batch_folder / "delay_50.h5")), encoding="utf-8")
    try:
        text = overview.overview_html(overview.load_batch(batch_folder, "delay_ps"))
    finally:
        page.unlink()
    seen = check_self_contained_page(text)
    assert len(seen["images"]) == 1
    assert "delay_50.html" in seen["links"] and "delay_0.html" not in seen["links"]
    for name in ("delay_0", "delay_50", "delay_100", "broken"):
        assert name in seen["text"]
    assert "1 experiment failed" in seen["text"] and "semicolons" in seen["text"]
    assert 'class="flag"' in text                              # the failed row stands out
    assert "night <3>" not in text                              # escaped


def test_a_folder_without_a_table_is_refused(tmp_path):
    with pytest.raises(InputError, match="summary.csv"):
        overview.read_summary(tmp_path)
    (tmp_path / "summary.csv").write_text("a,b\n1,2\n")
    with pytest.raises(InputError, match="not the table"):
        overview.read_summary(tmp_path)
