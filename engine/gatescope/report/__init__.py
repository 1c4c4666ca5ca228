"""Reports people look at: a self-contained HTML page of a result, figures for papers,
and the overview of a batch (the ``report`` command; README, "Reports").

* `plots` — every figure (matplotlib, the optional ``plot`` extra): the one
  module that imports matplotlib, with a non-interactive backend;
* `views` — what the figures of a result show, as plain data;
* `html` — the pieces of a page: escaping, tables, inline images, style;
* `page` — the report of one result;
* `overview` — the overview of a batch output folder;
* `paper` — the figures as SVG, PDF and PNG files, one column wide;
* `run` — `make_report`, what the command writes, checked before any work.
"""

from .run import ReportOutcome, check_available, default_report_path, make_report, result_report

__all__ = ["make_report", "result_report", "check_available", "default_report_path",
           "ReportOutcome"]
