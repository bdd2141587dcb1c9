"""The PDF report and the LaTeX table of an audit.

Pipeline (one concern per module)::

    AuditResult ──to_json()──► model.build_view ──► formatted strings ─┐
         │                     (numbers: the one number format;        │
         │                      method: settings quoted in Appendix A) │
         └─ maps, worldline ─► gallery.build_figures ──► SVG figures ──┤
                               (slices: which plane; figures: maps;    │
                                plots: line plots; style: look, SVG)   │
    Metric.g_display ────────► mathtex ──► typeset line element ───────┤
                     └───────► dimensions ──► units of the parameters ─┤
                                                                       ▼
                         templates/report.html + report.css (jinja2) ──► HTML
                         render.html_to_pdf (WeasyPrint) ──► PDF bytes ──► atomic write
    AuditResult ──to_json()──► latex.latex_table ──► booktabs table ──► atomic write

Every number printed comes from the audit JSON (``result.to_json()``), the
same document ``--json`` writes, so the PDF and the JSON agree by
construction. matplotlib, WeasyPrint and jinja2 are imported only when a
report is written.

Errors of the PDF stack (a missing WeasyPrint system library, a drawing
failure) are raised as :class:`ReportError`, a subclass of
:class:`auditor.errors.AuditorError`, chained with ``raise ... from``.
"""

from __future__ import annotations

from ..errors import ReportError

__all__ = ["ReportError", "write_report", "write_latex", "render_html", "latex_table"]


def write_report(result, path, *, require=("NEC", "WEC", "SEC", "DEC"), command: str = ""):
    """Render the PDF report of ``result`` and write it atomically to ``path``."""
    from .render import write_report as _write
    return _write(result, path, require=tuple(require), command=command)


def render_html(result, *, require=("NEC", "WEC", "SEC", "DEC"), command: str = "") -> str:
    """The report as one self-contained HTML document (figures inline)."""
    from .render import render_html as _render
    return _render(result, require=tuple(require), command=command)


def write_latex(result, path) -> None:
    """Write the booktabs table of ``result`` atomically to ``path``."""
    from .latex import write_latex as _write
    return _write(result, path)


def latex_table(j: dict) -> str:
    """The booktabs table (LaTeX source) of an audit JSON document."""
    from .latex import latex_table as _table
    return _table(j)
