"""HTML from the jinja2 templates, PDF from WeasyPrint, written atomically.

The templates (``report.html``, ``report.css``) are looked up, first found wins:

1. the folder named by the environment variable ``AUDITOR_TEMPLATES``;
2. ``templates/`` beside the ``auditor`` package (a source checkout or an
   editable install);
3. ``<sys.prefix>/share/auditor/templates`` (installed as data files);
4. ``auditor/report/templates`` (installed as package data).

The PDF is rendered to bytes in memory and only then written through
:func:`auditor.outputs.atomic_write`, so a failure or an interruption at any
point leaves no partial file.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

from . import ReportError

__all__ = ["template_dir", "render_html", "html_to_pdf", "write_report", "INSTALL_HINT"]

INSTALL_HINT = ("on Debian/Ubuntu: apt-get install libpango-1.0-0 libpangoft2-1.0-0 "
                "fonts-dejavu-core")


def template_dir() -> Path:
    """The folder holding report.html and report.css (see module docstring)."""
    here = Path(__file__).resolve().parent
    candidates = []
    if os.environ.get("AUDITOR_TEMPLATES"):
        candidates.append(Path(os.environ["AUDITOR_TEMPLATES"]))
    candidates += [here.parent.parent / "templates",
                   Path(sys.prefix) / "share" / "auditor" / "templates",
                   here / "templates"]
    for c in candidates:
        if (c / "report.html").is_file() and (c / "report.css").is_file():
            return c
    raise ReportError("report templates (report.html, report.css) not found; looked in "
                      + ", ".join(str(c) for c in candidates)
                      + "; set AUDITOR_TEMPLATES to their folder")


def _environment(folder: Path):
    try:
        import jinja2
    except ImportError as exc:
        raise ReportError("the PDF report needs jinja2: pip install jinja2") from exc
    return jinja2.Environment(loader=jinja2.FileSystemLoader(str(folder)),
                              autoescape=jinja2.select_autoescape(["html"]),
                              undefined=jinja2.StrictUndefined, trim_blocks=True,
                              lstrip_blocks=True)


def render_html(result, *, require=("NEC", "WEC", "SEC", "DEC"), command: str = "") -> str:
    """The report as one self-contained HTML document."""
    from .dimensions import infer_dimensions
    from .gallery import build_figures
    from .mathtex import typeset_definition, typeset_line_element
    from .method import method_view
    from .model import build_view

    j = result.to_json()          # the one source of every printed number
    metric = result.metric
    dims = infer_dimensions(metric)
    view = build_view(j, metric, require=require, command=command, dims=dims)
    try:
        figures = build_figures(result, j, dims)
        line_element = typeset_line_element(metric)
        definitions = [(d, typeset_definition(metric, d)) for d in metric.definitions]
    except ImportError as exc:
        raise ReportError(f"the PDF report needs matplotlib ({exc}): pip install matplotlib") \
            from exc
    except (ValueError, RuntimeError, OverflowError) as exc:
        raise ReportError(f"could not draw the report's figures: {exc}") from exc
    folder = template_dir()
    env = _environment(folder)
    css = (folder / "report.css").read_text(encoding="utf-8")
    return env.get_template("report.html").render(
        v=view, fig=figures, eq=line_element, definitions=definitions, css=css,
        method=method_view(j, result), cite=_citer(view["references"]))


def _citer(refs):
    numbers = {r["key"]: r["n"] for r in refs}

    def cite(*keys):
        return "[" + ", ".join(str(numbers[k]) for k in keys) + "]"
    return cite


def html_to_pdf(html: str, base_url: str | None = None) -> bytes:
    """PDF bytes of ``html`` (WeasyPrint); its errors become :class:`ReportError`."""
    try:
        import weasyprint
    except ImportError as exc:
        raise ReportError("the PDF report needs WeasyPrint: pip install weasyprint") from exc
    except OSError as exc:   # a missing system library (Pango, HarfBuzz, fontconfig)
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ReportError(f"WeasyPrint cannot load a system library ({first}); "
                          + INSTALL_HINT) from exc
    try:
        return weasyprint.HTML(string=html, base_url=base_url).write_pdf()
    except OSError as exc:
        raise ReportError(f"WeasyPrint failed ({exc}); {INSTALL_HINT}") from exc
    except Exception as exc:  # WeasyPrint has no common exception base class
        raise ReportError(f"could not render the PDF: {type(exc).__name__}: {exc}") from exc


def write_report(result, path, *, require=("NEC", "WEC", "SEC", "DEC"), command: str = ""):
    """Render the report and write it atomically to ``path``."""
    from ..errors import UsageError
    from ..outputs import atomic_write
    html = render_html(result, require=require, command=command)
    pdf = html_to_pdf(html, base_url=str(template_dir()))
    try:
        with atomic_write(path, "wb") as fh:
            fh.write(pdf)
    except OSError as exc:
        raise UsageError(f"cannot write {path}: {exc.strerror or exc}") from exc
    return path
