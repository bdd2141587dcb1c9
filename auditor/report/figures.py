"""Maps of per-event quantities over the sampled grid (see :mod:`.slices`).

Three kinds of map, each drawn as a plane (two sampled axes) or, for a
one-axis region, as a line plot:

* ``signed`` — margins and energy density: a diverging scale symmetric about
  zero (``PuOr``; |limits| = the largest |value| shown, so all-negative data
  use the negative half only and all-zero data show no colour at all). With a
  tolerance, events with |value| ≤ tolerance are painted flat as "saturated"
  (their value is round-off, not a signal) and the violation boundary
  value = −tolerance is drawn as a black contour;
* ``log`` — positive quantities over many decades (tidal acceleration in g):
  ``cividis`` on a logarithmic scale, values ≤ 0 in the "under" colour, and the
  criterion drawn as a contour;
* ``category`` — the Hawking–Ellis type, Okabe–Ito colours with a legend.

Excluded events (and events where a quantity is undefined) are a hatched
grey mask everywhere.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .numbers import format_number
from .slices import Plane, planes
from .style import (EXCLUDED_FACE, EXCLUDED_HATCH, FULL_WIDTH_IN, OKABE_ITO, POSITIVE_CMAP,
                    SATURATED_FACE, SIGNED_CMAP, coordinate_tex, margins, new_figure, place,
                    to_svg_uri)

__all__ = ["GridContext", "Drawn", "map_figure", "HE_COLOURS", "HE_NAMES", "plane_caption"]

HE_NAMES = ("vacuum", "type I", "type II", "type III", "type IV")
HE_COLOURS = (OKABE_ITO["sky"], OKABE_ITO["green"], OKABE_ITO["yellow"], OKABE_ITO["orange"],
              OKABE_ITO["vermillion"])
_ANGLES = {"theta", "phi", "th", "ph", "psi", "chi", "vartheta", "varphi"}
#: Astronomical unit, m (exact; IAU 2012 Resolution B2) and parsec = 648000/π au
#: (IAU 2015 Resolution B2).
_AU_M = 149_597_870_700.0
_PC_M = 648_000.0 / np.pi * _AU_M
#: Length units of the secondary axes: (metres per unit, label), increasing.
_LENGTH_UNITS = ((1e-3, "mm"), (1.0, "m"), (1e3, "km"), (1e6, "10³ km"), (1e9, "10⁶ km"),
                 (_AU_M, "au"), (_PC_M, "pc"), (1e3 * _PC_M, "kpc"), (1e6 * _PC_M, "Mpc"),
                 (1e9 * _PC_M, "Gpc"))


@dataclass(frozen=True)
class Drawn:
    """What a map shows, for its caption."""

    planes: list
    boundary: bool = False      # a violation boundary or criterion contour
    flat: bool = False          # events painted flat (within round-off)
    excluded: bool = False      # the hatched mask


@dataclass(frozen=True)
class GridContext:
    """What every map needs to know about the grid and its axes."""

    names: tuple            # sampled coordinate names, grid order
    values: tuple           # their sample values
    shape: tuple
    time_name: str
    length_m: float
    dims: dict              # coordinate -> exponent of L (None unknown)
    excluded: np.ndarray    # flat bool: not audited

    def is_length(self, k: int) -> bool:
        name = self.names[k]
        d = self.dims.get(name)
        if d is None:
            return name not in _ANGLES
        return d == 1

    def label(self, k: int) -> str:
        name = self.names[k]
        if self.is_length(k):
            unit = "L/c" if name == self.time_name else "L"
            return f"{coordinate_tex(name)}  [{unit}]"
        if name in _ANGLES or self.dims.get(name) == 0:
            return f"{coordinate_tex(name)}  [rad]" if name in _ANGLES else coordinate_tex(name)
        return f"{coordinate_tex(name)}  [coordinate units]"

    def plane_text(self, plane: Plane, mark: str = "") -> str:
        if not plane.held:
            return ""
        parts = [f"{self.names[a]} = {format_number(self.values[a][i])}" for a, i in plane.held]
        return ", ".join(parts)


def plane_caption(ctx: GridContext, pls: list, focus_word: str) -> str:
    """Sentence saying which planes a map shows (numbers are grid values)."""
    if pls[0].v is None:
        return ""
    if len(pls) == 1 and not pls[0].held:
        return f"The circle marks the {focus_word}."
    texts = []
    for k, p in enumerate(pls):
        side = ("Left" if k == 0 else "right") if len(pls) == 2 else ""
        if p.role == "middle":
            spatial = [ctx.names[a] for a, _ in p.held if ctx.names[a] != ctx.time_name]
            what = "middle of the " + " and ".join(spatial) + " range" if spatial else ""
            if len(spatial) < len(p.held):
                what += ("; " if what else "") + f"time of the {focus_word}"
        else:
            what = f"through the {focus_word}, circled"
        texts.append(f"{side + ': ' if side else ''}{ctx.plane_text(p)} ({what})")
    text = "; ".join(texts) + "."
    return text if len(pls) == 2 else "Plane " + text


def _secondary(ax, ctx: GridContext, k: int, which: str):
    """An axis in SI length units opposite the coordinate axis."""
    if not ctx.is_length(k) or ctx.names[k] == ctx.time_name:
        return
    top = float(np.max(np.abs(ctx.values[k]))) * ctx.length_m
    scale, unit = _LENGTH_UNITS[0]
    for s, u in _LENGTH_UNITS:
        if top >= s:
            scale, unit = s, u
    f = ctx.length_m / scale
    funcs = (lambda v, f=f: v * f, lambda v, f=f: v / f)
    if which == "x":
        sec = ax.secondary_xaxis("top", functions=funcs)
        sec.set_xlabel(f"{coordinate_tex(ctx.names[k])}  [{unit}]", fontsize=7, labelpad=2)
    else:
        sec = ax.secondary_yaxis("right", functions=funcs)
        sec.set_ylabel(f"{coordinate_tex(ctx.names[k])}  [{unit}]", fontsize=7, labelpad=2)
    sec.tick_params(labelsize=6.5, direction="in")


def _extent(vals):
    d = (vals[-1] - vals[0]) / (len(vals) - 1) if len(vals) > 1 else 1.0
    return vals[0] - d / 2, vals[-1] + d / 2


def _excluded_patch(ax, extent):
    from matplotlib.patches import Rectangle
    x0, x1, y0, y1 = extent
    ax.add_patch(Rectangle((x0, y0), x1 - x0, y1 - y0, facecolor=EXCLUDED_FACE,
                           edgecolor=EXCLUDED_HATCH, hatch="////", linewidth=0, zorder=0))


def _legend_handles(kind, show_excluded, show_saturated, show_boundary, boundary_label,
                    categories=(), flat_label="saturated (|margin| ≤ tolerance)"):
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    h = []
    for name, colour in categories:
        h.append(Patch(facecolor=colour, edgecolor="#555555", linewidth=0.4, label=name))
    if show_saturated:
        h.append(Patch(facecolor=SATURATED_FACE, edgecolor="#555555", linewidth=0.4,
                       label=flat_label))
    if show_boundary and boundary_label:
        colour = "black" if kind == "signed" else OKABE_ITO["vermillion"]
        h.append(Line2D([], [], color=colour, lw=1.0, label=boundary_label))
    if show_excluded:
        h.append(Patch(facecolor=EXCLUDED_FACE, edgecolor=EXCLUDED_HATCH, hatch="////",
                       linewidth=0, label="excluded / undefined"))
    return h


def _norm(kind, shown: list, level=None):
    from matplotlib.colors import LogNorm, Normalize
    vals = np.concatenate([np.ravel(np.ma.filled(s.astype(float), np.nan)) for s in shown]) \
        if shown else np.array([])
    vals = vals[np.isfinite(vals)]
    if kind == "signed":
        a = float(np.max(np.abs(vals))) if vals.size else 0.0
        return Normalize(-a, a) if a > 0 else Normalize(-1.0, 1.0), a > 0
    if kind == "log":
        pos = vals[vals > 0]
        if not pos.size:
            return LogNorm(1e-3, 1.0), False
        hi = float(pos.max())
        lo = max(float(pos.min()), hi * 1e-12)   # at most 12 decades shown
        if lo > hi / 10:     # (nearly) uniform: show at least one decade below the data
            lo = hi / 10
        return LogNorm(lo, hi), True
    return Normalize(-0.5, 4.5), True


def map_figure(ctx: GridContext, values, *, kind: str, focus: int | None,
               cbar_label: str, tol=None, level: float | None = None,
               level_label: str = "", boundary: bool = True,
               flat_label: str = "saturated (|margin| ≤ tolerance)") -> tuple[str, Drawn]:
    """SVG data URI of the map of ``values`` (flat) and what it shows."""
    values = np.asarray(values, dtype=float)
    pls = planes(ctx.names, ctx.time_name, ctx.shape, focus)
    if pls[0].v is None:
        uri, flat, exc = _line_figure(ctx, values, kind=kind, cbar_label=cbar_label, tol=tol,
                                      level=level, level_label=level_label,
                                      flat_label=flat_label)
        return uri, Drawn(pls, False, flat, exc)
    from matplotlib.colors import ListedColormap
    import matplotlib as mpl

    excluded = ctx.excluded | ~np.isfinite(values)
    if kind == "category":
        excluded = excluded | (values < 0)
    sat = np.zeros(values.shape, bool)
    if tol is not None:
        with np.errstate(invalid="ignore"):
            sat = ~excluded & (np.abs(values) <= tol)
    shown, sat_planes, exc_planes = [], [], []
    for p in pls:
        d = p.take(values, ctx.shape)
        e = p.take(excluded, ctx.shape)
        s = p.take(sat, ctx.shape)
        shown.append(np.ma.masked_where(e | s, d))
        sat_planes.append(s)
        exc_planes.append(e)
    norm, has_scale = _norm(kind, shown, level)
    if kind == "signed":
        cmap = mpl.colormaps[SIGNED_CMAP].with_extremes(bad=(0, 0, 0, 0))
    elif kind == "log":
        cmap = mpl.colormaps[POSITIVE_CMAP].with_extremes(bad=(0, 0, 0, 0), under="white")
    else:
        cmap = ListedColormap(HE_COLOURS).with_extremes(bad=(0, 0, 0, 0))

    h, v = pls[0].h, pls[0].v
    xv, yv = ctx.values[h], ctx.values[v]
    extent = (*_extent(xv), *_extent(yv))
    equal = ctx.is_length(h) and ctx.is_length(v) and \
        ctx.time_name not in (ctx.names[h], ctx.names[v])
    legend = any(e.any() for e in exc_planes) or kind == "category" or \
        any(s.any() for s in sat_planes) or \
        (boundary and any(_contour_field(ctx, p, values, tol, level, kind) is not None
                          for p in pls))
    fig, axes, cax = _map_layout(ctx, len(pls), h, v, extent, equal, legend)
    any_exc = any(e.any() for e in exc_planes)
    any_sat = any(s.any() for s in sat_planes)
    any_boundary = False
    image = None
    for k, (ax, p, d) in enumerate(zip(axes, pls, shown)):
        _excluded_patch(ax, extent)
        if kind == "log":
            d = np.ma.masked_where(np.ma.getmaskarray(d), np.where(d.filled(np.nan) <= 0,
                                                                     norm.vmin / 10, d.filled(np.nan)))
        image = ax.imshow(d, origin="lower", extent=extent, cmap=cmap, norm=norm,
                          interpolation="nearest", aspect="auto", zorder=1)
        if sat_planes[k].any():
            ax.imshow(np.ma.masked_where(~sat_planes[k], np.ones(sat_planes[k].shape)),
                      origin="lower", extent=extent, cmap=ListedColormap([SATURATED_FACE]),
                      interpolation="nearest", aspect="auto", zorder=1.5)
        if boundary:
            any_boundary |= _contour(ax, ctx, p, values, tol, level, kind, xv, yv)
        if focus is not None and p.contains(focus, ctx.shape):
            idx = np.unravel_index(focus, ctx.shape)
            ax.plot([xv[idx[h]]], [yv[idx[v]]], marker="o", ms=6, mfc="none", mec="black",
                    mew=1.0, zorder=4)
        ax.set_xlabel(ctx.label(h))
        if k == 0:
            ax.set_ylabel(ctx.label(v))
        if p.held:
            ax.set_title(ctx.plane_text(p), fontsize=8)
        ax.set_xlim(extent[0], extent[1])
        ax.set_ylim(extent[2], extent[3])
        _secondary(ax, ctx, h, "x")     # one SI axis per figure keeps it light
    if kind == "category":
        present = sorted({int(c) for pl in shown for c in np.ma.compressed(pl)})
        cats = [(HE_NAMES[c], HE_COLOURS[c]) for c in present]
        handles = _legend_handles(kind, any_exc, False, False, "", cats)
        fig.legend(handles=handles, loc="lower center", ncol=min(len(handles), 6),
                   frameon=False, bbox_to_anchor=(0.5, 0.0))
        cax.set_visible(False)
    else:
        clipped = kind == "log" and any(
            np.ma.count(np.ma.masked_where(np.ma.getmaskarray(d) | ~(d.filled(np.inf) < norm.vmin), d))
            for d in shown)
        extend = "min" if clipped else "neither"
        if has_scale:
            cb = fig.colorbar(image, cax=cax, extend=extend)
            cb.set_label(cbar_label)
            cb.ax.tick_params(labelsize=6.5)
        else:
            cax.set_visible(False)
        handles = _legend_handles(kind, any_exc, any_sat, any_boundary, level_label,
                                  flat_label=flat_label)
        if handles:
            fig.legend(handles=handles, loc="lower center", ncol=len(handles),
                       frameon=False, bbox_to_anchor=(0.5, 0.0))
    return to_svg_uri(fig), Drawn(pls, any_boundary, any_sat, any_exc)


#: Map layout, inches: room for y tick labels and label, between panels, for
#: the colour bar with its labels, above and below.
_LEFT, _GAP, _CBAR, _CBAR_ROOM = 0.62, 0.42, 0.11, 0.72
_TOP_TITLE, _TOP_SEC, _BOTTOM, _LEGEND = 0.26, 0.42, 0.42, 0.27


def _map_layout(ctx, n, h, v, extent, equal, legend):
    """Figure, panel axes and colour-bar axes, placed by hand (see style.place)."""
    width = FULL_WIDTH_IN if n == 2 else 0.64 * FULL_WIDTH_IN
    sec_x = ctx.is_length(h) and ctx.names[h] != ctx.time_name
    right = 0.16 + _CBAR + _CBAR_ROOM
    pw = (width - _LEFT - right - _GAP * (n - 1)) / n
    ratio = (extent[3] - extent[2]) / (extent[1] - extent[0]) if equal else 0.75
    ph = pw * min(max(ratio, 0.45), 1.15)
    top = _TOP_TITLE + (_TOP_SEC if sec_x else 0.05)
    bottom = _BOTTOM + (_LEGEND if legend else 0.0)
    fig = new_figure(width, top + ph + bottom)
    axes = [place(fig, _LEFT + k * (pw + _GAP), bottom, pw, ph) for k in range(n)]
    x_cbar = _LEFT + n * pw + (n - 1) * _GAP + 0.16
    cax = place(fig, x_cbar, bottom, _CBAR, ph)
    return fig, axes, cax


def _contour_field(ctx, p, values, tol, level, kind):
    """(field, level, colour) of the plane's boundary contour, or None if it has none."""
    if kind == "category":
        return None
    d = p.take(values, ctx.shape).astype(float)
    e = p.take(ctx.excluded, ctx.shape) | ~np.isfinite(d)
    if kind == "signed":
        if tol is None:
            return None
        field, at, colour = d + p.take(tol, ctx.shape), 0.0, "black"
    else:
        if level is None:
            return None
        field, at, colour = d, level, OKABE_ITO["vermillion"]
    f = np.ma.masked_where(e, field)
    comp = np.ma.compressed(f)
    if comp.size < 2 or min(f.shape) < 2 or not (comp.min() < at < comp.max()):
        return None
    return f, at, colour


def _contour(ax, ctx, p, values, tol, level, kind, xv, yv) -> bool:
    """Violation boundary (signed: value = −tol) or criterion contour (log)."""
    found = _contour_field(ctx, p, values, tol, level, kind)
    if found is None:
        return False
    f, at, colour = found
    ax.contour(xv, yv, f, levels=[at], colors=[colour], linewidths=1.0, zorder=3)
    return True


def _line_figure(ctx, values, *, kind, cbar_label, tol, level, level_label,
                 flat_label) -> tuple[str, bool, bool]:
    """One sampled axis: the quantity against the coordinate."""
    x = ctx.values[0]
    fig = new_figure(0.7 * FULL_WIDTH_IN, 2.6)
    ax = fig.subplots()
    margins(fig, left=0.75, right=0.15, top=0.5, bottom=0.45)
    exc = ctx.excluded | ~np.isfinite(values)
    y = np.where(exc, np.nan, values)
    for k in np.flatnonzero(exc):
        lo, hi = _extent(x)
        d = (hi - lo) / len(x)
        ax.axvspan(x[k] - d / 2, x[k] + d / 2, facecolor=EXCLUDED_FACE, edgecolor=EXCLUDED_HATCH,
                   hatch="////", linewidth=0, zorder=0)
    if kind == "category":
        for c in range(5):
            sel = y == c
            if sel.any():
                ax.scatter(x[sel], y[sel], s=14, color=HE_COLOURS[c], edgecolor="#333333",
                           linewidth=0.4, label=HE_NAMES[c], zorder=3)
        ax.set_yticks(range(5), HE_NAMES)
        ax.set_ylim(-0.6, 4.6)
    elif kind == "log":
        pos = np.where(y > 0, y, np.nan)
        ax.plot(x, pos, color=OKABE_ITO["blue"], marker=".", ms=3)
        if np.isfinite(pos).any():
            ax.set_yscale("log")
        if level is not None:
            ax.axhline(level, color=OKABE_ITO["vermillion"], lw=1.0, label=level_label)
    else:
        ax.axhline(0.0, color="#777777", lw=0.6)
        if tol is not None:
            t = np.where(exc, np.nan, tol)
            ax.fill_between(x, -t, t, color=SATURATED_FACE, lw=0, label=flat_label)
            bad = y < -t
            ax.plot(x, y, color=OKABE_ITO["blue"], marker=".", ms=3, label="value")
            if np.any(bad):
                ax.plot(x[bad], y[bad], ls="none", marker="o", ms=3.5,
                        color=OKABE_ITO["vermillion"], label="violated")
        else:
            ax.plot(x, y, color=OKABE_ITO["blue"], marker=".", ms=3)
    ax.set_xlabel(ctx.label(0))
    if kind != "category":
        ax.set_ylabel(cbar_label)
    _secondary(ax, ctx, 0, "x")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(frameon=False, loc="best")
    flat = tol is not None and kind == "signed" and bool(np.any(~exc))
    return to_svg_uri(fig), flat, bool(exc.any())
