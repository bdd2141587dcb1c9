"""The crew worldline (auditor.crew.worldline.follow) against closed-form geodesics.

Each reference names its source; "derived" marks derivations written out here.
The integrator runs at rtol 1e-11, atol 1e-13 (DOP853, worldline.RTOL/ATOL):
its global error over the tens to hundreds of steps these paths take stays
below ~1e-10 relative, so the 1e-8 relative comparisons below leave two
orders of magnitude of headroom and still catch any error in the equations
of motion, the start velocity or the parameters (which change results at
order one).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from auditor import units
from auditor.crew.tidal import tidal_eigen
from auditor.crew.worldline import DRIFT_LIMIT, comoving_frame, follow
from auditor.errors import InputError, PointError
from auditor.geometry import Geometry
from auditor.metric import loads_metric
from tests.crew import (PAINLEVE_GULLSTRAND, PI, PLANE_WAVE, PLANE_WAVE_PULSE, PP_WAVE_FLAT,
                        SCHWARZSCHILD, with_crew)

REL = 1e-8   # see module docstring


def _rel(got, expected, rel=REL, what=""):
    got, expected = np.asarray(got, float), np.asarray(expected, float)
    err = np.abs(got - expected) / np.maximum(np.abs(expected), 1e-300)
    assert np.isfinite(got).all(), f"{what}: non-finite values"
    assert err.max() <= rel, f"{what}: max relative error {err.max():.3e} > {rel:g}"


def _abs(got, expected, atol, what=""):
    err = np.abs(np.asarray(got, float) - np.asarray(expected, float))
    assert np.isfinite(err).all(), f"{what}: non-finite values"
    assert err.max() <= atol, f"{what}: max error {err.max():.3e} > {atol:g}"


# -- Schwarzschild: radial infall from rest, the cycloid ----------------------------

def _cycloid_r(tau, R0, M):
    """Radial infall from rest at R0 (MTW 1973 §25.5, Hartle 2003 ch. 9 — from memory).

    Derived: with Killing energy E² = 1 − 2M/R0, (dr/dτ)² = E² − (1 − 2M/r)
    = 2M/r − 2M/R0. Put r = (R0/2)(1 + cos η): 2M/r − 2M/R0 = (2M/R0) tan²(η/2)
    and dr = −(R0/2) sin η dη, so dτ = (R0/2) sqrt(R0/2M) (1 + cos η) dη, i.e.
    τ = sqrt(R0³/(8M)) (η + sin η). Invert for η by bracketing on [0, π].
    """
    k = np.sqrt(R0**3 / (8 * M))
    eta = np.array([brentq(lambda e: k * (e + np.sin(e)) - t, 0.0, PI, xtol=1e-15, rtol=1e-15)
                    for t in np.atleast_1d(tau)])
    return 0.5 * R0 * (1 + np.cos(eta))


def _cycloid_tau(r, R0, M):
    eta = np.arccos(2 * r / R0 - 1)
    return np.sqrt(R0**3 / (8 * M)) * (eta + np.sin(eta))


@pytest.fixture(scope="module")
def schwarzschild(geometry_cache):
    """One compiled Schwarzschild geometry (parameters change per evaluation)."""
    return geometry_cache.text(SCHWARZSCHILD)


@pytest.mark.parametrize("M", [1.0, 2.0])
def test_radial_infall_matches_cycloid(schwarzschild, M):
    # The geometry was compiled with M = 1; the metric carries M: the worldline
    # must use the metric's parameters (as a sweep or --set does).
    R0 = 10.0 * M
    metric = with_crew(schwarzschild.metric.with_parameters(M=M), (0.0, R0, PI / 2, 0.0),
                       duration=30.0 * M)
    wl = follow(metric, schwarzschild)
    assert wl.stop_reason == "duration reached"
    # DOP853 clamps its last step to the end of the interval: exact up to an ulp.
    assert wl.tau[-1] == pytest.approx(30.0 * M, rel=1e-15)
    r = wl.x[:, 1]
    _rel(r, _cycloid_r(wl.tau, R0, M), what="r(τ) vs cycloid")
    assert r[-1] < 0.5 * R0          # the comparison covers most of the fall
    # No angular motion: the only angular force at the equator is Γ^θ_φφ u^φ u^φ
    # with u^φ = 0 and cos(π/2) ~ 6e-17; 1e-13 is round-off with headroom.
    _abs(wl.x[:, 2], PI / 2, 1e-13, "theta")
    _abs(wl.x[:, 3], 0.0, 1e-13, "phi")
    # dt/dτ = E/(1 − 2M/r), E = sqrt(1 − 2M/R0) (derived: conserved Killing energy).
    f = 1 - 2 * M / r
    E = np.sqrt(1 - 2 * M / R0)
    _rel(wl.dt_dtau, E / f, what="dt/dτ")
    # Speed measured by the static (= Eulerian) observer: γ = E/sqrt(f), inward
    # (derived): v_r̂ = −sqrt(1 − f/E²).
    _rel(wl.eulerian_velocity[1:, 0], -np.sqrt(1 - f[1:] / E**2), what="Eulerian speed")
    _abs(wl.eulerian_velocity[:, 1:], 0.0, 1e-12, "transverse Eulerian velocity")  # round-off
    # Tides along the path: radial boosts leave −2M/r³, M/r³, M/r³ unchanged
    # (published-checks §4, MTW §31.2 — memory). Round-off only (boosts up to
    # γ ~ 1.5 here): 1e-9 relative to M/r³ is generous.
    mu = M / r**3
    _abs(wl.tidal_eigenvalues / mu[:, None], np.broadcast_to([-2.0, 1.0, 1.0], (len(r), 3)),
         1e-9, "tides along the fall")
    # Peak tide: at the lowest point, across 2 m, in g (units.py conversion). The
    # same recorded r enters both sides, so only round-off separates them (1e-9).
    peak = units.accel_g(units.tidal_accel_m_s2(2 * M / r[-1] ** 3, metric.length_m, 2.0))
    assert wl.to_json()["peak_tidal_accel_g"] == pytest.approx(float(peak), rel=1e-9)
    # tides grow as r falls, so the peak is the last event itself
    assert wl.to_json()["peak_tidal_tau"] == pytest.approx(30.0 * M, rel=1e-12)
    # Normalisation: the recorded drift is far below the stop limit (1e-6).
    assert np.nanmax(wl.drift) < 1e-9


def test_killing_energy_and_angular_momentum_conserved(schwarzschild):
    # A bound, precessing orbit (r from 10M to ~31M, about two and a half
    # turns): start at r = 10M with a small outward radial
    # and a tangential Eulerian velocity. ∂_t and ∂_φ are Killing vectors, so
    # E = −g_tμ u^μ and L = g_φμ u^μ are constants of the geodesic (Noether;
    # any GR text, e.g. Hartle 2003 ch. 9 — from memory).
    # L = 4.4 M > 4 M: the orbit is bound (E < 1) and stays outside the
    # potential barrier, so it does not plunge.
    metric = with_crew(schwarzschild.metric, (0.0, 10.0, PI / 2, 0.0), (0.05, 0.0, 0.4),
                       duration=1500.0)
    wl = follow(metric, schwarzschild)
    assert wl.stop_reason == "duration reached"
    batch = schwarzschild.evaluate(wl.x, metric.parameters)
    assert batch.ok.all()
    g = batch.curvature.g
    E = -np.einsum("nm,nm->n", g[:, 0, :], wl.u)
    L = np.einsum("nm,nm->n", g[:, 3, :], wl.u)
    # Start values from the start velocity (derived): static frame at r0, θ = π/2:
    # u = γ(e_t̂ + 0.05 e_r̂ + 0.4 e_φ̂), so E = γ sqrt(1 − 2M/r0), L = γ · 0.4 · r0.
    gam = 1 / np.sqrt(1 - 0.05**2 - 0.4**2)
    _rel(E, gam * np.sqrt(1 - 2 / 10.0), what="Killing energy E")
    _rel(L, gam * 0.4 * 10.0, what="angular momentum L")
    assert E[0] < 1
    # The orbit is genuinely non-trivial: r varies and φ winds more than once.
    assert np.ptp(wl.x[:, 1]) > 1.0 and wl.x[-1, 3] > 2 * PI
    # |g(u,u) + 1| over 1500 units of proper time: a per-step error of ~rtol
    # (1e-11) over ~100 steps; 1e-9 bounds it with headroom and is 1000 times
    # below the stop limit.
    assert np.nanmax(wl.drift) < 1e-9
    assert wl.to_json()["normalisation_drift"] < 1e-9


# -- Stop reasons ---------------------------------------------------------------

def test_reaching_the_horizon_in_schwarzschild_coordinates_stops_with_a_reason(schwarzschild):
    # In Schwarzschild coordinates u^t = E/(1 − 2M/r) diverges at r = 2M, which
    # the crew reaches in finite proper time (cycloid above). The path must stop
    # there with a stated reason, not run for the full duration or crash.
    M, R0 = 1.0, 6.0
    metric = with_crew(schwarzschild.metric, (0.0, R0, PI / 2, 0.0), duration=100.0)
    wl = follow(metric, schwarzschild)
    tau_h = _cycloid_tau(2 * M, R0, M)
    assert wl.stop_reason != "duration reached"
    assert "horizon" in wl.stop_reason, wl.stop_reason
    # It stops just before r = 2M: within 1e-3 of τ_h (dr/dτ ~ 0.8 there, and
    # the drift limit is reached once 1 − 2M/r is down to ~1e-5).
    assert tau_h - 1e-3 < wl.tau[-1] < tau_h
    assert 2 * M < wl.x[-1, 1] < 2 * M * (1 + 1e-3)
    # Everything recorded is within the stated normalisation tolerance, and up to
    # the stop the path is still the cycloid (looser: the last steps integrate a
    # t that grows like log(r − 2M); 1e-6 still pins the motion).
    assert np.nanmax(wl.drift) <= DRIFT_LIMIT
    _rel(wl.x[:, 1], _cycloid_r(wl.tau, R0, M), rel=1e-6, what="r(τ) up to the horizon")


def test_exclusion_stops_the_path(schwarzschild):
    # region.exclude removes r <= 3M; the crew falling from 8M stops at the last
    # accepted step outside it, with the reason stated.
    text = SCHWARZSCHILD + """
[region]
t = 0.0
r = [3.0, 10.0]
theta = 1.5707963267948966
phi = 0.0
exclude = "3*M - r"
"""
    geo = Geometry(loads_metric(text))
    metric = with_crew(geo.metric, (0.0, 8.0, PI / 2, 0.0), duration=100.0)
    wl = follow(metric, geo)
    assert "user exclusion" in wl.stop_reason, wl.stop_reason
    assert wl.x[-1, 1] > 3.0
    assert wl.tau[-1] < _cycloid_tau(3.0, 8.0, 1.0)
    _rel(wl.x[:, 1], _cycloid_r(wl.tau, 8.0, 1.0), what="r(τ) up to the exclusion")


@pytest.mark.parametrize("r0, message", [
    (1.0, "not spacelike"),       # inside the horizon: no Eulerian observer
    (2.0, "cannot be audited"),   # r = 2M: g_rr = 1/0, singular
    (0.0, "cannot be audited"),   # r = 0
])
def test_unauditable_start_is_an_input_error(schwarzschild, r0, message):
    metric = with_crew(schwarzschild.metric, (0.0, r0, PI / 2, 0.0), duration=1.0)
    with pytest.raises(PointError, match=message) as info:
        follow(metric, schwarzschild)
    assert isinstance(info.value, InputError) and info.value.exit_code == 2


# -- Painlevé–Gullstrand: through the horizon -----------------------------------

def test_painleve_gullstrand_infall_through_the_horizon(geometry_cache):
    geo = geometry_cache.text(PAINLEVE_GULLSTRAND)
    M, r0, r1 = 1.0, 6.0, 0.5
    # At rest relative to the Eulerian observer = falling from rest at infinity.
    # Derived: dr/dτ = −sqrt(2M/r), dt/dτ = 1 (lapse 1, shift sqrt(2M/r)), so
    # r(τ)^{3/2} = r0^{3/2} − (3/2) sqrt(2M) τ and t = τ.
    tau1 = (r0**1.5 - r1**1.5) / (1.5 * np.sqrt(2 * M))
    metric = with_crew(geo.metric, (0.0, r0, PI / 2, 0.0), duration=tau1)
    wl = follow(metric, geo)
    assert wl.stop_reason == "duration reached"
    r = wl.x[:, 1]
    _rel(r, (r0**1.5 - 1.5 * np.sqrt(2 * M) * wl.tau) ** (2 / 3), what="PG r(τ)")
    _rel(wl.x[1:, 0], wl.tau[1:], what="PG t = τ")
    assert r[-1] == pytest.approx(r1, rel=REL) and (r < 2 * M).sum() > 10
    # The crew stays with the Eulerian observers (zero relative velocity): the
    # absolute error of v is the relative error of u, ~1e-10 (module docstring).
    _abs(wl.eulerian_velocity, 0.0, 1e-8, "Eulerian velocity")
    # Tides −2M/r³, M/r³, M/r³ on both sides of the horizon (published-checks §4).
    mu = M / r**3
    _abs(wl.tidal_eigenvalues / mu[:, None],
         np.broadcast_to([-2.0, 1.0, 1.0], (len(r), 3)), 1e-9, "PG tides along the fall")


# -- plane-fronted waves ------------------------------------------------------------

def test_flat_plane_fronted_wave_closed_form(geometry_cache):
    # ds² = −dt² + dx² + dy² + dz² + H(u)(dt − dz)², u = t − z, H = a sech²(u/w).
    # Derived: k = ∂_t + ∂_z is a null Killing vector (the metric depends on
    # t − z only; g(k,k) = −1 + 1 + H·0), so g(k, u) = −(u^t − u^z) = −u̇ is
    # conserved: u̇ = du/dτ is constant. ∂_x, ∂_y are Killing too, and a crew at
    # rest at the start has u^x = u^y = 0 forever. Normalisation
    # −(u^t)² + (u^z)² + H u̇² = −1 with s = u^t + u^z gives s = (1 + H u̇²)/u̇:
    #   dt/dτ = (1 + u̇² + H u̇²)/(2u̇),  dz/dτ = (1 − u̇² + H u̇²)/(2u̇).
    # At the start u = n, the Eulerian normal: from g^ab = η^ab − H ℓ^a ℓ^b
    # (ℓ = dt − dz, Kerr–Schild), g^tt = −(1 + H), g^tz = −H, lapse
    # N = (1 + H)^{-1/2}, n^t = sqrt(1 + H), n^z = H/sqrt(1 + H): u̇ = 1/sqrt(1 + H0).
    # Integrating dt/dτ with dτ = du/u̇: t = t0 + τ(1 + u̇²)/(2u̇) + ½ ∫H du,
    # ∫ a sech²(u/w) du = a w tanh(u/w).
    # Eulerian speed (time dilation relative to the wave's slicing): γ = N u^t
    # = (q + 1/q)/2 with q = u̇ sqrt(1 + H), and v_ẑ = g(u, e_z)/γ = (1 − q²)/(1 + q²)
    # = (H0 − H)/(2 + H + H0).
    geo = geometry_cache.text(PP_WAVE_FLAT)
    a, w = 0.6, 1.0
    t0, x0, y0, z0 = 0.0, 0.3, -0.2, 4.0
    metric = with_crew(geo.metric, (t0, x0, y0, z0), duration=12.0)
    wl = follow(metric, geo)
    assert wl.stop_reason == "duration reached"
    H = lambda u: a / np.cosh(u / w) ** 2
    u0 = t0 - z0
    ud = 1 / np.sqrt(1 + H(u0))
    tau = wl.tau
    u = u0 + ud * tau
    assert u[-1] > 4.0    # the whole pulse has passed the crew
    t = t0 + tau * (1 + ud**2) / (2 * ud) + 0.5 * a * w * (np.tanh(u / w) - np.tanh(u0 / w))
    _rel(wl.x[1:, 0], t[1:], what="t(τ)")
    _abs(wl.x[:, 0] - wl.x[:, 3], u, REL * np.abs(u).max(), "u = t − z linear in τ")
    # x, y: no force at all (H has no x, y dependence), so exact up to round-off.
    _abs(wl.x[:, 1], x0, 1e-12, "x stays")
    _abs(wl.x[:, 2], y0, 1e-12, "y stays")
    Hu = H(u)
    _rel(wl.dt_dtau, (1 + ud**2 + Hu * ud**2) / (2 * ud), what="dt/dτ (time dilation)")
    _rel(wl.coordinate_velocity[:, 2],
         (1 - ud**2 + Hu * ud**2) / (1 + ud**2 + Hu * ud**2), what="dz/dt")
    vz = (H(u0) - Hu) / (2 + Hu + H(u0))
    # v_z passes through zero; compare absolutely at the scale of its peak
    assert np.abs(vz).max() > 0.1
    _abs(wl.eulerian_velocity[:, 2], vz, REL * np.abs(vz).max(), "Eulerian v_z")
    _abs(wl.eulerian_velocity[:, :2], 0.0, 1e-12, "Eulerian v_x, v_y")
    # Flat: no tides at all; 1e-12 is a few thousand ulps of the curvature terms
    # of size a/w² ~ 1 that cancel.
    _abs(wl.tidal_eigenvalues, 0.0, 1e-12, "flat wave tides")
    assert not wl.exceeds_limit


def test_vacuum_plane_wave_transverse_motion_and_tides(geometry_cache):
    # Brinkmann form H du² + 2 du dv + dx² + dy² with u = t − z, v = −(t + z)/2
    # and H = A(x² − y²) (published-checks §8; vacuum since H_xx + H_yy = 0).
    # Derived: u̇ is constant (∂_v is a null Killing vector, g_uv = 1), and with
    # Γ^x_uu = −½ H_x = −A x, Γ^y_uu = +A y the transverse equations are
    # ẍ = A u̇² x, ÿ = −A u̇² y: from rest, x = x0 cosh(sqrt(A) u̇ τ),
    # y = y0 cos(sqrt(A) u̇ τ). Tides: d²ξ^x/dτ² = −R^x_uxu u̇² ξ^x = ½H_xx u̇² ξ^x,
    # so E_xx = −A u̇² (stretch along x, negative), E_yy = +A u̇² (squeeze along
    # y), and 0 along the third direction of the rest space. Start at rest
    # relative to the Eulerian observer: u̇ = 1/sqrt(1 + H0) (see the flat wave).
    geo = geometry_cache.text(PLANE_WAVE)
    A, x0, y0 = 0.04, 0.5, 0.7
    metric = with_crew(geo.metric, (0.0, x0, y0, 0.0), duration=10.0)
    wl = follow(metric, geo)
    assert wl.stop_reason == "duration reached"
    ud = 1 / np.sqrt(1 + A * (x0**2 - y0**2))
    k = np.sqrt(A) * ud * wl.tau
    assert k[-1] > 1.9   # x grows by cosh(1.9) ~ 3.4, y swings past zero
    _rel(wl.x[:, 1], x0 * np.cosh(k), what="x(τ) = x0 cosh")
    _abs(wl.x[:, 2], y0 * np.cos(k), REL * y0, "y(τ) = y0 cos")
    _abs(wl.x[:, 0] - wl.x[:, 3], ud * wl.tau, REL * ud * wl.tau[-1], "u(τ) linear")
    # Tides, ascending: −A u̇², 0, +A u̇² (round-off only: 1e-9 of A u̇²).
    scale = A * ud**2
    _abs(wl.tidal_eigenvalues / scale, np.broadcast_to([-1.0, 0.0, 1.0], (len(k), 3)), 1e-9,
         "plane-wave tides")
    # The stretch direction (derived): with only R_xuxu = −A and R_yuyu = +A
    # non-zero (Brinkmann chart), E_ab = R_acbd u^c u^d = −A w_a w_b + A z_a z_b,
    # w_a = u̇ δ^x_a − ẋ δ^u_a. Raised, w = u̇ ∂_x − ẋ ∂_v, and ∂_v = −(∂_t + ∂_z)
    # here, so the unit stretch eigenvector is ∂_x + (ẋ/u̇)(∂_t + ∂_z) — ∂_x
    # tilted along the wave's null direction, orthogonal to u.
    batch = geo.evaluate(wl.x[-1:], metric.parameters)
    g, u = batch.curvature.g, wl.u[-1:]
    E = comoving_frame(g, u)
    lam, vec = tidal_eigen(batch.curvature.riemann, E)
    stretch = np.einsum("ni,nim->nm", vec[:, :, 0], E[:, 1:])[0]
    udot = u[0, 0] - u[0, 3]
    w = np.array([0.0, 1.0, 0.0, 0.0]) + u[0, 1] / udot * np.array([1.0, 0.0, 0.0, 1.0])
    # w is a unit vector orthogonal to u (exact algebra; round-off, and the
    # 1e-10-level integration error of u for the orthogonality)
    assert w @ g[0] @ w == pytest.approx(1.0, rel=1e-12)
    assert abs(w @ g[0] @ u[0]) < 1e-10
    # |cos| of the angle between two unit vectors of the rest space: 1 up to
    # the eigenvector's round-off (eigenvalue gap 2A u̇² ~ 0.08 ≫ eps).
    assert abs(stretch @ g[0] @ w) == pytest.approx(1.0, rel=1e-10)
    assert abs(u[0, 1]) > 0.1       # the tilt is really tested: ẋ is not small


def test_tidal_peak_between_samples_is_found(geometry_cache):
    # A thin vacuum plane-wave pulse, B(u) = B0 exp(−u²/w²), w = 0.01, crossed in
    # a proper time ~w while the path is recorded every 6/399 = 0.015: the
    # recorded samples alone can miss most of the peak (a sample may fall 0.75 w
    # from the centre: exp(−0.56) = 57 % of it). Derived as for the plane wave
    # above: the tides are ∓B(u) u̇², 0, with u̇ = 1 for a crew at rest on the
    # axis x = y = 0 (H0 = 0), so the peak is exactly B0 (in 1/length²).
    geo = geometry_cache.text(PLANE_WAVE_PULSE)
    B0 = 0.5
    peak_g = float(units.accel_g(units.tidal_accel_m_s2(B0, 1.0, 2.0)))
    metric = with_crew(geo.metric, (0.0, 0.0, 0.0, 3.0), duration=6.0,
                       tidal_limit_g=0.95 * peak_g)
    wl = follow(metric, geo)
    assert wl.stop_reason == "duration reached"
    # The worldline passes u = 0 at τ = 3 exactly; half-way between samples.
    assert np.abs(wl.tau - 3.0).min() > 0.005
    assert wl.exceeds_limit
    out = wl.to_json()
    # The peak is refined on the exact kernels along the interpolated path: the
    # peak is quadratic, so a τ error δ costs (δ/w)² relative; 1e-6 is reached
    # with δ ~ 1e-5 w, which the refinement's tolerance gives.
    assert out["peak_tidal_accel_g"] == pytest.approx(peak_g, rel=1e-6)
    assert out["peak_tidal_tau"] == pytest.approx(3.0, abs=1e-4)
    assert out["exceeds_tidal_limit"] is True


def test_thin_pulse_is_not_stepped_over(geometry_cache):
    # Off the axis the pulse kicks the crew: in the Brinkmann chart (u = t − z,
    # derived as for the plane wave above) u̇ = 1 is constant and x, y obey the
    # linear equations ẍ = u̇² B(u) x, ÿ = −u̇² B(u) y exactly. Outside the pulse
    # the metric is flat, where the error control alone would let the steps
    # grow past the pulse's width 0.01 and miss it. The reference integrates
    # the reduced equation independently (scipy solve_ivp, steps below w/10).
    from scipy.integrate import solve_ivp
    geo = geometry_cache.text(PLANE_WAVE_PULSE)
    B0, w, x0, y0, z0 = 0.5, 0.01, 0.2, 0.1, 3.0
    metric = with_crew(geo.metric, (0.0, x0, y0, z0), duration=6.0)
    wl = follow(metric, geo)
    assert wl.stop_reason == "duration reached"
    B = lambda tau: B0 * np.exp(-((tau - z0) / w) ** 2)      # u = τ − z0 (u̇ = 1, H0 = 0)
    with np.errstate(invalid="ignore"):   # SciPy's error norm meets 0/0 where B ≈ 0
        ref = solve_ivp(lambda tau, s: [s[1], B(tau) * s[0], s[3], -B(tau) * s[2]],
                        (0.0, 6.0), [x0, 0.0, y0, 0.0], method="DOP853", rtol=1e-13,
                        atol=1e-15, max_step=w / 10, dense_output=True)
    xr, vxr, yr, vyr = ref.sol(wl.tau)
    _rel(wl.x[:, 1], xr, what="x through the pulse")
    _rel(wl.x[:, 2], yr, what="y through the pulse")
    # The kick itself is resolved: thin-lens estimate ẋ = u̇ x0 ∫B du = x0 B0 w sqrt(π)
    # = 1.8e-3 (derived), exact up to the change of x during the crossing,
    # ~ẋ w / x0 ~ 1e-4 relative; 1e-3 allows that.
    assert wl.u[-1, 1] == pytest.approx(x0 * B0 * w * np.sqrt(PI), rel=1e-3)
    _abs(wl.u[:, 1], vxr, REL * np.abs(vxr).max(), "ẋ through the pulse")
    _abs(wl.u[:, 2], vyr, REL * np.abs(vyr).max(), "ẏ through the pulse")
    assert np.nanmax(wl.drift) < 1e-9


def test_geodesic_right_hand_side_matches_the_christoffel_symbols(geometry_cache, rng):
    # The integrator's own 50-row kernel (g and ∂g only) against the curvature
    # engine's Γ^a_bc (tested elsewhere against published forms): the
    # acceleration −Γ^a_bc u^b u^c must agree to round-off; 1e-11 relative to
    # the size of the terms |Γ||u|² is a few hundred ulps.
    from auditor.crew.worldline import _Rhs
    for stem in ("tanh_wall_bubble", "plane_wave_brinkmann"):
        geo = geometry_cache.sample(stem)
        metric = geo.metric
        x = np.column_stack([rng.uniform(-1, 1, 8), rng.uniform(-2, 2, 8),
                             rng.uniform(-2, 2, 8), rng.uniform(-2, 2, 8)])
        batch = geo.evaluate(x, metric.parameters, use_exclude=False)
        assert batch.ok.all()
        rhs = _Rhs(metric, geo.params(metric.parameters))
        for n in range(len(x)):
            u = rng.normal(size=4)
            got = rhs(0.0, np.concatenate([x[n], u]))
            gam = batch.curvature.christoffel[n]
            want = -np.einsum("abc,b,c->a", gam, u, u)
            size = np.einsum("abc,b,c->a", np.abs(gam), np.abs(u), np.abs(u)).max()
            _abs(got[:4], u, 0.0, "dx/dτ = u")
            _abs(got[4:], want, 1e-11 * size, f"{stem}: du/dτ")


def test_batched_validity_check_changes_nothing(schwarzschild, monkeypatch):
    # Checking CHECK_EVERY steps at once must give the path of checking each
    # step alone: same stop, same events, bit for bit (steps integrated past
    # the bad event are discarded).
    import auditor.crew.worldline as worldline
    text = SCHWARZSCHILD + """
[region]
t = 0.0
r = [3.0, 10.0]
theta = 1.5707963267948966
phi = 0.0
exclude = "3*M - r"
"""
    geo = Geometry(loads_metric(text))
    metric = with_crew(geo.metric, (0.0, 8.0, PI / 2, 0.0), (0.0, 0.0, 0.1), duration=100.0)
    batched = follow(metric, geo)
    monkeypatch.setattr(worldline, "CHECK_EVERY", 1)
    single = follow(metric, geo)
    assert batched.stop_reason == single.stop_reason and "user exclusion" in single.stop_reason
    assert batched.steps == single.steps
    np.testing.assert_array_equal(batched.x, single.x)
    np.testing.assert_array_equal(batched.u, single.u)
    np.testing.assert_array_equal(batched.step_tidal_g, single.step_tidal_g)


# -- the command line: exit codes 3, 0 and 2 ----------------------------------------

_CLI_SCHWARZSCHILD = """
name = "Schwarzschild, crew falling from r = 10 M"
coordinates = ["t", "r", "theta", "phi"]
[units]
length_m = {length_m}
[parameters]
M = 1.0
[metric.components]
"t t" = "-(1 - 2*M/r)"
"r r" = "1/(1 - 2*M/r)"
"theta theta" = "r**2"
"phi phi" = "r**2*sin(theta)**2"
[region]
t = 0.0
r = [3.0, 10.0]
theta = 1.5707963267948966
phi = 0.0
points = 6
[crew]
start = {{ t = 0.0, r = {r0}, theta = "pi/2", phi = 0.0 }}
velocity = {velocity}
duration = 20.0
"""

#: Keys of the crew object required by the contract (cli-contract.md, check JSON).
CREW_KEYS = ("proper_time", "coordinate_time", "stop_reason", "normalisation_drift",
             "final_coordinate_velocity", "final_eulerian_velocity", "peak_tidal_accel_g",
             "peak_proper_accel_g")


def _run_check(tmp_path, length_m, r0=10.0, velocity="[0.0, 0.0, 0.0]", json_to="-"):
    path = tmp_path / "metric.toml"
    path.write_text(_CLI_SCHWARZSCHILD.format(length_m=length_m, r0=r0, velocity=velocity))
    cmd = [sys.executable, "-m", "auditor", "check", str(path), "--quiet", "--json", json_to]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=120)


def test_cli_exit_3_when_the_crew_exceeds_its_tidal_limit(tmp_path):
    # Vacuum: every condition holds (saturated). With one coordinate unit = 1 m,
    # M = 1 m and the crew falling from r = 10 m, the tides 2M/r³ ~ 2e-3 m⁻² are
    # ~1e13 times the traveller criterion 5.4557e-17 m⁻² (published-checks §3).
    proc = _run_check(tmp_path, 1.0)
    assert proc.returncode == 3, proc.stderr
    out = json.loads(proc.stdout)
    assert all(out["conditions"][c]["holds"] for c in ("NEC", "WEC", "SEC", "DEC"))
    crew = out["crew"]
    for key in CREW_KEYS:
        assert key in crew, key
    assert len(crew["final_coordinate_velocity"]) == 3
    assert len(crew["final_eulerian_velocity"]) == 3
    assert crew["stop_reason"] == "duration reached" and crew["proper_time"] == 20.0
    assert crew["peak_proper_accel_g"] == 0.0      # a geodesic: no proper acceleration
    # Peak tide at the lowest point of the fall (cycloid, derived above).
    r_end = _cycloid_r(20.0, 10.0, 1.0)[0]
    expect = units.accel_g(units.tidal_accel_m_s2(2.0 / r_end**3, 1.0, 2.0))
    # r_end is right to 1e-8 (REL), the tide goes as r⁻³: 3e-8, so 1e-7.
    assert crew["peak_tidal_accel_g"] == pytest.approx(float(expect), rel=1e-7)
    assert crew["exceeds_tidal_limit"] is True
    assert crew["final_event"]["r"] == pytest.approx(r_end, rel=REL)
    schema = Path("/work/shared/design/schemas/check.schema.json")
    jsonschema = pytest.importorskip("jsonschema") if schema.exists() else None
    if jsonschema is not None:
        jsonschema.validate(out, json.loads(schema.read_text()))


def test_cli_exit_0_when_the_crew_stays_under_its_limit(tmp_path):
    # The same file with one coordinate unit = 1e13 m: tides scale as 1/L²,
    # ~3.6e-12 m/s² across 2 m, far under 1 g — so the verdict is exit 0.
    proc = _run_check(tmp_path, 1e13)
    assert proc.returncode == 0, proc.stderr
    crew = json.loads(proc.stdout)["crew"]
    # 3.6e-12 m/s² (above) is 4e-13 g; 1e-9 g is a loose upper bound.
    assert crew["exceeds_tidal_limit"] is False and crew["peak_tidal_accel_g"] < 1e-9


@pytest.mark.parametrize("r0, velocity, message", [
    (10.0, "[0.6, 0.8, 0.0]", "velocity"),      # |v| = 1
    (1.5, "[0.0, 0.0, 0.0]", "crew.start"),     # inside the horizon: no Eulerian observer
])
def test_cli_exit_2_on_bad_crew_input(tmp_path, r0, velocity, message):
    out = tmp_path / "out.json"
    proc = _run_check(tmp_path, 1.0, r0=r0, velocity=velocity, json_to=str(out))
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in proc.stderr, proc.stderr
    assert message in lines[0]
    assert not out.exists()        # exit 2 writes no output file (contract)
