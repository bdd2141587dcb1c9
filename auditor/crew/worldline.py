"""Follow a crew along a geodesic and record what it experiences.

The geodesic equation with proper time τ (MTW 1973 eq. 13.8 — from memory):
dx^μ/dτ = u^μ, du^μ/dτ = −Γ^μ_αβ u^α u^β, integrated with SciPy's DOP853
(Hairer, Nørsett & Wanner 1993) at tight tolerances, one step at a time so
that the path stops, with a stated reason, at an event that cannot be
audited, at a region exclusion, or when the normalisation g(u,u) = −1 drifts
beyond :data:`DRIFT_LIMIT`.

The start velocity v (|v| < 1, units of c) is measured by the Eulerian
observer at the start in its orthonormal frame: u = γ (n + v^i e_i),
γ = (1 − v²)^{-1/2}. Along the path the crew's tides are those of its own
4-velocity: E_ij = R_{i0j0} in a frame with e_0 = u (spatial legs by
Gram–Schmidt of the coordinate axes projected orthogonally to u).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import DOP853

from .. import units
from ..errors import PointError
from ..frames import eulerian
from ..frames.tetrads import _gram_schmidt
from ..geometry.kernels import compile_scalars, metric_derivative_exprs
from .limits import CAUTION
from .tidal import tidal_eigen

__all__ = ["Worldline", "follow", "comoving_frame", "DRIFT_LIMIT", "RTOL", "ATOL"]

#: Relative / absolute tolerances of the integrator: near double precision
#: while keeping step counts in the thousands for unit-scale curvature.
RTOL, ATOL = 1e-11, 1e-13
#: Stop when |g(u,u) + 1| exceeds this: 1e-6 is five orders above the drift
#: the tolerances above produce over thousands of steps, so reaching it means
#: the path entered a region the integrator cannot resolve.
DRIFT_LIMIT = 1e-6
#: Samples of the recorded path (tides and velocities are evaluated there).
SAMPLES = 400


def comoving_frame(g: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Tetrad (N,4,4) with e_0 = u and spatial legs from the coordinate axes."""
    n = len(u)
    # Project each coordinate axis orthogonally to u; per point drop the axis whose
    # projection is shortest (most nearly parallel to u) and keep the other three.
    axes = np.broadcast_to(np.eye(4), (n, 4, 4))
    cand = axes + np.einsum("nja,nab,nb->nj", axes, g, u)[:, :, None] * u[:, None, :]
    norms = np.einsum("nja,nab,njb->nj", cand, g, cand)
    keep = np.sort(np.argsort(norms, axis=1)[:, 1:], axis=1)
    chosen = cand[np.arange(n)[:, None], keep]
    legs = [u.copy()]
    vectors = [chosen[:, k] for k in range(3)]
    legs = _gram_schmidt(g, legs, vectors)
    return np.stack(legs, axis=1)


@dataclass
class Worldline:
    """A followed crew path (geometric units unless suffixed)."""

    tau: np.ndarray                 # (K,) proper time
    x: np.ndarray                   # (K,4) events
    u: np.ndarray                   # (K,4) 4-velocity
    dt_dtau: np.ndarray             # (K,)
    coordinate_velocity: np.ndarray  # (K,3) dx^i/dt
    eulerian_velocity: np.ndarray   # (K,3) measured by the local Eulerian observer
    tidal_eigenvalues: np.ndarray   # (K,3) ascending
    tidal_g: np.ndarray             # (K,)
    drift: np.ndarray               # (K,) |g(u,u) + 1|
    stop_reason: str
    length_m: float
    body_length_m: float
    tidal_limit_g: float
    coordinates: tuple
    steps: int = 0
    proper_accel_g: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @property
    def exceeds_limit(self) -> bool:
        tg = self.tidal_g[np.isfinite(self.tidal_g)]
        return bool(tg.size and tg.max() > self.tidal_limit_g)

    @property
    def speed(self) -> np.ndarray:
        return np.linalg.norm(self.eulerian_velocity, axis=1)

    def to_json(self) -> dict:
        tg = self.tidal_g
        peak = int(np.nanargmax(tg)) if np.isfinite(tg).any() else None
        return {
            "proper_time": float(self.tau[-1]),
            "proper_time_s": float(units.time_s(self.tau[-1], self.length_m)),
            "coordinate_time": float(self.x[-1, 0] - self.x[0, 0]),
            "coordinate_time_s": float(units.time_s(self.x[-1, 0] - self.x[0, 0], self.length_m)),
            "stop_reason": self.stop_reason,
            "normalisation_drift": float(np.nanmax(self.drift)),
            "final_event": {c: float(v) for c, v in zip(self.coordinates, self.x[-1])},
            "final_coordinate_velocity": self.coordinate_velocity[-1],
            "final_eulerian_velocity": self.eulerian_velocity[-1],
            "final_dt_dtau": float(self.dt_dtau[-1]),
            "peak_speed": float(np.nanmax(self.speed)) if np.isfinite(self.speed).any() else None,
            "peak_tidal_accel_g": float(tg[peak]) if peak is not None else None,
            "peak_tidal_tau": float(self.tau[peak]) if peak is not None else None,
            "peak_proper_accel_g": 0.0,
            "tidal_limit_g": self.tidal_limit_g,
            "exceeds_tidal_limit": self.exceeds_limit,
            "body_length_m": self.body_length_m,
            "steps": self.steps,
            "caution": CAUTION,
        }

    def summary_lines(self) -> list[str]:
        j = self.to_json()
        from ..textout import fmt
        over = "EXCEEDS" if j["exceeds_tidal_limit"] else "stays under"
        return [f"Crew worldline: {fmt(j['proper_time'], 5)} proper time "
                f"({fmt(j['proper_time_s'], 4)} s), {fmt(j['coordinate_time'], 5)} coordinate "
                f"time; stopped: {j['stop_reason']}; final dt/dtau {fmt(j['final_dt_dtau'], 6)}",
                f"  peak tidal load {fmt(j['peak_tidal_accel_g'], 3)} g across "
                f"{fmt(self.body_length_m)} m: {over} the {fmt(self.tidal_limit_g)} g limit; "
                f"normalisation drift {fmt(j['normalisation_drift'], 2)}"]


class _Rhs:
    """Geodesic right-hand side from a kernel of g and ∂g only (50 rows)."""

    def __init__(self, metric, params):
        exprs = metric_derivative_exprs(metric.g, metric.coord_symbols)[:50]
        self.kernel = compile_scalars(exprs, metric.coord_symbols, metric.param_symbols)
        self.p = np.asarray(params, dtype=float)
        self.out = np.empty(50)
        from ..geometry.kernels import DIDX, GIDX
        self.gidx, self.didx = GIDX, DIDX

    def parts(self, x):
        out = self.out
        self.kernel._fn(x, self.p, out)
        if not np.isfinite(out).all():
            out = self._limit(x)
        return out[self.gidx], out[self.didx]

    def _limit(self, x):
        """Removable 0/0 (the centre of a bubble): mean over symmetric offsets.

        Same rule as :mod:`auditor.geometry.points` at one step size, h = 1e-6
        of max(1, |x|): the O(h²) error is far below the integrator tolerance.
        """
        acc = np.zeros(50)
        tmp = np.empty(50)
        size = np.maximum(1.0, np.abs(x))
        for c in range(4):
            for sgn in (1.0, -1.0):
                y = np.array(x, dtype=float)
                y[c] += sgn * 1e-6 * size[c]
                self.kernel._fn(y, self.p, tmp)
                acc += tmp
        return acc / 8.0

    def __call__(self, tau, y):
        x, u = y[:4], y[4:]
        g, dg = self.parts(x)
        gam_low = 0.5 * (np.einsum("bac->abc", dg) + np.einsum("cab->abc", dg) - dg)
        acc = -np.linalg.solve(g, np.einsum("abc,b,c->a", gam_low, u, u))
        return np.concatenate([u, acc])


def follow(metric, geometry, *, samples: int = SAMPLES) -> Worldline:
    """Integrate the crew geodesic of ``metric.crew`` (see module docstring)."""
    crew = metric.crew
    params = geometry.params()
    x0 = np.array([crew.start[c] for c in metric.coordinates], dtype=float)
    where = ", ".join(f"{c}={crew.start[c]:g}" for c in metric.coordinates)
    b0 = geometry.evaluate(x0[None, :], metric.parameters)
    if b0.reason[0] != 0:
        from ..geometry.points import REASONS
        raise PointError(f"{metric.path}: [crew.start] event ({where}) cannot be audited "
                         f"({REASONS[b0.reason[0] - 1].replace('_', ' ')})")
    curv = b0.curvature
    E, ok = eulerian(curv.g, curv.ginv)
    if not ok[0]:
        raise PointError(f"{metric.path}: [crew.start] event ({where}): the t = const slice is "
                         "not spacelike there, so the start velocity has no Eulerian observer")
    v = np.array(crew.velocity, dtype=float)
    gamma = 1.0 / np.sqrt(1.0 - v @ v)
    u0 = gamma * (E[0, 0] + v @ E[0, 1:])

    rhs = _Rhs(metric, params)
    solver = DOP853(rhs, 0.0, np.concatenate([x0, u0]), crew.duration, rtol=RTOL, atol=ATOL)
    dense, taus = [], [0.0]
    reason = "duration reached"
    steps = 0
    while solver.status == "running":
        msg = solver.step()
        steps += 1
        if solver.status == "failed":
            reason = f"integrator failed ({msg})"
            break
        y = solver.y
        if not np.isfinite(y).all():
            reason = "left the auditable domain (non-finite values)"
            break
        batch = geometry.evaluate(y[None, :4], metric.parameters)
        if batch.reason[0] != 0:
            from ..geometry.points import REASONS
            reason = f"reached an event that cannot be audited ({REASONS[batch.reason[0] - 1].replace('_', ' ')})"
            break
        g = batch.curvature.g[0]
        drift = abs(y[4:] @ g @ y[4:] + 1.0)
        dense.append(solver.dense_output())
        taus.append(solver.t)
        if drift > DRIFT_LIMIT:
            reason = f"normalisation drift {drift:.1e} beyond {DRIFT_LIMIT:g}"
            break
        if steps > 200_000:
            reason = "step limit reached"
            break
    if not dense:
        raise PointError(f"{metric.path}: the crew worldline could not take a first step from "
                         f"({where}): {reason}")
    tau_end = taus[-1]
    ts = np.linspace(0.0, tau_end, samples)
    ys = np.empty((samples, 8))
    k = 0
    for i, tt in enumerate(ts):
        while k < len(dense) - 1 and tt > taus[k + 1]:
            k += 1
        ys[i] = dense[k](tt)
    return _record(metric, geometry, ts, ys, reason, steps)


def _record(metric, geometry, ts, ys, reason, steps) -> Worldline:
    crew = metric.crew
    xs, us = ys[:, :4], ys[:, 4:]
    batch = geometry.evaluate(xs, metric.parameters, use_exclude=False)
    ok = batch.ok
    n = len(ts)
    nanv = lambda *s: np.full((n,) + s, np.nan)
    tidal, tidal_g, drift = nanv(3), nanv(), nanv()
    vel_e = nanv(3)
    if ok.any():
        curv = batch.curvature
        u = us[ok]
        drift[ok] = np.abs(np.einsum("na,nab,nb->n", u, curv.g, u) + 1.0)
        Ec = comoving_frame(curv.g, u)
        lam, _ = tidal_eigen(curv.riemann, Ec)
        tidal[ok] = lam
        tidal_g[ok] = units.accel_g(units.tidal_accel_m_s2(np.abs(lam).max(axis=1),
                                                           metric.length_m, crew.body_length_m))
        En, eok = eulerian(curv.g, curv.ginv)
        gam = -np.einsum("na,nab,nb->n", u, curv.g, En[:, 0])
        ve = np.einsum("na,nab,nib->ni", u, curv.g, En[:, 1:]) / gam[:, None]
        ve[~eok] = np.nan
        vel_e[ok] = ve
    dt = us[:, 0]
    with np.errstate(divide="ignore", invalid="ignore"):
        vc = us[:, 1:] / dt[:, None]
    return Worldline(tau=ts, x=xs, u=us, dt_dtau=dt, coordinate_velocity=vc,
                     eulerian_velocity=vel_e, tidal_eigenvalues=tidal, tidal_g=tidal_g,
                     drift=drift, stop_reason=reason, length_m=metric.length_m,
                     body_length_m=crew.body_length_m, tidal_limit_g=crew.tidal_limit_g,
                     coordinates=tuple(metric.coordinates), steps=steps)
