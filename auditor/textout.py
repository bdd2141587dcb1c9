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
    for key, text in r.extras.get("_text", []):
        lines.append(text)
    return "\n".join(lines)
