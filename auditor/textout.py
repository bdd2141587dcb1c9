"""Readable terminal summaries (plain text, no colour codes)."""

from __future__ import annotations

import numpy as np

__all__ = ["format_probe", "fmt"]


def fmt(v, digits: int = 6) -> str:
    if v is None:
        return "n/a"
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not np.isfinite(f):
        return "n/a"
    return f"{f:.{digits}g}"


def _matrix(m, indent="    ") -> str:
    rows = []
    for row in np.asarray(m):
        rows.append(indent + "  ".join(f"{x: .6e}" for x in row))
    return "\n".join(rows)


def format_probe(r) -> str:
    where = ", ".join(f"{k}={fmt(v, 10)}" for k, v in r.point.items())
    lines = [f"{r.name}", f"event: {where}" + ("  (derivatives resolved as a limit)"
                                                if r.resolved_as_limit else ""),
             "metric g_ab:", _matrix(r.g),
             "Einstein tensor G_ab (coordinate basis):", _matrix(r.einstein),
             f"Ricci scalar R          {fmt(r.ricci_scalar, 10)}",
             f"Kretschmann scalar K    {fmt(r.kretschmann, 10)}"]
    if np.isfinite(r.eulerian_energy_density):
        lines.append(f"Eulerian energy density {fmt(r.eulerian_energy_density, 10)}"
                     f"  ({fmt(r.eulerian_energy_density_J_m3, 4)} J/m^3 at "
                     f"{fmt(r.length_m)} m per unit)")
    else:
        lines.append("Eulerian energy density n/a (the t = const slice is not spacelike here)")
    if r.hawking_ellis_type is not None:
        lines.append(f"Hawking-Ellis type      {r.hawking_ellis_type}")
    if r.conditions:
        lines.append(f"Energy conditions, all observers ({r.frame} frame; margin, tolerance):")
        for c, d in r.conditions.items():
            verdict = "violated" if not d["holds"] else ("saturated" if d["saturated"] else "holds")
            obs = ", ".join(f"{v:.4g}" for v in d["worst_observer"])
            lines.append(f"  {c}  {verdict:<9}  {fmt(d['margin'], 6):>13}  "
                         f"+-{fmt(d['tolerance'], 2):<9}  worst observer ({obs})")
    t = r.tidal
    if t:
        if t.get("accel_g") is not None:
            eig = ", ".join(fmt(v, 4) for v in t["eigenvalues"])
            lines.append(f"Tidal eigenvalues ({t['frame']} frame) {eig}; across "
                         f"{fmt(t['body_length_m'])} m: {fmt(t['accel_m_s2'], 4)} m/s^2 = "
                         f"{fmt(t['accel_g'], 4)} g")
        else:
            lines.append(f"Tidal tensor: {t.get('undefined', 'undefined here')}")
    if r.station_accel_g is not None and np.isfinite(r.station_accel_g):
        lines.append(f"Held at fixed spatial coordinates: proper acceleration "
                     f"{fmt(r.station_accel_g, 4)} g")
    if t or r.station_accel_g is not None:
        from .crew.limits import CAUTION
        lines.append(CAUTION)
    return "\n".join(lines)


def margin_text(value, tol, digits: int = 4) -> str:
    """A margin for a table: ``0+-tol`` where it is zero within its round-off
    (saturated), else the value."""
    if value is None:
        return "n/a"
    if tol is not None and np.isfinite(value) and abs(value) <= tol:
        return "0+-" + fmt(tol, 2)
    return fmt(value, digits)


def _pt(p) -> str:
    if not p:
        return "n/a"
    return "(" + ", ".join(f"{k}={fmt(v, 4)}" for k, v in p.items()) + ")"


def format_audit(res, require=("NEC", "WEC", "SEC", "DEC")) -> str:
    """Terminal summary of an audit: one verdict row per condition."""
    m = res.metric
    g = res.grid
    axes = " x ".join(f"{n} [{fmt(v[0], 4)}, {fmt(v[-1], 4)}]"
                      for n, v in zip(g.axis_names, g.axis_values))
    fixed = ", ".join(f"{k} = {fmt(v, 6)}" for k, v in g.fixed.items())
    shape = "x".join(str(s) for s in g.shape)
    lines = [m.name,
             f"file {m.path}  sha256 {m.sha256[:12]}...  length unit {fmt(m.length_m)} m",
             f"region {axes}" + (f"; {fixed}" if fixed else "") + f"  ({shape} = {res.points} events)"]
    if res.parameters:
        lines.append("parameters " + ", ".join(f"{k} = {fmt(v)}" for k, v in res.parameters.items()))
    excl = ", ".join(f"{v} {k.replace('_', ' ')}" for k, v in res.excluded_by_reason.items() if v)
    lines.append(f"audited {res.audited_points} events; excluded {res.excluded_points}"
                 + (f" ({excl})" if excl else "")
                 + (f"; {res.resolved_as_limit} with derivatives resolved as limits"
                    if res.resolved_as_limit else "")
                 + (f"; {res.non_eulerian_points} outside the Eulerian frame"
                    if res.non_eulerian_points else ""))
    lines.append("")
    head = (f"{'':4}{'verdict':<11}{'violating':>10}{'volume':>11}{'core vol':>10}"
            f"{'min margin':>12}{'refined':>12}  worst event")
    lines.append(head)
    between = []
    for c, s in res.conditions.items():
        if s.holds:
            verdict = "holds" if s.saturated_fraction < 1.0 else "saturated"
        else:
            verdict = "VIOLATED"
        if c not in require:
            verdict += "*"
        vol = s.violating_volume
        vol = fmt(sum(vol) if isinstance(vol, list) else vol, 3) if vol is not None else "-"
        core = s.core_violating_volume
        core = fmt(sum(core) if isinstance(core, list) else core, 3) \
            if core is not None and not s.holds else "-"
        refined = margin_text(s.refined_min_margin, s.refined_tolerance)
        if s.holds and s.refined_holds is False:
            refined += "!"
            between.append(c)
        lines.append(f"{c:<4}{verdict:<11}{100 * s.violating_fraction:>9.2f}%{vol:>11}{core:>10}"
                     f"{margin_text(s.min_margin, s.min_margin_tolerance):>12}{refined:>12}  "
                     f"{_pt(s.refined_worst_point or s.worst_point)}")
    lines.append("volume: proper volume of violating events; core vol: where the margin is "
                 "below 1% of the minimum")
    if any(s.refined_saturated or (s.min_margin_tolerance is not None
                                   and abs(s.min_margin) <= s.min_margin_tolerance)
           for s in res.conditions.values()):
        lines.append("0+-tol: the margin is zero within its round-off tolerance (saturated)")
    if between:
        lines.append(f"! {', '.join(between)}: the refined minimum, between grid events, is below "
                     "minus its tolerance; the verdict covers the audited grid events only")
    if any(c not in require for c in res.conditions):
        lines.append("* not required by --require")
    lines.append("")
    if res.energy is not None:
        e = res.energy.to_json()
        tot = e["eulerian_total"]
        if isinstance(tot, list):
            lines.append(f"Eulerian energy per time sample: {', '.join(fmt(v, 4) for v in tot)}")
        else:
            tol = e["eulerian_tolerance"]
            if abs(tot) <= tol and abs(e["eulerian_negative_total"]) <= tol:
                lines.append(f"Eulerian energy  zero within round-off (|E| <= {fmt(tol, 2)}, "
                             f"{fmt(e['eulerian_tolerance_kg'], 2)} kg)")
            else:
                lines.append(f"Eulerian energy  total {fmt(tot, 4)} ({fmt(e['eulerian_total_J'], 3)} J, "
                             f"{fmt(e['eulerian_total_kg'], 3)} kg); negative part "
                             f"{fmt(e['eulerian_negative_total'], 4)} "
                             f"({fmt(e['eulerian_negative_total_kg'], 3)} kg); round-off "
                             f"{fmt(tol, 2)}")
    types = ", ".join(f"{k} {v}" for k, v in res.he_type_counts.items() if v)
    lines.append(f"Hawking-Ellis types: {types}")
    t = res.tidal
    if t.peak_accel_g is not None:
        comfort = t.fraction_above.get("comfort")
        lines.append(f"Tidal map ({t.frame} frame, {fmt(t.body_length_m)} m body): peak "
                     f"{fmt(t.peak_accel_g, 3)} g at {_pt(t.peak_point)}; above the "
                     f"{fmt(t.levels[0].value_g)} g criterion at {100 * (comfort or 0):.2f}% of events")
    if res.crew is not None:
        lines.extend(res.crew.summary_lines())
    if t.peak_accel_g is not None or res.crew is not None:
        from .crew.limits import CAUTION
        lines.append(CAUTION)
    lines.append("")
    bad = res.violated(require)
    code = res.exit_code(require)
    if bad:
        lines.append(f"Result: {', '.join(bad)} violated (exit {code})")
    elif code == 3:
        lines.append("Result: required conditions hold; the crew worldline exceeds its tidal limit (exit 3)")
    else:
        lines.append(f"Result: {', '.join(require)} hold at every audited event (exit 0)")
    lines.append(f"({res.seconds:.1f} s)")
    return "\n".join(lines)
