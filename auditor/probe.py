"""Everything at one event: ``auditor probe``.

:func:`probe` evaluates the exact curvature at one event and returns a
:class:`ProbeResult`; :meth:`ProbeResult.to_json` gives the contract's keys.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from . import units
from .conditions.hawking_ellis import TYPE_NAMES
from .errors import ExpressionError, PointError, UsageError
from .crew.tidal import peak_accel_g
from .geometry import Geometry
from .geometry.points import REASONS
from .pointwise import CONDITIONS, analyse

__all__ = ["ProbeResult", "probe", "parse_event", "split_assignments"]

_REASON_TEXT = {
    "singular": "the metric or its derivatives are not finite there (no limit converges)",
    "degenerate": "the metric is degenerate there (det g = 0)",
    "not_lorentzian": "the metric is not Lorentzian there (signature is not -,+,+,+)",
    "non_positive_lapse": "the lapse is not positive there",
    "user_exclusion": "region.exclude removes it",
}


@dataclass(frozen=True)
class ProbeResult:
    """Exact geometry and matter at one event (geometric units unless suffixed)."""

    name: str
    point: Mapping[str, float]
    g: np.ndarray
    einstein: np.ndarray
    ricci_scalar: float
    kretschmann: float
    eulerian_energy_density: float        # NaN where the slice is not spacelike
    eulerian_energy_density_J_m3: float
    frame: str
    stress_frame: np.ndarray              # T_âb̂ in the auditing frame
    tolerance: float                      # round-off of the components of T
    resolved_as_limit: bool
    length_m: float
    hawking_ellis_type: str | None = None
    conditions: dict = field(default_factory=dict)
    tidal: dict = field(default_factory=dict)
    station_accel_g: float | None = None
    extras: dict = field(default_factory=dict)

    def to_json(self) -> dict:
        out = {
            "name": self.name,
            "point": dict(self.point),
            "g": self.g,
            "einstein": self.einstein,
            "ricci_scalar": self.ricci_scalar,
            "kretschmann": self.kretschmann,
            "eulerian_energy_density": self.eulerian_energy_density,
            "eulerian_energy_density_J_m3": self.eulerian_energy_density_J_m3,
            "hawking_ellis_type": self.hawking_ellis_type,
            "conditions": self.conditions,
            "tidal": self.tidal,
            "station_proper_accel_g": self.station_accel_g,
            "frame": self.frame,
            "stress_energy_frame": self.stress_frame,
            "stress_energy_tolerance": self.tolerance,
            "resolved_as_limit": self.resolved_as_limit,
            "length_m": self.length_m,
        }
        out.update(self.extras)
        return out


def split_assignments(text: str) -> list[str]:
    """Split ``a=1,b=atan2(1,2)`` on the commas outside brackets."""
    parts, depth, cur = [], 0, []
    for ch in text:
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
        if ch == "," and depth == 0:
            parts.append("".join(cur))
            cur = []
        else:
            cur.append(ch)
    parts.append("".join(cur))
    return [p.strip() for p in parts if p.strip()]


#: A plain ASCII decimal literal needs no expression parser when the parser would
#: take it unchanged: zero, or a magnitude from 1e-300 to 1e300 (the bounds of
#: metric.expr, MAX_LOG10); anything else goes through the parser, which refuses
#: what a double cannot hold faithfully.
_PLAIN_NUMBER = re.compile(r"^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?$")
_ZERO = re.compile(r"^[+-]?0*\.?0*([eE][+-]?[0-9]+)?$")


def _plain_value(text: str) -> float | None:
    """The value of a plain literal the parser would accept unchanged, else None."""
    if not _PLAIN_NUMBER.match(text):
        return None
    v = float(text)
    if v == 0.0:
        return v if _ZERO.match(text) else None
    return v if 1e-300 <= abs(v) <= 1e300 else None


def parse_event(metric, text: str, *, what: str = "--at") -> dict[str, float]:
    """Parse ``t=0,x=1.2,...`` into coordinate values (all four required).

    Values are expressions of the metric-file language; parameters may be used.
    """
    params = None
    others = {c: (f"coordinate '{c}' cannot be used in a value of {what}",
                  "values may use numbers, pi and the parameters") for c in metric.coordinates}
    out: dict[str, float] = {}
    for item in split_assignments(text):
        if "=" not in item:
            raise UsageError(f"{what} expects NAME=VALUE pairs separated by commas, got '{item}'")
        name, value = (s.strip() for s in item.split("=", 1))
        if name not in metric.coordinates:
            from .metric.expr import suggest
            close = suggest(name, metric.coordinates)
            raise UsageError(f"{what}: '{name}' is not a coordinate of {metric.name!r}"
                             + (f"; did you mean '{close}'?" if close else
                                f"; coordinates: {', '.join(metric.coordinates)}"))
        if name in out:
            raise UsageError(f"{what}: coordinate '{name}' given twice")
        try:
            val = _plain_value(value)
            if val is None:   # an expression of the metric-file language (needs SymPy)
                import sympy as sp
                from .metric.expr import parse_expression
                if params is None:
                    params = {p: sp.Float(v) for p, v in metric.parameters.items()}
                expr = parse_expression(value, params, key=what, unavailable=others)
                val = float(expr)
        except ExpressionError as exc:
            raise UsageError(f"{what} {name}: {exc.located}") from exc
        except (TypeError, ValueError) as exc:
            raise UsageError(f"{what} {name}: '{value}' is not a number") from exc
        if not np.isfinite(val):
            raise UsageError(f"{what} {name}: '{value}' is not finite")
        out[name] = val
    missing = [c for c in metric.coordinates if c not in out]
    if missing:
        raise UsageError(f"{what}: give every coordinate; missing {', '.join(missing)}")
    return {c: out[c] for c in metric.coordinates}


def probe(metric, at: Mapping[str, float], geometry: Geometry | None = None) -> ProbeResult:
    """Exact curvature, Einstein tensor and matter at the event ``at``."""
    geometry = geometry or Geometry(metric)
    x = np.array([[float(at[c]) for c in metric.coordinates]])
    batch = geometry.evaluate(x, metric.parameters, use_exclude=False)
    if batch.reason[0] != 0:
        reason = REASONS[batch.reason[0] - 1]
        where = ", ".join(f"{c}={at[c]:g}" for c in metric.coordinates)
        raise PointError(f"event ({where}) cannot be audited: {_REASON_TEXT[reason]}")
    curv = batch.curvature
    f = analyse(batch, metric.crew.frame)
    eul = bool(f.frame_eulerian[0])
    frame = "eulerian" if eul else "principal"
    conditions = {}
    for c in CONDITIONS:
        m, tol = float(f.margins[c][0]), float(f.tolerances[c][0])
        conditions[c] = {"holds": bool(m >= -tol), "saturated": bool(abs(m) <= tol),
                         "margin": m, "tolerance": tol, "frame": frame,
                         "worst_observer": f.observers[c][0]}
        if c == "DEC":
            conditions[c]["worst_pair"] = f.dec_pair[0]
    lam = f.tidal_eigenvalues[0]
    tidal = {"frame": metric.crew.frame, "eigenvalues": lam,
             "eigenvectors_frame": f.tidal_vectors[0].T,
             "body_length_m": metric.crew.body_length_m,
             "noise_floor_g": float(peak_accel_g(f.tidal_tol[:1, None], metric.length_m,
                                                  metric.crew.body_length_m)[0])}
    if np.isfinite(lam).all():
        acc = float(units.tidal_accel_m_s2(np.abs(lam).max(), metric.length_m,
                                           metric.crew.body_length_m))
        tidal["accel_m_s2"], tidal["accel_g"] = acc, float(units.accel_g(acc))
    else:
        tidal["accel_m_s2"] = tidal["accel_g"] = None
        tidal["undefined"] = (f"the {metric.crew.frame} observer is not defined at this event")
    rho = float(f.rho[0])
    station = float(units.accel_g(units.proper_accel_m_s2(f.station_accel[0], metric.length_m)))
    return ProbeResult(
        name=metric.name, point=dict(at), g=curv.g[0], einstein=curv.einstein[0],
        ricci_scalar=float(curv.ricci_scalar[0]), kretschmann=float(curv.kretschmann[0]),
        eulerian_energy_density=rho,
        eulerian_energy_density_J_m3=float(units.energy_density_J_m3(rho, metric.length_m)),
        frame=frame, stress_frame=f.stress[0], tolerance=float(f.t_tol[0]),
        resolved_as_limit=bool(batch.limit[0]), length_m=metric.length_m,
        hawking_ellis_type=TYPE_NAMES[int(f.he_type[0])], conditions=conditions, tidal=tidal,
        station_accel_g=station)
