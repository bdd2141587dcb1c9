"""Proper acceleration of a crew held at fixed spatial coordinates (a station),
auditor.pointwise.station_acceleration, and the region audit's station and
tidal summaries.

A station is not on a geodesic: it feels a whole-body load, compared with the
sourced sustained-acceleration figures of published-checks §10 (screening
figures, not medical or flight-safety approval). References name their source;
"derived" marks derivations written out here.

Tolerance: station_acceleration is a handful of arithmetic operations on
exact first derivatives of g, so its relative error is a few ulps times the
conditioning of sqrt(1 − 2M/r) near the horizon (≤ 1/(1 − 2M/r) ≈ 40 for
r ≥ 2.05 M); 1e-11 relative leaves ample headroom and catches any error in
the formula.
"""

from __future__ import annotations

import numpy as np
import pytest

from auditor import units
from auditor.audit import audit
from auditor.crew.limits import CAUTION, WHOLE_BODY_LIMITS
from auditor.metric import loads_metric
from auditor.pointwise import station_acceleration
from tests.conftest import assert_close
from tests.crew import MORRIS_THORNE, PI, SCHWARZSCHILD, spherical_events

RTOL = 1e-11  # see module docstring

C = units.C_M_S
G = units.G_SI


def _curv(geo, x, parameters=None):
    batch = geo.evaluate(x, parameters, use_exclude=False)
    assert batch.ok.all(), x[~batch.ok]
    return batch.curvature


@pytest.mark.parametrize("M", [1.0, 0.2, 6.0])
def test_schwarzschild_static_observer(geometry_cache, rng, M):
    geo = geometry_cache.text(SCHWARZSCHILD)
    x = spherical_events(rng, 20, 2.05 * M, 60 * M)
    r = x[:, 1]
    a = station_acceleration(_curv(geo, x, {"M": M}))
    # Static observer in Schwarzschild: a = M / (r² sqrt(1 − 2M/r)) (common
    # textbook result, e.g. Hartle 2003 ch. 9 or Carroll 2004 §5.4 — from memory).
    assert_close(a, M / (r**2 * np.sqrt(1 - 2 * M / r)), 0.0, rtol=RTOL,
                 what="Schwarzschild station acceleration")


def test_no_station_inside_the_horizon(geometry_cache, rng):
    # For r < 2M, ∂_t is spacelike: nobody can stay at fixed r; NaN, not a number.
    geo = geometry_cache.text(SCHWARZSCHILD)
    a = station_acceleration(_curv(geo, spherical_events(rng, 6, 0.2, 1.95)))
    assert np.isnan(a).all()


def test_earth_surface_station(geometry_cache):
    # Published-checks §4: M = 5.9722e24 kg, r = 6.371e6 m. Derived in SI from the
    # textbook formula: a = GM / (r² sqrt(1 − 2GM/(r c²))) ≈ 9.820 m/s² (Newton's
    # GM/r², the relativistic factor differs from 1 by 7e-10).
    M_kg, r_m, length_m = 5.9722e24, 6.371e6, 1.0
    geo = geometry_cache.text(SCHWARZSCHILD)
    curv = _curv(geo, np.array([[0.0, r_m, 1.2, 0.3]]), {"M": G * M_kg / C**2 / length_m})
    got = units.proper_accel_m_s2(station_acceleration(curv), length_m)[0]
    expected = G * M_kg / (r_m**2 * np.sqrt(1 - 2 * G * M_kg / (r_m * C**2)))
    assert got == pytest.approx(expected, rel=RTOL)
    assert got == pytest.approx(9.820, abs=5e-4)       # 4 figures, derived above
    assert units.accel_g(got) == pytest.approx(1.0014, abs=1e-4)


def test_morris_thorne_station(geometry_cache, rng):
    # Static observer of ds² = −e^{2Φ}dt² + dr²/(1 − b/r) + r²dΩ²: derived from
    # a = ∂_r ln sqrt(−g_tt) / sqrt(g_rr) = Φ′ sqrt(1 − b/r); with our Φ = −a b0/r
    # (tests/crew/__init__.py) Φ′ = a b0 / r². It vanishes at the throat.
    geo = geometry_cache.text(MORRIS_THORNE)
    b0, a = 1.0, 0.7
    x = spherical_events(rng, 16, 1.001 * b0, 10 * b0)
    r = x[:, 1]
    got = station_acceleration(_curv(geo, x))
    assert_close(got, a * b0 / r**2 * np.sqrt(1 - b0**2 / r**2), 0.0, rtol=RTOL,
                 what="Morris-Thorne station acceleration")


def test_time_dependent_lapse(geometry_cache, rng):
    # ds² = −N² dt² + dx² + dy² + dz² with N = (1 + α x) e^{κ t}: zero shift, so
    # the station is the Eulerian observer, whose acceleration is D ln N
    # (Gourgoulhon 2012, 3+1 Formalism, ch. 3 — from memory): |a| = α/(1 + α x),
    # independent of t. Rindler (κ = 0) is the textbook special case. The
    # ∂_t u^t term of station_acceleration must cancel the Γ^t_tt = κ part.
    geo = geometry_cache.text("""
name = "Rindler with a time-dependent lapse"
coordinates = ["t", "x", "y", "z"]
[parameters]
alpha = 0.3
kappa = 0.4
[metric]
line_element = "-((1 + alpha*x)*exp(kappa*t))**2*dt**2 + dx**2 + dy**2 + dz**2"
""")
    x = np.column_stack([rng.uniform(-2, 2, 12), rng.uniform(-2, 5, 12),
                         rng.uniform(-3, 3, 12), rng.uniform(-3, 3, 12)])
    got = station_acceleration(_curv(geo, x))
    assert_close(got, 0.3 / (1 + 0.3 * x[:, 1]), 0.0, rtol=RTOL, what="lapse gradient")


def test_rotating_frame_station(geometry_cache, rng):
    # Flat space in coordinates rotating at ω: ds² = −dt² + dρ² + ρ²(dφ + ω dt)² + dz².
    # A station at fixed (ρ, φ) moves on a circle at speed v = ωρ: its proper
    # acceleration is the centripetal γ² v²/ρ = γ² ω² ρ, γ = (1 − ω²ρ²)^{-1/2}
    # (special-relativistic circular motion, e.g. Rindler 2006 — from memory).
    # This exercises the off-diagonal g_tφ.
    geo = geometry_cache.text("""
name = "Rotating frame"
coordinates = ["t", "rho", "phi", "z"]
[parameters]
w = 0.2
[metric]
line_element = "-dt**2 + drho**2 + rho**2*(dphi + w*dt)**2 + dz**2"
""")
    w = 0.2
    rho = rng.uniform(0.1, 4.5, 12)      # inside the light cylinder ρ < 1/ω = 5
    x = np.column_stack([rng.uniform(-3, 3, 12), rho, rng.uniform(-PI, PI, 12),
                         rng.uniform(-3, 3, 12)])
    got = station_acceleration(_curv(geo, x))
    assert_close(got, w**2 * rho / (1 - w**2 * rho**2), 0.0, rtol=RTOL,
                 what="rotating station")


def test_minkowski_spherical_station_is_inertial(geometry_cache, rng):
    # Flat space, static chart: stations are inertial, a = 0 (to round-off of
    # Γ^r_tt = 0, which is exact here).
    geo = geometry_cache.sample("minkowski_spherical")
    got = station_acceleration(_curv(geo, spherical_events(rng, 12, 0.1, 40.0)))
    assert np.isfinite(got).all() and (got <= 1e-15).all()


# -- the region audit's summaries ---------------------------------------------------

#: Solar-mass-free units chosen so that station loads straddle the sourced
#: whole-body figures: with M = 1 and L = 1.7648e14 m, a(r = 3M) ≈ 10 g.
_AUDITED = SCHWARZSCHILD.replace('name = "Schwarzschild"', 'name = "Schwarzschild, audited"') + """
[units]
length_m = 1.7648e14
[region]
t = 0.0
r = [3.0, 12.0]
theta = 1.0
phi = 0.0
points = 10
[crew]
frame = "static"
body_length_m = 2.0
"""


@pytest.fixture(scope="module")
def audited(geometry_cache):
    metric = loads_metric(_AUDITED)
    return audit(metric, geometry=geometry_cache.text(_AUDITED), refine=False, crew=False,
                 progress=False)


def test_region_station_summary(audited):
    L = audited.metric.length_m
    r = np.linspace(3.0, 12.0, 10)
    # station accelerations on the grid (textbook formula above), in g
    a_g = units.accel_g(units.proper_accel_m_s2(1 / (r**2 * np.sqrt(1 - 2 / r)), L))
    assert 5.0 < a_g[0] < 20.0 < units.accel_g(units.proper_accel_m_s2(1.0, L))  # straddles
    st = audited.station
    assert st.peak_accel_g == pytest.approx(a_g[0], rel=RTOL)
    assert st.peak_point["r"] == pytest.approx(3.0)
    assert st.min_accel_g == pytest.approx(a_g[-1], rel=RTOL)
    assert st.undefined_points == 0
    for lim in WHOLE_BODY_LIMITS:
        assert st.fraction_above[lim.key] == pytest.approx(np.mean(a_g > lim.value_g))
    assert 0.0 < st.fraction_above["sustained_hour"] < 1.0    # the test can tell
    out = st.to_json()
    assert out["caution"] == CAUTION
    assert {l["key"] for l in out["levels"]} == {l.key for l in WHOLE_BODY_LIMITS}


def test_region_tidal_summary(audited):
    # Static-frame tides (published-checks §4): the largest is the radial
    # stretch 2M/r³ at the smallest r, across the 2 m body, in g.
    L = audited.metric.length_m
    t = audited.tidal
    assert t.frame == "static"
    peak = units.accel_g(units.tidal_accel_m_s2(2 / 3.0**3, L, 2.0))
    # 1e-10: round-off only (see test_tidal's module docstring)
    assert t.peak_accel_g == pytest.approx(float(peak), rel=1e-10)
    assert t.peak_point["r"] == pytest.approx(3.0)
    assert t.peak_eigenvalues == pytest.approx([-2 / 27, 1 / 27, 1 / 27], rel=1e-10)


def test_whole_body_limits_carry_their_sources():
    # Published-checks §10 (text): Dole 1964 citing Miller et al. 1958 — about
    # 5 g for 2 min, 4 g for 8 min, 3 g up to an hour (+Gz, seated, no suit);
    # Project Mercury specification (1958): abort peaks of about 20 g.
    by_key = {l.key: l for l in WHOLE_BODY_LIMITS}
    assert by_key["sustained_2min"].value_g == 5.0
    assert by_key["sustained_8min"].value_g == 4.0
    assert by_key["sustained_hour"].value_g == 3.0
    assert by_key["abort_peak"].value_g == 20.0
    for lim in WHOLE_BODY_LIMITS:
        assert lim.load == "whole-body" and lim.unit == "g" and lim.source
    assert all("Dole 1964" in by_key[k].source
               for k in ("sustained_2min", "sustained_8min", "sustained_hour"))
    assert "Mercury" in by_key["abort_peak"].source
    assert "not medical or flight-safety approval" in CAUTION
