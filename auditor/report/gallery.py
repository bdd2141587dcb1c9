"""The report's figures, numbered in document order, with their captions.

Figures read the per-event arrays of :class:`auditor.audit.AuditResult`
(``maps``, the crew :class:`~auditor.crew.worldline.Worldline`); captions take
their numbers from the audit JSON, formatted by :mod:`.numbers`.
"""

from __future__ import annotations

from dataclasses import dataclass
from html import escape

import numpy as np

from .figures import GridContext, map_figure, plane_caption
from .numbers import format_number
from .plots import cross_check_figure, exceedance_figure, worldline_figure
from .style import style

__all__ = ["Figure", "build_figures", "FIGURE_ORDER"]

#: Document order of the figures (absent ones are skipped, numbers stay consecutive).
FIGURE_ORDER = ("NEC", "WEC", "SEC", "DEC", "he_type", "rho", "tidal", "exceedance",
                "worldline", "cross_check")

_SCREENING = ("Screening figure, not medical or flight-safety approval; see the caution "
              "at the head of this section.")


@dataclass(frozen=True)
class Figure:
    key: str
    number: int
    title: str
    caption: str
    uri: str
    wide: bool = True


def _esc_plane(ctx, pls, focus_word) -> str:
    """The plane sentence, HTML-escaped (captions are inserted as markup)."""
    return escape(plane_caption(ctx, pls, focus_word))


def _key(ctx, drawn, flat_word: str) -> str:
    """The colour key of a signed map, naming only what is drawn."""
    if len(ctx.shape) == 1:
        parts = ["orange markers: violated"] if "margin" in flat_word else []
        if drawn.flat:
            parts.append(f"shaded band: {flat_word}")
    else:
        parts = (["orange: negative (violated)", "purple: positive (holds)"]
                 if "margin" in flat_word else ["orange: negative", "purple: positive"])
        if drawn.flat:
            parts.append(f"pale green: {flat_word}")
        if drawn.boundary:
            parts.append("black line: violation boundary (margin = −tolerance)")
    if drawn.excluded:
        parts.append("hatched: excluded or undefined")
    text = "; ".join(parts)
    return escape(text[:1].upper() + text[1:] + ".") if text else ""


def _context(result, dims) -> GridContext:
    g = result.grid
    return GridContext(names=tuple(g.axis_names), values=tuple(g.axis_values), shape=g.shape,
                       time_name=g.coordinates[0], length_m=result.metric.length_m, dims=dims,
                       excluded=result.maps["reason"] != 0)


def _argmin(values, ok):
    v = np.where(ok & np.isfinite(values), values, np.nan)
    return int(np.nanargmin(v)) if np.isfinite(v).any() else None


def _argmax(values, ok):
    v = np.where(ok & np.isfinite(values), values, np.nan)
    return int(np.nanargmax(v)) if np.isfinite(v).any() else None


def build_figures(result, j: dict, dims: dict) -> dict[str, Figure]:
    """All figures of the report, keyed as in :data:`FIGURE_ORDER`."""
    with style():
        raw = _draw(result, j, dims)
    out, n = {}, 0
    for key in FIGURE_ORDER:
        if key in raw:
            n += 1
            title, caption, uri = raw[key]
            out[key] = Figure(key, n, title, caption, uri)
    return out


def _draw(result, j, dims) -> dict:
    ctx = _context(result, dims)
    maps = result.maps
    ok = maps["reason"] == 0
    raw = {}
    for c, s in j["conditions"].items():
        if s["saturated_fraction"] >= 1.0:
            continue        # uniform map: within round-off at every audited event
        m, tol = maps["margin_" + c], maps["tol_" + c]
        focus = _argmin(m, ok)
        uri, drawn = map_figure(ctx, m, kind="signed", focus=focus, tol=tol,
                                cbar_label=f"{c} margin  [L⁻²]",
                                level_label="violation boundary (margin = −tolerance)")
        raw[c] = (f"{c} margin",
                  f"Margin of the {c}: the minimum over all observers of the quantity the "
                  f"condition needs non-negative (geometric units, 1/L²). "
                  f"{_key(ctx, drawn, 'saturated (|margin| ≤ tolerance)')} "
                  f"{_esc_plane(ctx, drawn.planes, 'grid minimum')} "
                  f"Grid minimum {format_number(s['min_margin'])}.", uri)
    focus = _argmin(maps["margin_NEC"], ok)
    uri, drawn = map_figure(ctx, maps["he_type"].astype(float), kind="category", focus=focus,
                            cbar_label="")
    pls = drawn.planes
    raw["he_type"] = ("Hawking–Ellis type",
                      "Hawking–Ellis type of the stress-energy tensor at each audited event "
                      "(vacuum: T vanishes within its round-off). "
                      + _esc_plane(ctx, pls, "NEC grid minimum"), uri)
    rho = maps["rho"]
    # ρ_E = T(n, n) is the WEC quantity at u = n: the WEC tolerance bounds its round-off.
    rho_tol = maps["tol_WEC"]
    with np.errstate(invalid="ignore"):
        signal = ok & np.isfinite(rho) & (np.abs(rho) > rho_tol)
    if signal.any():
        focus = _argmin(rho, ok)
        uri, drawn = map_figure(ctx, rho, kind="signed", focus=focus, tol=rho_tol,
                                boundary=False, flat_label="zero within round-off",
                                cbar_label="$\\rho_E$  [L⁻²]")
        raw["rho"] = ("Eulerian energy density",
                      "Eulerian energy density ρ<sub>E</sub> = T<sub>ab</sub> n<sup>a</sup> "
                      "n<sup>b</sup> in geometric units (1/L²; "
                      "multiply by c⁴/(G L²) for J/m³); undefined where the t = const slice is "
                      "not spacelike. " + _key(ctx, drawn, "zero within its round-off") + " "
                      + _esc_plane(ctx, drawn.planes, "most negative value"),
                      uri)
    t = j["tidal"]
    tg = maps["tidal_g"]
    if t["peak_accel_g"] is not None and t["peak_accel_g"] > 0:
        level = t["levels"][0]["value_g"]
        # the peak found in float64 during the audit (the map is float32, for display)
        focus = result.tidal.peak_index if result.tidal.peak_index is not None else \
            _argmax(tg, ok)
        uri, drawn = map_figure(ctx, tg, kind="log", focus=focus, level=level,
                                cbar_label="tidal load across the body  [g]",
                                level_label=f"tidal criterion ({format_number(level)} g)")
        raw["tidal"] = ("Tidal load",
                        f"Largest tidal acceleration across a {format_number(t['body_length_m'])} m "
                        f"body for the {escape(t['frame'])} observers, in standard g (logarithmic "
                        f"scale)" + (f"; the vermillion line is the {format_number(level)} g criterion"
                                     if drawn.boundary else "")
                        + ("; hatched: excluded or undefined" if drawn.excluded else "")
                        + ". "
                        f"Peak {format_number(t['peak_accel_g'])} g. "
                        + _esc_plane(ctx, drawn.planes, "peak") + " " + _SCREENING, uri)
    st = j.get("station") or {"levels": []}
    uri = exceedance_figure(tg[ok], t["levels"], maps["station_g"][ok], st["levels"])
    raw["exceedance"] = ("Loads against the sourced levels",
                         "Share of audited events at which (a) the tidal load across the body "
                         "and (b) the proper acceleration of a crew held at fixed spatial "
                         "coordinates exceed a given value, with the levels of the tables below "
                         "(sources there). Whole-body figures apply to tidal loads only as a "
                         "labelled analogy. " + _SCREENING, uri)
    if result.crew is not None and "crew" in j:
        c = j["crew"]
        raw["worldline"] = ("Crew worldline",
                            "Along the crew geodesic, against proper time: speed measured by "
                            "the local Eulerian observer (dashed: c), dt/dτ, and the tidal load "
                            f"across {format_number(c['body_length_m'])} m (dashed: the "
                            f"{format_number(c['tidal_limit_g'])} g limit). " + _SCREENING,
                            worldline_figure(result.crew))
    cross = {c: maps.get("cross_" + c, {"exact": [], "sampled": [], "tol": []})
             for c in j["conditions"]}
    raw["cross_check"] = ("Sampled-observer cross-check",
                          "Minimum over a finite set of sampled observers against the exact "
                          "margin at the same events (symmetric-logarithmic axes). Sampled "
                          "observers are real observers, so no point may lie below the dashed "
                          "line by more than the tolerance.", cross_check_figure(cross))
    return raw
