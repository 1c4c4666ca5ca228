"""The report of one result: a self-contained HTML page (`gatescope.report.html`).

In order: the warnings of the fit in words, near the top; the summary (every
figure of merit with its interval, marked where the data do not determine it
or where no physical process could have it; the fit's status; the goodness
of fit; the bootstrap); the magnitude–phase maps of chi and the Pauli
transfer matrix beside the target's with their difference (or the density
matrix of a state); the data view (observed against expected counts, the
Pearson residuals by setting, the rows that do not fit); the bootstrap
histograms; the input, the conditions and the provenance.

`report_html` builds the page from a `Result`; the images come from
`gatescope.report.plots` (matplotlib), everything else is text.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..conventions import n_qubits_of
from ..diagnostics import OUTLIER_RESIDUAL, POOR_FIT_P
from ..estimators import MAXIMUM_LIKELIHOOD
from ..intervals import parameter_range
from ..summary import (METHOD_WORDS, boundary_text, figure_label, number_text, row_numbers, status_of,
                       status_text, title_of)
from . import html
from .html import esc
from .plots import figure_size, render
from .views import result_plots

#: Rows listed in each table of rows that do not fit (the rest are counted).
MAX_ROWS_LISTED = 100
#: Values outside a figure's range by more than this are flagged (rounding allowance).
RANGE_SLACK = 1e-9


def _value(x) -> str:
    return esc(number_text(float(x)))


def _out_of_range(name: str, value: float, dim: int, kind: str) -> str:
    bounds = parameter_range(name, dim, kind)
    if bounds is None or not math.isfinite(value):
        return ""
    if bounds[0] - RANGE_SLACK <= value <= bounds[1] + RANGE_SLACK:
        return ""
    what = "state" if kind == "state" else "process"
    return (f'<span class="bad">outside [{_value(bounds[0])}, {_value(bounds[1])}]: '
            f"impossible for a physical {what}</span>")


def _bound_how(fig) -> str:
    return ", test inversion" if fig.lower_bound_method == "test-inversion" else ""


def figures_table(r) -> str:
    """Every figure of the result: its label and name, value, interval, and what to know."""
    rows = []
    for name, fig in r.figures.items():
        label = f"{esc(figure_label(name, r.kind))}<br><code>{esc(name)}</code>"
        notes = []
        if not fig.determined:
            value = (f'<span class="undetermined">not determined</span> '
                     f'<span class="small">({_value(fig.value)}, the estimator\'s choice)</span>')
            notes.append('<span class="undetermined">not determined by the data: the value '
                         "depends on the estimator's choice among estimates that fit the data "
                         "equally well</span>")
        else:
            value = _value(fig.value)
        if fig.ci is None:
            interval = '<span class="small">no interval (no bootstrap)</span>'
            if fig.lower_bound is not None:
                interval = ""
        else:
            lo, hi = fig.ci
            level = f"{100 * fig.level:g}%" if fig.level is not None else ""
            if abs(hi - lo) < 5e-13:
                interval = f"no spread at {level}"
            else:
                interval = f"[{_value(lo)}, {_value(hi)}] at {level}"
            if fig.interval_method in METHOD_WORDS:
                interval += f'<br><span class="small">{METHOD_WORDS[fig.interval_method]}</span>'
        if fig.lower_bound is not None:
            level = f"{100 * fig.level:g}%" if fig.level is not None else ""
            interval += (("<br>" if interval else "")
                         + f"≥ {_value(fig.lower_bound)} <span class=small>(one-sided lower "
                           f"bound at {level}{_bound_how(fig)})</span>")
        if fig.touches_boundary:
            notes.append(esc(boundary_text(name, fig, r.kind)))
        flag = _out_of_range(name, fig.value, r.dim, r.kind)
        if flag:
            notes.append(flag)
        rows.append((label, value, interval, "<br>".join(notes)))
    return html.table(["figure", "value", "interval", ""], rows, numeric=(1,))


def warnings_block(r) -> str:
    """Every warning of the result, in words; the unphysical status and undetermined
    figures even where a file did not record them as warnings."""
    parts = []
    if r.warnings:
        items = []
        for w in r.warnings:
            text = str(w)
            if text.startswith("[") and "]" in text:
                code, rest = text[1:].split("]", 1)
                items.append(f'<li><span class="code">[{esc(code)}]</span>{esc(rest)}</li>')
            else:
                items.append(f"<li>{esc(text)}</li>")
        parts.append(html.box("warn", f"<strong>{len(r.warnings)} warning"
                                      f"{'s' if len(r.warnings) != 1 else ''} of the fit</strong>"
                                      f" (kept in the result file):<ul>{''.join(items)}</ul>"))
    what = "state" if r.kind == "state" else "process"
    if r.origin != "truth" and status_of(r) == "unphysical" and \
            not any(str(w).startswith("[unphysical]") for w in r.warnings):
        parts.append(html.box("warn", f"<strong>Unphysical estimate.</strong> The {esc(r.method)} "
                                      f"estimate is not a physical {what}: figures outside the "
                                      f"range of every physical {what} are marked, and the "
                                      "likelihood is not defined where it predicts negative "
                                      "counts. Refit with mle (or pls) for a physical estimate."))
    undetermined = [figure_label(k, r.kind) for k, f in r.figures.items() if not f.determined]
    if undetermined:
        parts.append(html.box("note", "<strong>Not determined by the data:</strong> "
                                      f"{esc(', '.join(undetermined))}. Their values depend on "
                                      f"the estimator's choice among {what}s that fit the data "
                                      "equally well."))
    if r.origin == "truth":
        parts.append(html.box("note", f"The true {what} of a simulation, not a fit: there is "
                                      "no goodness of fit and no data view."))
    if not parts:
        parts.append(html.box("ok", "No warnings: the fit raised none."))
    return "".join(parts)


def _fit_items(r) -> list[tuple[str, str]]:
    items = [("method", r.method), ("status", status_text(r)),
             ("iterations", str(r.iterations)), ("estimator time", f"{r.seconds:.3f} s"),
             ("stop reason", r.stop_reason)]
    if math.isfinite(r.log_likelihood):
        items.append(("log-likelihood", f"{r.log_likelihood:.6f}"))
    else:
        items.append(("log-likelihood", "not defined for this estimate (it predicts no counts, "
                                        "or negative counts, where counts were seen)"))
    return items


def goodness_of_fit(r) -> str:
    """The χ² and deviance tests in words."""
    dg = r.diagnostics
    if dg is None:
        return "<p>No goodness of fit: the true channel of a simulation was not fitted.</p>"
    expected = np.asarray(dg.expected_counts, dtype=float)
    nonpositive = int(np.count_nonzero(expected <= 0))
    if not (math.isfinite(dg.chi2) and math.isfinite(dg.deviance)):
        return (f"<p>Goodness of fit: not defined for this estimate ({nonpositive} row(s) with "
                "non-positive expected counts).</p>")
    items = [("Pearson χ²", f"{dg.chi2:.2f}"), ("deviance", f"{dg.deviance:.2f}"),
             ("degrees of freedom", str(dg.dof))]
    if dg.dof > 0 and math.isfinite(dg.chi2_p_value):
        items += [("p-value of χ²", f"{dg.chi2_p_value:.3g}"),
                  ("p-value of the deviance", f"{dg.deviance_p_value:.3g}")]
    if dg.bootstrap_resamples:
        items.append(("bootstrap p-value", f"{dg.bootstrap_p_value:.3g} "
                                           f"({dg.bootstrap_resamples} resamples)"))
    out = html.pairs(items)
    if dg.dof <= 0:
        out += "<p>No test: no degrees of freedom are left.</p>"
    elif r.method not in MAXIMUM_LIKELIHOOD:
        out += (f"<p class=small>A {esc(r.method)} estimate does not maximise the likelihood, so "
                "these p-values are lower than for the model itself; refit with mle to test "
                "the model.</p>")
    elif dg.poor_fit:
        out += html.box("warn", f"Both p-values are below {POOR_FIT_P:g}: the model does not "
                                "describe the data. Check for miscalibrated optics, drift of "
                                "the source, or a wrong background (the data view below shows "
                                "where).")
    return out


def _bootstrap_items(r) -> list[tuple[str, str]]:
    b = r.bootstrap
    if b is None:
        return []
    how = b.interval
    for method, words in METHOD_WORDS.items():
        named = [figure_label(name, r.kind) for name, fig in r.figures.items()
                 if fig.interval_method == method]
        if named:
            how += f" ({words} for {', '.join(named)})"
    items = [("resamples", f"{b.samples} {b.kind}" + (f", refitted with {b.method}"
                                                       if b.method else "")),
             ("intervals", how), ("seed", str(b.seed)),
             ("refits that did not converge", str(b.failures))]
    if b.errors:
        items.append(("refits that raised an error", str(b.errors)))
    return items


def _vector(v) -> str:
    return "(" + ", ".join(f"{round(float(x), 3) + 0.0:+.3f}" for x in np.asarray(v).ravel()) + ")"


def details_block(r) -> str:
    """What belongs to the figures but is not one number (phases, settings, inputs)."""
    det = r.figure_details
    items = []
    if "local_phases_before" in det:
        deg = lambda v: "(" + ", ".join(f"{math.degrees(float(x)):+.2f}°"  # noqa: E731
                                        for x in np.asarray(v).ravel()) + ")"
        items.append(("local Z phases per qubit", f"before the gate {deg(det['local_phases_before'])}"
                                                  f", after {deg(det['local_phases_after'])}"))
    if "concurrence_input" in det:
        items.append(("input of the concurrence", f"{det['concurrence_input']} (ideal output: "
                      f"{number_text(float(det.get('concurrence_ideal', np.nan)))})"))
    if "diamond_solver" in det:
        items.append(("diamond distance", f"by semidefinite program ({det['diamond_solver']}, "
                                          f"{det.get('diamond_status', '?')}), not bootstrapped"))
    for key, who in (("chsh_a", "CHSH setting a (qubit 1)"), ("chsh_a_prime", "a′ (qubit 1)"),
                     ("chsh_b", "b (qubit 2)"), ("chsh_b_prime", "b′ (qubit 2)")):
        if key in det:
            items.append((who, _vector(det[key]) + " Bloch direction (<X>, <Y>, <Z>)"))
    if "correlation_singular_values" in det:
        items.append(("singular values of T_ij = Tr[ρ σ_i⊗σ_j]",
                      ", ".join(f"{float(x):.4f}" for x in np.asarray(
                          det["correlation_singular_values"]))))
    out = html.pairs(items) if items else ""
    u = det.get("nearest_unitary")
    if u is not None and np.asarray(u).shape[0] <= 4:
        rows = [[esc(f"{z.real:+.3f}{z.imag:+.3f}j") for z in row] for row in np.asarray(u)]
        out += ("<p class=small>The unitary nearest to the estimate (rows):</p>"
                + html.table(None, rows, numeric=range(len(rows)), cls="mono"))
    return out


def _row_table(r, rows, *, residual: bool) -> str:
    cols = r.counts_columns
    dg = r.diagnostics
    name, numbers = row_numbers(r, rows)
    has_prep = "prep" in cols
    header = [name] + (["prep"] if has_prep else []) + ["meas", "counts", "expected"] + \
        (["residual"] if residual else [])
    body = []
    for k, number in list(zip(rows, numbers))[:MAX_ROWS_LISTED]:
        cells = [str(int(number))] + ([esc(cols["prep"][k])] if has_prep else []) + [
            esc(cols["meas"][k]), str(int(cols["counts"][k])),
            f"{float(dg.expected_counts[k]):.2f}"]
        if residual:
            cells.append(f"{float(dg.pearson_residuals[k]):+.2f}")
        body.append(cells)
    first = len(header) - (3 if residual else 2)
    out = html.table(header, body, numeric=[0] + list(range(first, len(header))))
    if len(rows) > MAX_ROWS_LISTED:
        out += f"<p class=small>… and {len(rows) - MAX_ROWS_LISTED} more.</p>"
    return out


def rows_block(r) -> str:
    """The rows with non-positive expected counts and those whose residual exceeds the
    outlier limit, by CSV line."""
    dg = r.diagnostics
    expected = np.asarray(dg.expected_counts, dtype=float)
    name, _ = row_numbers(r, [])
    where = "CSV line, header = line 1" if name == "line" else "CSV data row, first = 1"
    out = ""
    nonpositive = np.flatnonzero(expected <= 0)
    if nonpositive.size:
        out += (f"<h3>Rows where the estimate expects no counts ({nonpositive.size})</h3>"
                f"<p class=small>{where}. Their residual is not defined.</p>"
                + _row_table(r, nonpositive, residual=False))
    bad = np.asarray(dg.outlier_rows, dtype=int)
    bad = bad[expected[bad] > 0]
    if bad.size:
        order = bad[np.argsort(-np.abs(dg.pearson_residuals[bad]), kind="stable")]
        out += (f"<h3>Rows with |Pearson residual| &gt; {OUTLIER_RESIDUAL:g} ({bad.size})</h3>"
                f"<p class=small>{where}; largest first.</p>"
                + _row_table(r, order, residual=True))
    if not out:
        out = (f"<p>No row has |Pearson residual| &gt; {OUTLIER_RESIDUAL:g}, and every row has "
               "positive expected counts.</p>")
    return out


def input_block(r) -> str:
    """What went in: sizes, hashes, the normalisation, and the experiment file's text."""
    cols = r.counts_columns
    counts = np.asarray(cols["counts"])
    items = [("rows", str(counts.size)), ("counts", f"{int(counts.sum()):,}")]
    if "prep_index" in cols:
        items.append(("preparations", str(len(np.unique(cols["prep_index"])))))
    items.append(("analyser projectors", str(len(np.unique(cols["meas_index"])))))
    extra = [c for c in ("seconds", "background", "efficiency", "group") if c in cols]
    items.append(("optional columns", ", ".join(extra) if extra else "none"))
    lam = np.asarray(r.intensities, dtype=float)
    if lam.size:
        items.append(("fitted intensities", f"{lam.size} group(s), from {lam.min():.6g} to "
                                            f"{lam.max():.6g} counts/s"))
    items += [("experiment file sha256", r.toml_sha256), ("counts file sha256", r.csv_sha256)]
    return (html.pairs(items) + "<h3>The experiment file as read</h3>"
            f"<pre>{html.esc_block(r.experiment_toml)}</pre>")


def conditions_block(r) -> str:
    if not r.conditions:
        return "<p>None: the experiment file has no [conditions] table.</p>"
    return html.pairs([(k, repr(v) if isinstance(v, str) else str(v))
                       for k, v in r.conditions.items()])


def provenance_block(r) -> str:
    items = [("created", r.created_utc)]
    items += [(k, f"{v:.3f}" if isinstance(v, float) else str(v))
              for k, v in sorted(r.provenance.items())]
    return html.pairs(items)


def _header(r, source: str) -> str:
    title = title_of(r) or "(untitled)"
    state = r.kind == "state"
    n = n_qubits_of(r.dim)
    counts = np.asarray(r.counts_columns["counts"])
    what = "state tomography" if state else "process tomography"
    target = f"target {'state ' if state else ''}{r.target_name or 'none'}"
    line = (f"{what} · {n} qubit{'s' if n != 1 else ''} · {target} · method {r.method} · "
            f"{counts.size} rows · {int(counts.sum()):,} counts")
    src = f"<p class=\"meta\">{esc(source)} · created {esc(r.created_utc)}</p>" if source else ""
    return f"<h1>{esc(title)}</h1><p class=\"meta\">{esc(line)}</p>{src}"


def _figures_html(plots, images) -> str:
    out = ""
    for plot in plots:
        out += html.figure(images[plot.name], figure_size(plot), alt=plot.alt,
                           caption=esc(plot.caption), title=plot.title, anchor=f"fig-{plot.name}")
    return out


def report_html(r, *, source: str = "") -> str:
    """The report page of result ``r`` (a `gatescope.Result`); ``source`` names its file.

    Raises `gatescope.report.plots.PlotUnavailable` without matplotlib."""
    plots = result_plots(r)
    images = {p.name: render(p, ("png",), "page")["png"] for p in plots}
    by_kind = {}
    for p in plots:
        by_kind.setdefault("maps" if p.kind == "magnitude_phase" else
                           "boot" if p.kind == "histograms" else "data", []).append(p)
    state = r.kind == "state"
    nav = [("summary", "Summary"), ("matrices", "Density matrix" if state else "Matrices")]
    body = warnings_block(r)

    left = figures_table(r)
    details = details_block(r)
    if details:
        left += "<h3>Details of the figures</h3>" + details
    right = "<h3>Fit</h3>" + html.pairs(_fit_items(r))
    if r.origin != "truth":
        right += "<h3>Goodness of fit</h3>" + goodness_of_fit(r)
    boot = _bootstrap_items(r)
    right += "<h3>Bootstrap</h3>" + (html.pairs(boot) if boot else
                                      "<p>None was run: the figures have no intervals (fit "
                                      "with --bootstrap B for error bars).</p>")
    summary = f'<div class="cols"><div>{left}</div><div class="side">{right}</div></div>'
    body += html.section("summary", "Summary", summary)

    maps = _figures_html(by_kind.get("maps", []), images)
    maps = ("<p class=small>In every map a cell's filled area is proportional to |entry| (a "
            "whole cell is the panel's stated scale) and its colour is the phase arg(entry) on "
            "the ring; entries below 0.1% of the scale are not drawn.</p>" + maps)
    if any(str(w).startswith("[undetermined]") for w in r.warnings):
        maps = html.box("note", "The data leave part of the estimate undetermined (see the "
                                "warnings): there the maps show the estimator's choice.") + maps
    body += html.section("matrices", "Density matrix" if state else "Matrices", maps)

    if r.diagnostics is not None:
        nav.append(("data", "Data"))
        body += html.section("data", "Data", _figures_html(by_kind.get("data", []), images)
                             + rows_block(r))
    if "boot" in by_kind:
        nav.append(("bootstrap", "Bootstrap"))
        body += html.section("bootstrap", "Bootstrap", _figures_html(by_kind["boot"], images))
    nav += [("input", "Input"), ("conditions", "Conditions"), ("provenance", "Provenance")]
    body += html.section("input", "Input", input_block(r))
    body += html.section("conditions", "Conditions", conditions_block(r))
    body += html.section("provenance", "Provenance", provenance_block(r))
    version = r.provenance.get("gatescope_version", "?")
    footer = (f"Report of {esc(source or 'a result')} written by gatescope "
              f"{esc(version)}. One self-contained file: nothing in it loads from elsewhere.")
    title = title_of(r) or "(untitled)"
    return html.page(f"gatescope report: {title}", _header(r, source), nav, body, footer)


def write_report_html(r, out, *, source: str = "") -> Path:
    """Write the report of ``r`` to ``out`` atomically (`gatescope.fileio`)."""
    from ..fileio import atomic_write_text

    text = report_html(r, source=source)
    atomic_write_text(out, text)
    return Path(out)


__all__ = ["report_html", "write_report_html", "figures_table", "warnings_block",
           "goodness_of_fit", "details_block", "rows_block", "input_block", "MAX_ROWS_LISTED"]
