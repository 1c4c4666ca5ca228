"""The pieces of a report page (gatescope.report.html)."""

from __future__ import annotations

import base64

from support import check_self_contained_page

from gatescope.report import html


def test_text_from_files_cannot_inject_markup():
    hostile = '<script>alert("x")</script> & <img src=x onerror=y> \x1b[31m'
    out = html.esc(hostile)
    assert "<" not in out and ">" not in out and '"' not in out
    assert "&lt;script&gt;" in out and "&amp;" in out
    assert "\x1b" not in out and "\\x1b" in out             # control characters shown escaped
    block = html.esc_block("a <b>\nline two")
    assert block == "a &lt;b&gt;\nline two"


def test_an_image_is_an_inline_png_shown_at_css_inches():
    png = b"\x89PNG\r\n\x1a\nfake"
    tag = html.image(png, 'alt "text"', (2.0, 1.5))
    assert 'width="192" height="144"' in tag                 # 96 px per CSS inch
    assert base64.b64decode(tag.split("base64,")[1].split('"')[0]) == png
    assert 'alt="alt &quot;text&quot;"' in tag


def test_a_page_is_self_contained_and_well_formed():
    body = html.section("a", "Section <A>", html.table(["x", "y"], [["1", "2"]], numeric=(1,),
                                                         flags=[True])
                        + html.pairs([("key <k>", "value & v")]) + html.box("warn", "careful"))
    text = html.page("title <t>", "<h1>head</h1>", [("a", "Section <A>")], body, "foot")
    seen = check_self_contained_page(text)
    assert "Section <A>" in seen["text"] and "key <k>" in seen["text"]
    assert "value & v" in seen["text"] and seen["links"] == ["#a"] and "a" in seen["ids"]
    assert "<title>title &lt;t&gt;</title>" in text
    assert 'class="flag"' in text and "class=num" in text
