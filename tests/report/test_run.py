"""What the report command writes, checked before any work (gatescope.report.run)."""

from __future__ import annotations

import sys

import pytest
from support import check_self_contained_page

from gatescope.errors import InputError
from gatescope.report import default_report_path, make_report, result_report

pytest.importorskip("matplotlib")


def test_a_result_gets_its_page_beside_it_and_figures_on_request(boot_result, tmp_path):
    import shutil

    path = tmp_path / "run1.h5"
    shutil.copy(boot_result, path)
    out = make_report(path, figures=tmp_path / "figs")
    assert out.page == tmp_path / "run1.html" == default_report_path(path)
    check_self_contained_page(out.page.read_text(encoding="utf-8"))
    names = {p.name for p in out.figures}
    assert {"chi_estimate.svg", "ptm_difference.pdf", "residuals.png", "bootstrap.svg"} <= names
    assert not list(tmp_path.glob(".*.tmp"))                 # written atomically
    with pytest.raises(InputError, match="exists"):          # not replaced without force
        make_report(path)
    make_report(path, force=True, figures=tmp_path / "figs")


def test_outputs_are_checked_before_any_work(boot_result, tmp_path, monkeypatch):
    from gatescope.report import run

    monkeypatch.setattr(run, "report_html", lambda *a, **k: pytest.fail("work was done"))
    with pytest.raises(InputError, match="input"):
        make_report(boot_result, boot_result, force=True)      # the result itself
    (tmp_path / "taken.png").write_text("")
    (tmp_path / "figs").mkdir()
    (tmp_path / "figs" / "counts.png").write_text("")
    with pytest.raises(InputError, match="exists"):
        make_report(boot_result, tmp_path / "page.html", figures=tmp_path / "figs")
    assert not (tmp_path / "page.html").exists()


def test_options_of_the_other_kind_are_refused(boot_result, batch_folder):
    with pytest.raises(InputError) as info:
        make_report(boot_result, against="delay_ps")
    assert info.value.key == "--against"
    with pytest.raises(InputError) as info:
        make_report(boot_result, each=True)
    assert info.value.key == "--each"
    with pytest.raises(InputError, match="no condition"):
        make_report(batch_folder, batch_folder / "x.html", against="nothing")
    assert not (batch_folder / "x.html").exists()


def test_a_folder_must_be_a_batch_folder(tmp_path):
    with pytest.raises(InputError, match="summary.csv"):
        make_report(tmp_path)
    with pytest.raises(InputError, match="no such"):
        make_report(tmp_path / "missing.h5")


def test_a_batch_gets_its_overview_and_on_request_every_report(batch_folder, tmp_path):
    import shutil

    folder = tmp_path / "night"
    shutil.copytree(batch_folder, folder)
    out = make_report(folder, against="delay_ps", each=True, figures=tmp_path / "figs")
    assert out.page == folder / "overview.html"
    assert sorted(p.name for p in out.reports) == ["delay_0.html", "delay_100.html",
                                                   "delay_50.html"]
    seen = check_self_contained_page(out.page.read_text(encoding="utf-8"))
    assert {p.name for p in out.reports} <= set(seen["links"])     # each row links its report
    assert {p.name for p in out.figures} == {"against.svg", "against.pdf", "against.png"}
    kept = make_report(folder, folder / "second.html", each=True)
    assert kept.reports == [] and len(kept.kept) == 3


def test_without_matplotlib_the_report_is_refused_at_once(boot_result, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    with pytest.raises(InputError, match="plot extra"):
        make_report(boot_result, tmp_path / "page.html")
    import gatescope as gs

    with pytest.raises(InputError, match="plot extra"):
        result_report(gs.load_result(boot_result), tmp_path / "page.html")
    assert not (tmp_path / "page.html").exists()
