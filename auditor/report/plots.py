"""Line plots: the crew worldline, load exceedance curves, the cross-check.

All numbers behind these plots are in the JSON (the plots only show the
arrays the JSON summarises); limits are drawn from the same JSON levels.
"""

from __future__ import annotations

import numpy as np

from .style import FULL_WIDTH_IN, OKABE_ITO, margins, new_figure, to_svg_uri

__all__ = ["worldline_figure", "exceedance_figure", "cross_check_figure"]


def _log_or_linear(ax, y):
    pos = y[np.isfinite(y) & (y > 0)]
    if pos.size and pos.max() > 0 and (pos.max() / max(pos.min(), 1e-300) > 50):
        ax.set_yscale("log")


def worldline_figure(wl, time_label: str = "proper time τ  [L/c]") -> str:
    """Speed, dt/dτ and tidal load against proper time, limits drawn."""
    tau = np.asarray(wl.tau)
    fig = new_figure(FULL_WIDTH_IN * 0.82, 4.6)
    axes = fig.subplots(3, 1, sharex=True)
    margins(fig, left=0.75, right=0.15, top=0.12, bottom=0.45, hspace=0.12, nrows=3)
    speed = np.asarray(wl.speed)
    ax = axes[0]
    ax.plot(tau, speed, color=OKABE_ITO["blue"], label="|v| measured by the Eulerian observer")
    ax.axhline(1.0, color=OKABE_ITO["vermillion"], lw=1.0, ls="--", label="speed of light")
    top = np.nanmax(speed) if np.isfinite(speed).any() else 0.0
    ax.set_ylim(-0.05, max(1.1, 1.1 * top))
    ax.set_ylabel("speed  [c]")
    ax.legend(frameon=False, loc="center right", fontsize=6.5)

    ax = axes[1]
    ax.plot(tau, wl.dt_dtau, color=OKABE_ITO["green"])
    ax.axhline(1.0, color="#888888", lw=0.6, ls=":")
    ax.set_ylabel("dt/dτ")
    lo, hi = np.nanmin(wl.dt_dtau), np.nanmax(wl.dt_dtau)
    if np.isfinite(lo) and hi - lo < 1e-9 * max(1.0, abs(hi)):
        ax.set_ylim(hi - 0.5, hi + 0.5)

    ax = axes[2]
    tg = np.asarray(wl.tidal_g, dtype=float)
    ax.plot(tau, np.where(tg > 0, tg, np.nan), color=OKABE_ITO["orange"],
            label=f"tidal load across {wl.body_length_m:g} m")
    ax.axhline(wl.tidal_limit_g, color=OKABE_ITO["vermillion"], lw=1.0, ls="--",
               label="tidal limit ([crew].tidal_limit_g)")
    pos = tg[np.isfinite(tg) & (tg > 0)]
    if pos.size:
        ax.set_yscale("log")
        lo = min(pos.min(), wl.tidal_limit_g) / 3
        hi = max(pos.max(), wl.tidal_limit_g) * 3
        ax.set_ylim(lo, hi)
    ax.set_ylabel("tidal load  [g]")
    ax.set_xlabel(time_label)
    ax.legend(frameon=False, loc="best", fontsize=6.5)
    for a in axes:
        a.set_xlim(tau[0], tau[-1] if tau[-1] > tau[0] else tau[0] + 1)
    return to_svg_uri(fig)


def _exceedance(ax, values, levels, xlabel, title):
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    ax.set_title(title, fontsize=8)
    ax.set_xlabel(xlabel)
    if not v.size:
        ax.text(0.5, 0.5, "not defined at any audited event", ha="center", va="center",
                transform=ax.transAxes)
        ax.set_yticks([])
        ax.set_xticks([])
        return
    pos = v[v > 0]
    lv = [l["value_g"] for l in levels]
    if pos.size:
        lo = min(pos.min(), *lv) / 3 if lv else pos.min() / 3
        hi = max(pos.max(), *lv) * 3 if lv else pos.max() * 3
        grid = np.geomspace(lo, hi, 400)
        srt = np.sort(v)
        frac = 1.0 - np.searchsorted(srt, grid, side="right") / v.size
        ax.step(grid, 100 * frac, where="post", color=OKABE_ITO["blue"])
        ax.set_xscale("log")
        ax.set_xlim(lo, hi)
    else:
        ax.text(0.5, 0.5, "zero at every audited event", ha="center", va="center",
                transform=ax.transAxes)
    crit = [l["value_g"] for l in levels if l["load"] == "tidal" and not l.get("analogy")]
    body = [l["value_g"] for l in levels if l["load"] != "tidal" or l.get("analogy")]
    if body:
        ax.axvspan(min(body), max(body), color=OKABE_ITO["green"], alpha=0.18, lw=0, zorder=0)
        for b in body:
            ax.axvline(b, color=OKABE_ITO["green"], lw=0.5, ls=":", zorder=0.5)
    for c in crit:
        ax.axvline(c, color=OKABE_ITO["vermillion"], lw=1.1)
    ax.set_ylim(-3, 105)
    ax.set_ylabel("audited events above  [%]")


def exceedance_figure(tidal_g, tidal_levels, station_g, station_levels) -> str:
    """Share of audited events whose tidal / station load exceeds a value."""
    from matplotlib.lines import Line2D
    fig = new_figure(FULL_WIDTH_IN, 2.9)
    a, b = fig.subplots(1, 2)
    margins(fig, left=0.6, right=0.15, top=0.25, bottom=0.72, wspace=0.6, ncols=2)
    _exceedance(a, tidal_g, tidal_levels, "tidal load across the body  [g]",
                "(a) tidal map (geodesic deviation)")
    _exceedance(b, station_g, station_levels, "proper acceleration  [g]",
                "(b) station held at fixed coordinates")
    from matplotlib.patches import Patch
    body = [l["value_g"] for l in list(tidal_levels) + list(station_levels)
            if l["load"] != "tidal" or l.get("analogy")]
    span = f"{min(body):g}–{max(body):g} g" if body else ""
    handles = [Line2D([], [], color=OKABE_ITO["vermillion"], lw=1.1,
                      label="tidal criterion (sourced)"),
               Patch(facecolor=OKABE_ITO["green"], alpha=0.18, edgecolor=OKABE_ITO["green"],
                     linestyle=":", linewidth=0.5,
                     label=f"whole-body figures, {span} (dotted lines; in (a) an analogy only)")]
    fig.legend(handles=handles, loc="lower center", ncol=2, frameon=False,
               bbox_to_anchor=(0.5, 0.0))
    return to_svg_uri(fig)


def _symlog_ticks(lin: float, big: float, neg: bool, pos: bool) -> list:
    """At most four decades per side, skipping the one at the linear threshold."""
    lo, hi = int(np.floor(np.log10(lin))) + 1, int(np.floor(np.log10(big)))
    decades = list(range(hi, lo - 1, -max(1, int(np.ceil((hi - lo + 1) / 4)))))
    ticks = [0.0]
    if neg:
        ticks += [-(10.0 ** d) for d in decades]
    if pos:
        ticks += [10.0 ** d for d in decades]
    return sorted(ticks)


def cross_check_figure(cross: dict) -> str:
    """Sampled-observer minimum against the exact margin, per condition."""
    fig = new_figure(FULL_WIDTH_IN, 4.3)
    axes = fig.subplots(2, 2).ravel()
    margins(fig, left=0.7, right=0.15, top=0.22, bottom=0.42, wspace=0.75, hspace=0.62,
            ncols=2, nrows=2)
    for ax, (c, data) in zip(axes, cross.items()):
        ex, sa, tl = (np.concatenate(data[k]) if data[k] else np.zeros(0)
                      for k in ("exact", "sampled", "tol"))
        ok = np.isfinite(ex) & np.isfinite(sa)
        ex, sa, tl = ex[ok], sa[ok], tl[ok]
        ax.set_title(c, fontsize=8)
        if not ex.size:
            ax.text(0.5, 0.5, "no events checked", ha="center", va="center",
                    transform=ax.transAxes)
            continue
        both = np.concatenate([ex, sa])
        big = float(np.max(np.abs(both)))
        bad = ex > sa + tl
        ax.scatter(ex[~bad], sa[~bad], s=4, color=OKABE_ITO["blue"], alpha=0.6, lw=0,
                   label="exact ≤ sampled + tolerance", rasterized=True)
        if bad.any():
            ax.scatter(ex[bad], sa[bad], s=10, color=OKABE_ITO["vermillion"], marker="x",
                       label="exact above sampled", rasterized=True)
        if big > 0:
            lin = max(big * 1e-6, float(np.nanmax(tl)) if tl.size else 0.0, 1e-300)
            lin = min(lin, big)
            ax.set_xscale("symlog", linthresh=lin)
            ax.set_yscale("symlog", linthresh=lin)
            ticks = _symlog_ticks(lin, big, both.min() < 0, both.max() > 0)
            ax.set_xticks(ticks)
            ax.set_yticks(ticks)
            ax.minorticks_off()
            lim = (-1.5 * big if both.min() < 0 else -lin, 1.5 * big if both.max() > 0 else lin)
            ax.plot(lim, lim, color="#555555", lw=0.7, ls="--", label="sampled = exact")
            ax.set_xlim(lim)
            ax.set_ylim(lim)
        ax.set_xlabel("exact margin  [L⁻²]")
        ax.set_ylabel("sampled minimum  [L⁻²]")
        ax.tick_params(labelsize=6)
        ax.legend(frameon=False, fontsize=6, loc="upper left")
    return to_svg_uri(fig)
