"""The pieces of a report page: escaping, tables, inline images, the page itself.

A page is one self-contained HTML file: its style sheet is inline, its
images are PNG files inside it (base64 ``data:`` URIs), it needs no script
and loads nothing from the network, so that it can be mailed, archived and
opened anywhere. Every text that comes from a file (a title, a label, a
warning, a condition, the experiment file itself) passes through `esc`:
non-printable characters are shown escaped (`gatescope.errors.printable`)
and ``& < > " '`` become entities, so no file can inject markup.
"""

from __future__ import annotations

import base64
import html as _html

from ..errors import printable

#: Pixels per inch of a CSS inch: a figure of w inches is shown w·96 pixels wide.
CSS_DPI = 96

STYLE = """
:root { color-scheme: light; }
* { box-sizing: border-box; }
body { margin: 0; background: #ffffff; color: #222222;
  font: 15px/1.5 "DejaVu Sans", "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1220px; margin: 0 auto; padding: 22px 28px 56px; }
h1 { font-size: 1.45rem; font-weight: 600; margin: 0 0 2px; line-height: 1.3; }
h2 { font-size: 1.12rem; font-weight: 600; margin: 2.2rem 0 0.6rem; padding-bottom: 3px;
  border-bottom: 1px solid #d9d9d9; }
h3 { font-size: 0.98rem; font-weight: 600; margin: 1.3rem 0 0.4rem; }
p { margin: 0.4rem 0; max-width: 82ch; }
.meta { color: #5c5c5c; margin: 0; }
nav { margin: 10px 0 0; font-size: 0.92rem; }
nav a { margin-right: 1.1em; }
a { color: #2a5d8f; }
code, pre, .mono { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 0.86em; }
pre { background: #f6f6f6; border: 1px solid #e6e6e6; padding: 8px 10px; overflow-x: auto;
  white-space: pre-wrap; word-break: break-all; max-width: 100%; }
table { border-collapse: collapse; margin: 0.3rem 0 0.8rem; font-variant-numeric: tabular-nums; }
th, td { text-align: left; vertical-align: top; padding: 3px 14px 3px 0;
  border-bottom: 1px solid #ececec; }
th { font-weight: 600; border-bottom: 1px solid #bdbdbd; }
td.num, th.num { text-align: right; }
tr.flag td { background: #fbefee; }
.box { border-left: 4px solid #bdbdbd; background: #f7f7f7; padding: 8px 14px; margin: 14px 0; }
.box.warn { border-left-color: #b3261e; background: #fbefee; }
.box.note { border-left-color: #a86b00; background: #fdf6e9; }
.box.ok { border-left-color: #2f7d4f; background: #eff7f2; }
.box ul { margin: 0.3rem 0; padding-left: 1.2rem; }
.box li { margin: 0.15rem 0; }
.code { font-weight: 600; font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace;
  font-size: 0.88em; }
.undetermined { color: #8a5300; }
.bad { color: #b3261e; font-weight: 600; }
.small { font-size: 0.86rem; color: #5c5c5c; }
figure { margin: 0.6rem 0 1.4rem; }
figure img { display: block; max-width: 100%; height: auto; }
figcaption { font-size: 0.9rem; color: #4a4a4a; max-width: 92ch; margin-top: 4px; }
.cols { display: grid; grid-template-columns: auto minmax(300px, 1fr); gap: 0 48px;
  align-items: start; }
.cols > div { min-width: 0; }
@media (max-width: 980px) { .cols { grid-template-columns: minmax(0, 1fr); } }
.cols .side h3:first-child { margin-top: 0.3rem; }
.scroll { overflow-x: auto; max-width: 100%; }
table.dense { font-size: 0.86rem; }
table.dense th { vertical-align: bottom; }
.nowrap { white-space: nowrap; }
.pairs td:first-child { white-space: nowrap; color: #444444; }
.grid { display: flex; flex-wrap: wrap; gap: 0 40px; align-items: flex-start; }
footer { margin-top: 3rem; font-size: 0.82rem; color: #6b6b6b; border-top: 1px solid #e6e6e6;
  padding-top: 6px; }
@media print { main { max-width: none; padding: 0; } h2 { break-after: avoid; }
  figure { break-inside: avoid; } }
"""


def esc(text) -> str:
    """``text`` (anything from a file) made safe and visible inside HTML."""
    return _html.escape(printable(text), quote=True)


def esc_block(text) -> str:
    """Multi-line text (a file's content) for a ``<pre>``: each line as `esc`, the line
    breaks kept."""
    return "\n".join(esc(line) for line in str(text).splitlines())


def png_uri(data: bytes) -> str:
    """A ``data:`` URI of PNG bytes."""
    return "data:image/png;base64," + base64.b64encode(data).decode("ascii")


def image(data: bytes, alt: str, size_in: tuple[float, float]) -> str:
    """An inline PNG shown at ``size_in`` inches (CSS inches), shrinking with the window."""
    w, h = (round(x * CSS_DPI) for x in size_in)
    return (f'<img src="{png_uri(data)}" width="{w}" height="{h}" alt="{esc(alt)}">')


def figure(data: bytes, size_in, *, alt: str, caption: str = "", title: str = "",
           anchor: str = "") -> str:
    """A ``<figure>`` with its image, heading and caption."""
    head = f"<h3{_id(anchor)}>{esc(title)}</h3>\n" if title else ""
    cap = f"<figcaption>{caption}</figcaption>" if caption else ""
    return f"{head}<figure>{image(data, alt, size_in)}{cap}</figure>\n"


def _id(anchor: str) -> str:
    return f' id="{esc(anchor)}"' if anchor else ""


def table(header, rows, *, numeric=(), flags=None, cls: str = "") -> str:
    """A table of already escaped cells (``header`` None: no header row). ``numeric``:
    indices of right-aligned columns; ``flags``: per row, True to highlight it."""
    numeric = set(numeric)
    klass = f' class="{cls}"' if cls else ""
    out = [f"<table{klass}>"]
    if header is not None:
        out.append("<thead><tr>")
        out += [f'<th{" class=num" if k in numeric else ""}>{h}</th>'
                for k, h in enumerate(header)]
        out.append("</tr></thead>")
    out.append("<tbody>")
    for i, row in enumerate(rows):
        flag = ' class="flag"' if flags is not None and flags[i] else ""
        out.append(f"<tr{flag}>" + "".join(
            f'<td{" class=num" if k in numeric else ""}>{cell}</td>' for k, cell in enumerate(row))
            + "</tr>")
    out.append("</tbody></table>")
    return "".join(out) + "\n"


def pairs(items) -> str:
    """A two-column table of (name, value) pairs, both escaped here."""
    return table(None, [(esc(k), esc(v)) for k, v in items], cls="pairs")


def box(kind: str, inner: str) -> str:
    """A highlighted box: ``warn``, ``note`` or ``ok``."""
    return f'<div class="box {kind}">{inner}</div>\n'


def section(anchor: str, title: str, body: str) -> str:
    """A titled section of the page."""
    return f'<section><h2 id="{esc(anchor)}">{esc(title)}</h2>\n{body}</section>\n'


def page(title: str, header: str, nav, body: str, footer: str) -> str:
    """The whole page: ``title`` (escaped here) in the window's title, ``header`` and
    ``body`` (HTML), ``nav`` a list of (anchor, text) links, ``footer`` (HTML)."""
    links = "".join(f'<a href="#{esc(a)}">{esc(t)}</a>' for a, t in nav)
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<title>{esc(title)}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n<main>\n"
            f"<header>{header}<nav>{links}</nav></header>\n{body}"
            f"<footer>{footer}</footer>\n</main>\n</body>\n</html>\n")


__all__ = ["esc", "esc_block", "png_uri", "image", "figure", "table", "pairs", "box",
           "section", "page", "STYLE", "CSS_DPI"]
