"""Follow a crew along a geodesic and record what it experiences.

The geodesic equation with proper time τ (MTW 1973 eq. 13.8 — from memory):
dx^μ/dτ = u^μ, du^μ/dτ = −Γ^μ_αβ u^α u^β, integrated with SciPy's DOP853
(Hairer, Nørsett & Wanner 1993) at tight tolerances, one step at a time so
that the path stops, with a stated reason, at an event that cannot be
audited, at a region exclusion, or when the normalisation g(u,u) = −1 drifts
beyond :data:`DRIFT_LIMIT`. The path ends at the last accepted step before
the first such event; nothing beyond it is reported.

Validity is decided by :meth:`Geometry.evaluate` itself (same reasons, same
masks as the region audit), but for :data:`CHECK_EVERY` accepted steps at a
time in one vectorised batch rather than step by step: a one-event batch
costs as much as a whole DOP853 step. Steps integrated past a bad event are
thrown away, so the result is the same as checking every step alone.

The start velocity v (|v| < 1, units of c) is measured by the Eulerian
observer at the start in its orthonormal frame: u = γ (n + v^i e_i),
γ = (1 − v²)^{-1/2}. Along the path the crew's tides are those of its own
4-velocity: E_ij = R_{i0j0} in a frame with e_0 = u (:func:`comoving_frame`).

No step is longer than the spacing of the recorded samples (duration /
:data:`SAMPLES`): in flat regions the error control alone lets steps grow
until they jump over a thin wall or pulse without ever evaluating the metric
inside it. A feature shorter than that spacing in proper time can still be
missed; shorten ``duration`` to resolve it. The tides are evaluated at the
samples and at every accepted step; the largest is then refined by a bounded
Brent search (Brent 1973) along the interpolated path between its
neighbours, so a narrow tidal peak between two recorded events is not
under-reported.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import combinations_with_replacement

import numpy as np

from .. import units
from ..errors import PointError
from ..frames import eulerian
from ..frames.tetrads import _gram_schmidt
from ..geometry.layout import DIDX, GIDX
from ..geometry.points import REASONS
from .limits import CAUTION
from .tidal import tidal_tensor

__all__ = ["Worldline", "follow", "comoving_frame", "DRIFT_LIMIT", "RTOL", "ATOL",
           "SAMPLES", "CHECK_EVERY", "MAX_STEPS"]

#: Relative / absolute tolerances of the integrator: near double precision
#: while keeping step counts in the thousands for unit-scale curvature.
RTOL, ATOL = 1e-11, 1e-13
#: Stop when |g(u,u) + 1| exceeds this: 1e-6 is five orders above the drift
#: the tolerances above produce over thousands of steps, so reaching it means
#: the path entered a region the integrator cannot resolve.
DRIFT_LIMIT = 1e-6
#: Samples of the recorded path (tides and velocities are evaluated there).
SAMPLES = 400
#: Accepted steps whose events are checked together in one batch; at most
#: CHECK_EVERY − 1 steps past a bad event are integrated and discarded.
CHECK_EVERY = 32
#: Safety net against a path that never ends (a step costs about a millisecond,
#: so this bounds a run by a few minutes).
MAX_STEPS = 200_000
#: Relative width, in τ, to which the peak tide is located between its two
#: neighbouring recorded events: the peak is quadratic there, so its value is
#: then exact to about (1e-7)² relative, far below the integrator's error.
PEAK_XTOL = 1e-7
#: Below this fraction of its start value, a collapsing lapse is named in a
#: drift stop: a tenfold fall of N = (−g^tt)^(−1/2) at the stop marks a
#: degenerating time slicing (a horizon of the chart), not a rough metric.
LAPSE_HINT = 0.1


def comoving_frame(g: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Tetrad (N,4,4) with e_0 = u and spatial legs from the coordinate axes.

    The four axes projected orthogonally to u, P∂_μ = ∂_μ + g(∂_μ, u) u, span
    the rest space with exactly one linear relation, Σ_μ u^μ P∂_μ = P u = 0.
    Written with unit vectors p̂_μ = P∂_μ/|P∂_μ| its weights are
    c_μ = u^μ |P∂_μ|. Any three axes with c_μ ≠ 0 for the one left out are
    independent; leaving out the axis of largest |c_μ| (the most redundant,
    a choice independent of the coordinates' units) avoids nearly parallel
    legs. The three are Gram–Schmidt orthonormalised in axis order. (Dropping
    the axis of shortest projection instead fails where coordinate scales
    differ: inside the horizon in Painlevé–Gullstrand coordinates at r < 1 it
    keeps ∂_t and ∂_r, whose projections are parallel.)
    u is first rescaled to g(u,u) = −1 (it drifts by at most DRIFT_LIMIT).
    """
    n = len(u)
    with np.errstate(invalid="ignore"):
        u = u / np.sqrt(-np.einsum("na,nab,nb->n", u, g, u))[:, None]
    axes = np.broadcast_to(np.eye(4), (n, 4, 4))
    cand = axes + np.einsum("nja,nab,nb->nj", axes, g, u)[:, :, None] * u[:, None, :]
    norms = np.einsum("nja,nab,njb->nj", cand, g, cand)
    weight = np.abs(u) * np.sqrt(np.maximum(norms, 0.0))
    drop = np.argmax(weight, axis=1)
    keep = np.array([[j for j in range(4) if j != d] for d in range(4)])[drop]
    chosen = cand[np.arange(n)[:, None], keep]
    legs = _gram_schmidt(g, [u.copy()], [chosen[:, k] for k in range(3)])
    return np.stack(legs, axis=1)


def _tides(riemann: np.ndarray, g: np.ndarray, u: np.ndarray):
    """Ascending tidal eigenvalues (N,3) in the comoving frame; NaN rows where
    the frame or the curvature is not finite."""
    lam = np.full((len(u), 3), np.nan)
    if len(u):
        T = tidal_tensor(riemann, comoving_frame(g, u))
        good = np.isfinite(T).reshape(len(u), -1).all(axis=1)
        if good.any():
            lam[good] = np.linalg.eigvalsh(T[good])
    return lam


def _tidal_g(lam: np.ndarray, crew, length_m: float) -> np.ndarray:
    """Largest |E_k| across the crew's body, in standard g (NaN stays NaN)."""
    with np.errstate(invalid="ignore"):
        peak = np.abs(lam).max(axis=1)
    return units.accel_g(units.tidal_accel_m_s2(peak, length_m, crew.body_length_m))


def _event(coordinates, x) -> str:
    return ", ".join(f"{c}={v:.6g}" for c, v in zip(coordinates, x))


@dataclass
class Worldline:
    """A followed crew path (geometric units unless suffixed).

    Arrays of length K hold the :data:`SAMPLES` events evenly spaced in proper
    time. ``step_tau``/``step_tidal_g`` hold the tides at every accepted step;
    ``peak_tidal_g`` at ``peak_tidal_tau`` is the refined largest tidal load
    over both (see the module docstring).
    """

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
    step_tau: np.ndarray = field(default_factory=lambda: np.zeros(0))
    step_tidal_g: np.ndarray = field(default_factory=lambda: np.zeros(0))
    peak_tidal_g: float | None = None
    peak_tidal_tau: float | None = None

    @property
    def exceeds_limit(self) -> bool:
        return self.peak_tidal_g is not None and self.peak_tidal_g > self.tidal_limit_g

    @property
    def speed(self) -> np.ndarray:
        return np.linalg.norm(self.eulerian_velocity, axis=1)

    def to_json(self) -> dict:
        finite_drift = self.drift[np.isfinite(self.drift)]
        return {
            "proper_time": float(self.tau[-1]),
            "proper_time_s": float(units.time_s(self.tau[-1], self.length_m)),
            "coordinate_time": float(self.x[-1, 0] - self.x[0, 0]),
            "coordinate_time_s": float(units.time_s(self.x[-1, 0] - self.x[0, 0], self.length_m)),
            "stop_reason": self.stop_reason,
            "normalisation_drift": float(finite_drift.max()) if finite_drift.size else None,
            "final_event": {c: float(v) for c, v in zip(self.coordinates, self.x[-1])},
            "final_coordinate_velocity": self.coordinate_velocity[-1],
            "final_eulerian_velocity": self.eulerian_velocity[-1],
            "final_dt_dtau": float(self.dt_dtau[-1]),
            "peak_speed": float(np.nanmax(self.speed)) if np.isfinite(self.speed).any() else None,
            "peak_tidal_accel_g": self.peak_tidal_g,
            "peak_tidal_tau": self.peak_tidal_tau,
            "peak_proper_accel_g": 0.0,   # a geodesic: no proper acceleration
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


def first_derivative_exprs(metric) -> list:
    """g_ab (a <= b) and ∂_c g_ab: the first 50 rows of the raw layout
    (DEVELOPERS.md, "Array layout": rows 10 + 10c + k hold ∂_c of the k-th
    pair a <= b) — the same expressions as ``metric_derivative_exprs(...)[:50]``
    without differentiating 100 second derivatives that the geodesic never uses."""
    import sympy as sp
    from ..geometry.kernels import smooth_rewrite
    g = metric.g.applyfunc(smooth_rewrite)
    comps = [g[a, b] for a, b in combinations_with_replacement(range(4), 2)]
    return comps + [sp.diff(gab, s) for s in metric.coord_symbols for gab in comps]


def compile_first_derivatives(metric):
    """The geodesic kernel of ``metric`` (50 rows; cached on disk like every kernel)."""
    from ..geometry.kernels import compile_scalars
    return compile_scalars(first_derivative_exprs(metric), metric.coord_symbols,
                           metric.param_symbols)


class _Rhs:
    """Geodesic right-hand side from a kernel of g and ∂g only (50 rows)."""

    def __init__(self, metric, params, kernel=None):
        from scipy.linalg.lapack import dgesv
        self._dgesv = dgesv
        self.kernel = kernel if kernel is not None else compile_first_derivatives(metric)
        self.p = np.asarray(params, dtype=float)
        self.out = np.empty(50)

    def parts(self, x):
        out = self.out
        self.kernel._fn(x, self.p, out)
        if not np.isfinite(out).all():
            out = self._limit(x)
        return out[GIDX], out[DIDX]

    def _limit(self, x):
        """Removable 0/0 (the centre of a bubble): mean over symmetric offsets.

        Same rule as :mod:`auditor.geometry.points` at one step size, h = 1e-6
        of max(1, |x|): the O(h²) error is far below the integrator tolerance.
        Whether the limit exists is decided by the batched validity check.
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
        """(u^μ, −Γ^μ_αβ u^α u^β) with Γ_μαβ u^α u^β = ∂_α g_μβ u^α u^β − ½ ∂_μ g_αβ u^α u^β
        (DEVELOPERS.md, first kind; the two symmetric terms are equal)."""
        u = y[4:]
        g, dg = self.parts(y[:4])                       # dg[c, a, b] = ∂_c g_ab
        gam_uu = (u @ dg.reshape(4, 16)).reshape(4, 4) @ u - 0.5 * ((dg @ u) @ u)
        _, _, acc, info = self._dgesv(g, gam_uu)
        if info != 0:
            # singular g (a degenerate event): let the step fail or be rejected;
            # the validity check names the event.
            acc = np.full(4, np.nan)
        return np.concatenate([u, -acc])


class _Path:
    """Accepted steps of one integration, checked in batches (module docstring)."""

    def __init__(self, metric, geometry, lapse0):
        self.metric, self.geometry, self.lapse0 = metric, geometry, lapse0
        self.taus = [0.0]          # τ at the start and at every accepted step
        self.dense = []            # dense output of each accepted step
        self.step_tidal_g = []
        self.pending = []          # (τ, y, dense) not checked yet

    def add(self, tau, y, dense):
        self.pending.append((tau, np.array(y), dense))

    def check(self) -> str | None:
        """Accept pending steps up to the first bad one; return its stop reason."""
        if not self.pending:
            return None
        metric = self.metric
        ys = np.array([p[1] for p in self.pending])
        self_pending, self.pending = self.pending, []
        batch = self.geometry.evaluate(ys[:, :4], metric.parameters)
        ok = batch.ok
        k = len(ys)
        drift = np.full(k, np.nan)
        curv = batch.curvature
        if ok.any():
            u = ys[ok, 4:]
            drift[ok] = np.abs(np.einsum("na,nab,nb->n", u, curv.g, u) + 1.0)
        bad = ~ok | ~(drift <= DRIFT_LIMIT)
        n_good = int(np.argmax(bad)) if bad.any() else k
        if n_good:
            # ok events come first in curv's order, so the kept ones are curv[:n_good]
            u = ys[:n_good, 4:]
            lam = _tides(curv.riemann[:n_good], curv.g[:n_good], u)
            self.step_tidal_g.extend(_tidal_g(lam, metric.crew, metric.length_m).tolist())
            for tau, _, dense in self_pending[:n_good]:
                self.taus.append(tau)
                self.dense.append(dense)
        if n_good == k:
            return None
        y = ys[n_good]
        where = _event(metric.coordinates, y[:4])
        if not ok[n_good]:
            name = REASONS[batch.reason[n_good] - 1].replace("_", " ")
            return f"reached an event that cannot be audited ({name}) at ({where})"
        reason = f"normalisation drift {drift[n_good]:.1e} beyond {DRIFT_LIMIT:g} at ({where})"
        g = curv.g[int(np.count_nonzero(ok[:n_good]))]
        return reason + self._slicing_hint(g, y[4:])

    def _slicing_hint(self, g, u) -> str:
        """Name a collapsing lapse (see :data:`LAPSE_HINT`)."""
        try:
            gtt = np.linalg.inv(g)[0, 0]
        except np.linalg.LinAlgError:
            return ""
        if not gtt < 0:
            return "; the t = const slice is not spacelike there"
        lapse = 1.0 / np.sqrt(-gtt)
        if not lapse < LAPSE_HINT * self.lapse0:
            return ""
        gamma = lapse * u[0]            # −g(u, n) with n_a = −N δ^t_a
        return (f"; the lapse has fallen to {lapse / self.lapse0:.1e} of its start value and "
                f"the crew's Lorentz factor relative to the Eulerian observers is {gamma:.1e}: "
                "the time slicing degenerates, as at a horizon of these coordinates")

    def at(self, tau: np.ndarray) -> np.ndarray:
        """The state y (len(tau), 8) interpolated on the accepted steps."""
        tau = np.atleast_1d(np.asarray(tau, dtype=float))
        k = np.clip(np.searchsorted(self.taus, tau, side="left") - 1, 0, len(self.dense) - 1)
        out = np.empty((len(tau), 8))
        for i, (kk, tt) in enumerate(zip(k, tau)):
            out[i] = self.dense[kk](tt)
        return out


def follow(metric, geometry, *, samples: int = SAMPLES) -> Worldline:
    """Integrate the crew geodesic of ``metric.crew`` (see module docstring).

    ``metric`` carries the parameter values; ``geometry`` may have been
    compiled for other values of them (a sweep shares one).
    """
    crew = metric.crew
    x0 = np.array([crew.start[c] for c in metric.coordinates], dtype=float)
    where = _event(metric.coordinates, x0)
    b0 = geometry.evaluate(x0[None, :], metric.parameters)
    if b0.reason[0] != 0:
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
    lapse0 = 1.0 / np.sqrt(-curv.ginv[0, 0, 0])

    from scipy.integrate import DOP853     # here: importing it takes a noticeable time
    rhs = _Rhs(metric, geometry.params(metric.parameters), geometry.first_derivative_kernel())
    solver = DOP853(rhs, 0.0, np.concatenate([x0, u0]), crew.duration, rtol=RTOL, atol=ATOL,
                    max_step=crew.duration / samples)
    path = _Path(metric, geometry, lapse0)
    reason = None
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
        path.add(solver.t, y, solver.dense_output())
        if len(path.pending) >= CHECK_EVERY:
            reason = path.check()
            if reason:
                break
        if steps >= MAX_STEPS:
            reason = "step limit reached"
            break
    # The earliest problem wins: a bad event among the unchecked steps came
    # before whatever ended the loop.
    reason = path.check() or reason or "duration reached"
    if not path.dense:
        raise PointError(f"{metric.path}: the crew worldline could not take a first step from "
                         f"({where}): {reason}")
    ts = np.linspace(0.0, path.taus[-1], samples)
    wl = _record(metric, geometry, ts, path.at(ts), reason, len(path.dense))
    wl.step_tau = np.array(path.taus[1:])
    wl.step_tidal_g = np.array(path.step_tidal_g)
    wl.peak_tidal_g, wl.peak_tidal_tau = _peak(metric, geometry, path, wl)
    return wl


def _tidal_g_at(metric, geometry, path, tau: float) -> float:
    """Tidal load (g) of the crew at proper time τ on the interpolated path."""
    y = path.at(tau)
    batch = geometry.evaluate(y[:, :4], metric.parameters, use_exclude=False)
    if not batch.ok[0]:
        return np.nan
    curv = batch.curvature
    return float(_tidal_g(_tides(curv.riemann, curv.g, y[:, 4:]), metric.crew,
                          metric.length_m)[0])


def _peak(metric, geometry, path, wl):
    """Largest tidal load over samples and steps, refined between its neighbours."""
    tau = np.concatenate([wl.tau, wl.step_tau])
    tg = np.concatenate([wl.tidal_g, wl.step_tidal_g])
    good = np.isfinite(tg)
    if not good.any():
        return None, None
    tau, tg = tau[good], tg[good]
    # one value per distinct τ (the last sample is also the last step), the larger
    order = np.lexsort((-tg, tau))
    tau, tg = tau[order], tg[order]
    first = np.concatenate([[True], np.diff(tau) > 0])
    tau, tg = tau[first], tg[first]
    i = int(np.argmax(tg))
    best_tau, best = float(tau[i]), float(tg[i])
    lo, hi = tau[max(i - 1, 0)], tau[min(i + 1, len(tau) - 1)]
    if hi > lo and best > 0:
        # Bounded Brent search (Brent 1973, ch. 5) for the maximum on [lo, hi].
        f = lambda t: -np.nan_to_num(_tidal_g_at(metric, geometry, path, t) / best, nan=0.0)
        from scipy.optimize import minimize_scalar
        res = minimize_scalar(f, bounds=(lo, hi), method="bounded",
                              options={"xatol": PEAK_XTOL * (hi - lo)})
        if res.success and -res.fun * best > best:
            best_tau, best = float(res.x), float(-res.fun * best)
    return best, best_tau


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
        lam = _tides(curv.riemann, curv.g, u)
        tidal[ok] = lam
        tidal_g[ok] = _tidal_g(lam, crew, metric.length_m)
        En, eok = eulerian(curv.g, curv.ginv)
        gam = -np.einsum("na,nab,nb->n", u, curv.g, En[:, 0])
        with np.errstate(invalid="ignore", divide="ignore"):
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
