"""The curvature engine against published closed forms.

Every reference value names its source: the section of
/work/shared/reference/published-checks.md (called "the sheet" below) and the
paper it cites, with the sheet's confidence (text / derived / memory).

Tolerance: relative 1e-10, plus an absolute floor where the reference is (near)
zero. The floor is machine epsilon times ``Curvature.scale`` (the size of the
terms that cancel in forming R_abcd, see auditor/geometry/curvature.py) times
the weight of the contractions that lead to the compared quantity; the
helpers in tests/conftest.py state the weights. The engine differentiates
exactly, so its error is round-off only: 1e-10 leaves five orders of magnitude
of headroom over double precision and still catches any formula error.

Events are random (numpy default_rng); each test prints its seed.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from scipy.optimize import minimize_scalar

from auditor.frames import auditing_frame, eulerian, static, to_frame
from auditor.geometry import Geometry
from auditor.probe import probe
from tests.conftest import (assert_close, einstein_floor, frame_floor,
                            kretschmann_floor, ricci_floor, riemann_floor, scalar_floor,
                            tetrad_weight)

PI = np.pi


def _evaluate_all_ok(geometry, x, parameters=None, use_exclude=False):
    batch = geometry.evaluate(x, parameters=parameters, use_exclude=use_exclude)
    assert batch.ok.all(), (
        f"events unexpectedly not auditable: {x[~batch.ok]} "
        f"({geometry.reason_names(batch.reason[~batch.ok])})")
    return batch.curvature


def _spherical_events(rng, n, r_lo, r_hi):
    """n events (t, r, theta, phi) with r uniform in [r_lo, r_hi], away from the axis."""
    return np.column_stack([rng.uniform(-5, 5, n), rng.uniform(r_lo, r_hi, n),
                            rng.uniform(0.15, PI - 0.15, n), rng.uniform(-PI, PI, n)])


# -- §4 Schwarzschild ---------------------------------------------------------

@pytest.mark.parametrize("M", [1.0, 0.37, 4.2])
def test_schwarzschild_kretschmann_and_vacuum(geometry_cache, rng, M):
    geo = geometry_cache.sample("schwarzschild")
    params = geo.metric.with_parameters(M=M).parameters
    # outside the horizon and inside it (Schwarzschild coordinates stay
    # Lorentzian for r < 2M); away from r = 0 and r = 2M
    x = np.vstack([_spherical_events(rng, 12, 2.2 * M, 25 * M),
                   _spherical_events(rng, 6, 0.3 * M, 1.8 * M)])
    curv = _evaluate_all_ok(geo, x, params)
    r = x[:, 1]
    # Sheet §4: K = 48 M²/r⁶ (text; Grøn & Hervik 2007 cited there)
    assert_close(curv.kretschmann, 48 * M**2 / r**6, kretschmann_floor(curv),
                 what="Schwarzschild K")
    # Vacuum: G_ab = 0 (Schwarzschild 1916; sheet §4 — common practice). Compared
    # in an orthonormal frame (Eulerian outside, principal inside the horizon) so
    # that components of different coordinate weight share one floor.
    E, _ = auditing_frame(curv.g, curv.ginv)
    assert_close(to_frame(E, curv.einstein), 0.0, frame_floor(curv, E),
                 what="Schwarzschild G_ab")
    assert_close(curv.ricci_scalar, 0.0, scalar_floor(curv), what="Schwarzschild R")


def test_schwarzschild_static_frame_tides(geometry_cache, rng):
    geo = geometry_cache.sample("schwarzschild")
    M = 1.0
    x = _spherical_events(rng, 12, 2.3, 30.0)
    curv = _evaluate_all_ok(geo, x)
    E, ok = static(curv.g)
    assert ok.all()
    Rf = np.einsum("nai,nbj,nck,ndl,nijkl->nabcd", E, E, E, E, curv.riemann)
    r = x[:, 1]
    floor = riemann_floor(curv) * tetrad_weight(E, 4)
    # Sheet §4 (derived): R_r̂t̂r̂t̂ = −2M/r³, R_θ̂t̂θ̂t̂ = R_φ̂t̂φ̂t̂ = +M/r³
    assert_close(Rf[:, 1, 0, 1, 0], -2 * M / r**3, floor, what="R_rtrt")
    assert_close(Rf[:, 2, 0, 2, 0], M / r**3, floor, what="R_thtthth t")
    assert_close(Rf[:, 3, 0, 3, 0], M / r**3, floor, what="R_phtpht")


# -- §5 Reissner–Nordström ----------------------------------------------------

@pytest.mark.parametrize("M,Q", [(1.0, 0.6), (1.0, 0.99), (2.5, 1.0)])
def test_reissner_nordstrom(geometry_cache, rng, M, Q):
    geo = geometry_cache.sample("reissner_nordstrom")
    params = geo.metric.with_parameters(M=M, Q=Q).parameters
    r_plus = M + np.sqrt(M**2 - Q**2)
    x = _spherical_events(rng, 15, 1.05 * r_plus, 20 * M)
    curv = _evaluate_all_ok(geo, x, params)
    r = x[:, 1]
    # Sheet §5 (derived): K = 48M²/r⁶ − 96MQ²/r⁷ + 56Q⁴/r⁸
    K = 48 * M**2 / r**6 - 96 * M * Q**2 / r**7 + 56 * Q**4 / r**8
    assert_close(curv.kretschmann, K, kretschmann_floor(curv), what="RN K")
    # Sheet §5 (derived; textbook result, memory): static frame
    # ρ = Q²/(8π r⁴), p_r = −ρ, p_t = +ρ, no off-diagonal stress.
    E, ok = static(curv.g)
    assert ok.all()
    T = to_frame(E, curv.einstein) / (8 * PI)
    rho = Q**2 / (8 * PI * r**4)
    expected = np.zeros_like(T)
    expected[:, 0, 0] = rho
    expected[:, 1, 1] = -rho
    expected[:, 2, 2] = rho
    expected[:, 3, 3] = rho
    assert_close(T, expected, frame_floor(curv, E) / (8 * PI), what="RN T in static frame")


# -- §6 de Sitter --------------------------------------------------------------

@pytest.mark.parametrize("Lam", [0.03, 0.5, -0.2])
def test_de_sitter(geometry_cache, rng, Lam):
    geo = geometry_cache.sample("de_sitter_static")
    params = geo.metric.with_parameters(Lambda=Lam).parameters
    r_max = 0.95 * np.sqrt(3 / Lam) if Lam > 0 else 10.0
    x = _spherical_events(rng, 15, 0.05, r_max)
    curv = _evaluate_all_ok(geo, x, params)
    # Sheet §6: K = 8Λ²/3 = 24 H⁴ (text for 24 H⁴; de Sitter 1917)
    assert_close(curv.kretschmann, np.full(len(x), 8 * Lam**2 / 3), kretschmann_floor(curv),
                 what="de Sitter K")
    # Sheet §6 (derived): T_ab = −Λ g_ab/(8π), i.e. G_ab = −Λ g_ab; R = 4Λ
    assert_close(curv.einstein, -Lam * curv.g, einstein_floor(curv), what="de Sitter G_ab")
    assert_close(curv.ricci_scalar, np.full(len(x), 4 * Lam), scalar_floor(curv),
                 what="de Sitter R")


# -- §7 FLRW --------------------------------------------------------------------

@pytest.mark.parametrize("w", [1 / 3, 0.0, -0.5, 1.0, -0.9])
def test_flrw_friedmann(geometry_cache, rng, w):
    geo = geometry_cache.sample("flrw_flat_w")
    t0 = 1.0
    params = geo.metric.with_parameters(w=w, t0=t0).parameters
    n = 14
    x = np.column_stack([rng.uniform(0.2, 4.0, n), rng.uniform(-2, 2, (n, 3))])
    curv = _evaluate_all_ok(geo, x, params)
    E, ok = eulerian(curv.g, curv.ginv)       # lapse 1, no shift: the comoving frame
    assert ok.all()
    G = to_frame(E, curv.einstein)
    # a = (t/t0)^p with p = 2/(3(1+w)) (the file's definition):
    # ȧ/a = p/t, ä/a = p(p−1)/t² (derived)
    t = x[:, 0]
    p = 2 / (3 * (1 + w))
    H = p / t
    acc = p * (p - 1) / t**2
    # Sheet §7 (derived; Friedmann equations, memory), k = 0:
    # G_t̂t̂ = 3ȧ²/a², G_îî = −[2ä/a + ȧ²/a²], off-diagonal zero
    expected = np.zeros_like(G)
    expected[:, 0, 0] = 3 * H**2
    for i in (1, 2, 3):
        expected[:, i, i] = -(2 * acc + H**2)
    assert_close(G, expected, frame_floor(curv, E), what=f"FLRW G_ab (w={w})")
    # Sheet §7 (derived): K = 12[(ä/a)² + ((ȧ² + k)/a²)²], k = 0
    assert_close(curv.kretschmann, 12 * (acc**2 + H**4), kretschmann_floor(curv),
                 what="FLRW K")
    # p/ρ = w follows (sheet §7: p = wρ) — a check of the file's a(t)
    assert_close(G[:, 1, 1] / G[:, 0, 0], np.full(n, w), 1e-13, what="p/rho")


# -- §3 Morris–Thorne ----------------------------------------------------------

def _morris_thorne_reference():
    """The sheet's §3 static-frame formulas for the file's b(r), Φ(r), as functions of l.

    File: r(l) = sqrt(l² + b0²), Φ = −a b0²/(b0² + l²). In the (t, r) form this
    is b(r) = b0²/r (from 1 − b/r = (dr/dl)² = l²/r², derived) and
    Φ(r) = −a b0²/r². ′ is d/dr as in the sheet.
    """
    r, l, b0, a = sp.symbols("r l b0 a", positive=True)
    b = b0**2 / r
    Phi = -a * b0**2 / r**2
    bp, Phip = sp.diff(b, r), sp.diff(Phi, r)
    # Morris & Thorne 1988 (sheet §3, derived exactly; equation numbers memory)
    rho = bp / (8 * sp.pi * r**2)
    tau = (b / r - 2 * (r - b) * Phip) / (8 * sp.pi * r**2)
    p_t = r / 2 * ((rho - tau) * Phip - sp.diff(tau, r)) - tau
    R_rtrt = (1 - b / r) * (sp.diff(Phi, r, 2) + Phip**2 - (bp * r - b) * Phip / (2 * r * (r - b)))
    R_ththt = (r - b) * Phip / r**2
    R_thrthr = (bp * r - b) / (2 * r**3)
    exprs = [rho, -tau, p_t, R_rtrt, R_ththt, R_thrthr]
    # cancel removes the removable (r − b)/(r − b) at the throat before r(l) goes in
    exprs = [sp.cancel(sp.together(e)).subs(r, sp.sqrt(l**2 + b0**2)) for e in exprs]
    return sp.lambdify((l, b0, a), exprs, modules="numpy")


@pytest.mark.parametrize("b0,a", [(1.0, 0.2), (2.5, -0.3), (0.7, 0.6)])
def test_morris_thorne_static_frame(geometry_cache, rng, b0, a):
    geo = geometry_cache.sample("morris_thorne_wormhole")
    params = geo.metric.with_parameters(b0=b0, a=a).parameters
    n = 16
    l = np.concatenate([rng.uniform(-5 * b0, 5 * b0, n - 4),
                        rng.uniform(-1e-3, 1e-3, 2) * b0,     # at the throat
                        [-2 * b0, 2 * b0]])                  # both sides, mirrored
    x = np.column_stack([rng.uniform(-3, 3, n), l, rng.uniform(0.2, PI - 0.2, n),
                         rng.uniform(-PI, PI, n)])
    curv = _evaluate_all_ok(geo, x, params)
    E, ok = static(curv.g)
    assert ok.all()
    T = to_frame(E, curv.einstein) / (8 * PI)
    rho, p_r, p_t, R_rtrt, R_ththt, R_thrthr = (
        np.broadcast_to(v, l.shape) for v in _morris_thorne_reference()(l, b0, a))
    floor_T = frame_floor(curv, E) / (8 * PI)
    # Sheet §3 (Morris & Thorne 1988): ρ = T_0̂0̂, −τ = p_r = T_l̂l̂, p_t = T_θ̂θ̂ = T_φ̂φ̂
    expected = np.zeros_like(T)
    expected[:, 0, 0] = rho
    expected[:, 1, 1] = p_r
    expected[:, 2, 2] = p_t
    expected[:, 3, 3] = p_t
    assert_close(T, expected, floor_T, what="Morris-Thorne T in static frame")
    # Sheet §3 (derived): flaring out gives ρ + p_r < 0 at the throat (NEC violated)
    throat = np.abs(l) < 1e-2 * b0
    assert (T[throat, 0, 0] + T[throat, 1, 1] < -floor_T[throat]).all()
    # Sheet §3 (derived): static-frame curvature
    Rf = np.einsum("nai,nbj,nck,ndl,nijkl->nabcd", E, E, E, E, curv.riemann)
    floor_R = riemann_floor(curv) * tetrad_weight(E, 4)
    assert_close(Rf[:, 1, 0, 1, 0], R_rtrt, floor_R, what="R_rtrt")
    assert_close(Rf[:, 2, 0, 2, 0], R_ththt, floor_R, what="R_thetatthetat")
    assert_close(Rf[:, 2, 1, 2, 1], R_thrthr, floor_R, what="R_thetarthetar")


# -- §1 Alcubierre -------------------------------------------------------------

def _alcubierre_rho(t, x, y, z, v, R, sigma):
    """Sheet §1: ρ_E = −(1/8π) v² (y² + z²)/(4 r_s²) (df/dr_s)² (Alcubierre 1994,
    text via a secondary source; derived to 1e−16 in the sheet), with
    df/dr_s from f = [tanh(σ(r_s+R)) − tanh(σ(r_s−R))]/[2 tanh(σR)] (derived)."""
    rs = np.sqrt((x - v * t)**2 + y**2 + z**2)
    fp = sigma / (2 * np.tanh(sigma * R)) * (1 / np.cosh(sigma * (rs + R))**2
                                             - 1 / np.cosh(sigma * (rs - R))**2)
    return -(1 / (8 * PI)) * v**2 * (y**2 + z**2) / (4 * rs**2) * fp**2


def _probe_rho(geo, metric, ev):
    at = dict(zip(metric.coordinates, map(float, ev)))
    return probe(metric, at, geometry=geo).eulerian_energy_density


def _bubble(geometry_cache, **params):
    """The sample bubble with other parameter values, sharing the compiled kernel.

    ``Geometry(metric, kernel=...)`` reuses the kernel, so no recompilation; the
    Geometry then carries the new parameters itself (see
    test_probe_uses_the_metric_parameters for why probe needs that).
    """
    base = geometry_cache.sample("tanh_wall_bubble")
    metric = base.metric.with_parameters(**params)
    return Geometry(metric, kernel=base.kernel), metric


@pytest.mark.parametrize("v", [0.5, 1.0, 2.0])
def test_alcubierre_eulerian_energy_density(geometry_cache, rng, v):
    geo, metric = _bubble(geometry_cache, v=v)
    R, sigma = metric.parameters["R"], metric.parameters["sigma"]
    n_far, n_near = 14, 6
    t = rng.uniform(-1.5, 1.5, n_far + n_near)
    t[0] = 0.0
    # distance from the centre: uniform over the interior, the wall and the outer
    # tail up to R + 2.2 (σ(r_s − R) ≤ 17.6, where the tanh tails are ~1e-15 of
    # the wall), and 1e-4 .. 0.2 near the centre; random directions
    dist = np.concatenate([rng.uniform(0.2, R + 2.2, n_far),
                           10 ** rng.uniform(-4, np.log10(0.2), n_near)])
    off = rng.normal(size=(n_far + n_near, 3))
    off *= (dist / np.linalg.norm(off, axis=1))[:, None]
    x = np.column_stack([t, v * t + off[:, 0], off[:, 1], off[:, 2]])
    # Geometry of the same events for the round-off floor (probe does not expose it)
    curv = _evaluate_all_ok(geo, x, metric.parameters)
    E, ok = eulerian(curv.g, curv.ginv)
    assert ok.all()
    floor = frame_floor(curv, E) / (8 * PI)
    got = np.array([_probe_rho(geo, metric, ev) for ev in x])
    expected = _alcubierre_rho(*x.T, v, R, sigma)
    assert_close(got, expected, floor, what=f"Alcubierre rho_E (v={v})")
    assert (got <= floor).all()   # sheet §1: ρ_E ≤ 0 everywhere


def test_far_field_derivatives_not_lost(geometry_cache):
    """Far outside the wall the curvature is tiny but resolvable in double precision.

    At r_s = R + 2.86 (σ(r_s − R) ≈ 22.9, v = 2) the sheet §1 formula gives
    ρ_E ≈ −1.5e−39 (df/dr_s ≈ −8e−20 through sech², derived). A kernel that
    differentiates tanh as 1 − tanh² gets exactly 0 there (tanh rounds to 1
    beyond |a| ≈ 19) with a round-off estimate of 0, and fails this test.
    """
    geo, metric = _bubble(geometry_cache, v=2.0)
    R, sigma = metric.parameters["R"], metric.parameters["sigma"]
    ev = np.array([0.96892326, -0.14790008, 2.12931477, -2.44597719])  # r_s ≈ 3.856
    expected = _alcubierre_rho(*ev, 2.0, R, sigma)
    assert expected < -1e-40
    curv = _evaluate_all_ok(geo, ev[None], metric.parameters)
    E, _ = eulerian(curv.g, curv.ginv)
    got = _probe_rho(geo, metric, ev)
    assert_close(got, expected, frame_floor(curv, E)[0] / (8 * PI),
                 what="far-field rho_E")


def test_alcubierre_centre_is_a_removable_limit(geometry_cache):
    """At r_s = 0 the kernel meets x/r_s = 0/0; the contract resolves it as a limit.
    The flat interior (f′(0) = 0, sheet §1 formula) has ρ_E = 0 there."""
    geo = geometry_cache.sample("tanh_wall_bubble")
    metric = geo.metric
    res = probe(metric, {"t": 0.0, "x": 0.0, "y": 0.0, "z": 0.0}, geometry=geo)
    assert res.resolved_as_limit
    assert abs(res.eulerian_energy_density) <= res.tolerance


def test_probe_uses_the_metric_parameters(geometry_cache):
    """probe(metric.with_parameters(v=1), at, geometry=<compiled for v=0.5>) must use v = 1.

    Reference: sheet §1 formula (Alcubierre 1994) at x = vt, r_s = R, where
    ρ_E = −(v²/32π) f′(R)² (derived in the sheet): for v = 1 that is −0.1591550147.
    """
    geo = geometry_cache.sample("tanh_wall_bubble")          # compiled with v = 0.5
    metric = geo.metric.with_parameters(v=1.0)
    at = {"t": 0.0, "x": 0.0, "y": 1.0, "z": 0.0}
    got = probe(metric, at, geometry=geo).eulerian_energy_density
    assert abs(got - (-0.1591550147)) <= 1e-9


def test_alcubierre_minimum(geometry_cache):
    v, R, sigma = 1.0, 1.0, 8.0
    # Sheet §1 (derived): ρ_min = −(v²/32π) f′(R)², f′(R) = −σ tanh²(2σR)/(2 tanh σR);
    # for v = 1, R = 1, σ = 8 the sheet prints −0.1591550147 (10 digits: ±5e−11).
    fpR = -sigma * np.tanh(2 * sigma * R)**2 / (2 * np.tanh(sigma * R))
    rho_min = -(v**2 / (32 * PI)) * fpR**2
    assert abs(rho_min - (-0.1591550147)) <= 1e-9
    # the general formula at that point (plane x = vt, r_s = R, y² + z² = r_s²) agrees
    assert_close(_alcubierre_rho(0.0, 0.0, R, 0.0, v, R, sigma), rho_min, 0.0, rtol=1e-13,
                 what="formula at the minimum")

    geo, metric = _bubble(geometry_cache, v=v, R=R, sigma=sigma)
    for t, angle in [(0.0, 0.0), (0.7, 1.1), (-1.3, 2.5)]:
        def rho_at(rs):
            return _probe_rho(geo, metric, (t, v * t, rs * np.cos(angle), rs * np.sin(angle)))
        # the package's value at r_s = R, against the sheet's closed form
        assert_close(rho_at(R), rho_min, 0.0, what=f"package rho_E at r_s = R, t = {t}")
        # and the minimum over r_s on the plane x = vt is that value: f′² peaks
        # within ~e^(−4σR) of R, so the minimiser's error δ costs only ~σ²δ²
        res = minimize_scalar(rho_at, bounds=(0.9 * R, 1.1 * R), method="bounded",
                              options={"xatol": 1e-8})
        assert abs(res.x - R) < 1e-3
        assert abs(res.fun - (-0.1591550147)) <= 1e-9   # sheet §1 printed value


# -- §8 plane-fronted waves ----------------------------------------------------

@pytest.mark.parametrize("A0,B0", [(0.05, 0.03), (0.0, 0.08), (-0.04, 0.02)])
def test_plane_wave_ricci(geometry_cache, rng, A0, B0):
    geo = geometry_cache.sample("plane_wave_brinkmann")
    params = geo.metric.with_parameters(A0=A0, B0=B0).parameters
    wdt = params["w"]
    # The file's profile, rewritten here by hand in Brinkmann variables (u, x, y):
    u, X, Y = sp.symbols("u x y", real=True)
    env = sp.exp(-u**2 / wdt**2)
    H = B0 * env * (X**2 - Y**2) - A0 * env * (X**2 + Y**2)
    # Sheet §8 (derived): R_uu = −½(H_xx + H_yy) for ds² = H du² + 2 du dv + dx² + dy²;
    # the file has the same sign of H (u = t − z, v = −(t + z)/2, derived in the file)
    R_uu = sp.lambdify((u, X, Y), -(sp.diff(H, X, 2) + sp.diff(H, Y, 2)) / 2, "numpy")
    n = 16
    x = np.column_stack([rng.uniform(-2, 2, n), rng.uniform(-1.8, 1.8, (n, 2)),
                         rng.uniform(-3, 3, n)])
    curv = _evaluate_all_ok(geo, x, params)
    ruu = np.broadcast_to(R_uu(x[:, 0] - x[:, 3], x[:, 1], x[:, 2]), (n,))
    # chain rule (derived): R_ab = R_uu ∂_a u ∂_b u with ∂_a u = (1, 0, 0, −1) in (t, x, y, z),
    # all other Brinkmann components zero
    k = np.array([1.0, 0.0, 0.0, -1.0])
    expected = ruu[:, None, None] * np.outer(k, k)[None]
    assert_close(curv.ricci, expected, ricci_floor(curv), what="plane wave R_ab")
    # Sheet §8 (derived): R = 0
    assert_close(curv.ricci_scalar, 0.0, scalar_floor(curv), what="plane wave R")
    # The same through vectors: ∂_u = ½(∂_t − ∂_z) gives R_uu, ∂_v = −(∂_t + ∂_z) gives 0
    lu = np.array([0.5, 0.0, 0.0, -0.5])
    lv = np.array([-1.0, 0.0, 0.0, -1.0])
    assert_close(np.einsum("a,nab,b->n", lu, curv.ricci, lu), ruu, ricci_floor(curv),
                 what="R(∂_u, ∂_u)")
    assert_close(np.einsum("a,nab,b->n", lv, curv.ricci, lv), 0.0, ricci_floor(curv),
                 what="R(∂_v, ∂_v)")
    # Sheet §8: T_uu = −(H_xx + H_yy)/(16π) ≥ 0 iff H_xx + H_yy ≤ 0 (here −4A(u))
    if A0 >= 0:
        assert (ruu >= 0).all()
