"""Look of the report's figures, and their export to SVG.

matplotlib is imported lazily, with the Agg backend (no display needed).
Figures are saved as SVG and embedded in the HTML as data URIs; their text
stays text (``svg.fonttype = none``, DejaVu Sans, which the report's own
fonts require anyway), so the PDF's figures are searchable and WeasyPrint
renders them several times faster than glyph outlines. Images of gridded data
inside them are raster cells (``imshow``, nearest sampling), everything else
is vector.

Colours are colour-blind safe: the Okabe & Ito (2008) palette for categories
and lines, ``PuOr`` (diverging about zero) for signed quantities, ``cividis``
for positive ones.
"""

from __future__ import annotations

import base64
import io

__all__ = ["OKABE_ITO", "SIGNED_CMAP", "POSITIVE_CMAP", "EXCLUDED_FACE", "EXCLUDED_HATCH",
           "SATURATED_FACE", "FULL_WIDTH_IN", "style", "new_figure", "place", "margins",
           "to_svg_uri",
           "coordinate_tex"]

#: Okabe & Ito (2008), "Color Universal Design", the eight-colour palette.
OKABE_ITO = {"black": "#000000", "orange": "#E69F00", "sky": "#56B4E9", "green": "#009E73",
             "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00",
             "purple": "#CC79A7"}
SIGNED_CMAP = "PuOr"            # negative: orange-brown, positive: purple
POSITIVE_CMAP = "cividis"
EXCLUDED_FACE = "#ececec"
EXCLUDED_HATCH = "#8c8c8c"
SATURATED_FACE = "#cfe3df"      # pale green-grey: holds at the edge (|margin| ≤ tolerance)
#: Resolution of raster parts inside the vector figures, dots per inch.
RASTER_DPI = 200
#: Text column of templates/report.css (170 mm) in inches.
FULL_WIDTH_IN = 170.0 / 25.4

_RC = {
    "font.family": "DejaVu Sans", "font.size": 8.0, "axes.titlesize": 8.5,
    "axes.labelsize": 8.0, "xtick.labelsize": 7.0, "ytick.labelsize": 7.0,
    "legend.fontsize": 7.0, "axes.linewidth": 0.6, "xtick.direction": "in",
    "ytick.direction": "in", "xtick.major.width": 0.6, "ytick.major.width": 0.6,
    "xtick.minor.width": 0.4, "ytick.minor.width": 0.4, "xtick.top": False,
    "ytick.right": False, "lines.linewidth": 1.1, "mathtext.fontset": "dejavusans",
    "svg.fonttype": "none", "svg.hashsalt": "auditor-report", "hatch.linewidth": 0.5,
    "axes.titlepad": 4.0, "figure.dpi": 100, "image.interpolation": "nearest",
    "axes.prop_cycle": None,
}

_GREEK = {"alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta", "iota",
          "kappa", "lambda", "mu", "nu", "xi", "pi", "rho", "sigma", "tau", "upsilon",
          "phi", "chi", "psi", "omega", "Gamma", "Delta", "Theta", "Lambda", "Xi", "Pi",
          "Sigma", "Upsilon", "Phi", "Psi", "Omega"}


def style():
    """A context in which figures get the report's look (global rcParams untouched).

    Figures are built as :class:`matplotlib.figure.Figure` objects, never
    through pyplot, so no window system and no global figure state are
    involved; the Agg backend is selected if pyplot has not been imported.
    """
    import sys

    import matplotlib
    if "matplotlib.pyplot" not in sys.modules:
        matplotlib.use("Agg")
    from cycler import cycler
    rc = dict(_RC)
    rc["axes.prop_cycle"] = cycler(color=[OKABE_ITO[k] for k in
                                          ("blue", "vermillion", "green", "orange", "purple",
                                           "sky", "black")])
    return matplotlib.rc_context(rc)


def new_figure(width_in: float, height_in: float):
    """A Figure (call inside :func:`style`); axes are placed by :func:`place`."""
    from matplotlib.figure import Figure
    return Figure(figsize=(width_in, height_in))


def place(fig, x_in: float, y_in: float, w_in: float, h_in: float, **kw):
    """Axes at a position given in inches from the lower-left corner.

    Layout is fixed by hand rather than by matplotlib's layout engines: the
    figures have few, known parts, and a fixed layout draws three to four
    times faster than the constrained-layout solver.
    """
    fw, fh = fig.get_size_inches()
    return fig.add_axes((x_in / fw, y_in / fh, w_in / fw, h_in / fh), **kw)


def margins(fig, *, left: float, right: float, top: float, bottom: float,
            wspace: float = 0.0, hspace: float = 0.0, ncols: int = 1, nrows: int = 1):
    """``subplots_adjust`` with margins and gaps in inches."""
    fw, fh = fig.get_size_inches()
    pw = (fw - left - right - wspace * (ncols - 1)) / ncols
    ph = (fh - top - bottom - hspace * (nrows - 1)) / nrows
    fig.subplots_adjust(left=left / fw, right=1 - right / fw, bottom=bottom / fh,
                        top=1 - top / fh, wspace=wspace / pw if ncols > 1 else 0.2,
                        hspace=hspace / ph if nrows > 1 else 0.2)


def to_svg_uri(fig) -> str:
    """Save ``fig`` as SVG and return a base64 data URI."""
    buf = io.BytesIO()
    # dpi only affects raster parts (image cells, rasterised scatter): 200 dpi is
    # finer than the eye resolves at print size (~150 dpi for 8 pt text).
    fig.savefig(buf, format="svg", dpi=RASTER_DPI, metadata={"Date": None})
    return "data:image/svg+xml;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def coordinate_tex(name: str) -> str:
    """A coordinate name as mathtext: ``theta`` → ``$\\theta$``, ``x`` → ``$x$``."""
    if name in _GREEK:
        return f"$\\{name}$"
    if len(name) == 1:
        return f"${name}$"
    return f"$\\mathrm{{{name}}}$"
