"""The tidal map (E_ij = R_{i0j0} in an observer's orthonormal frame) against
published closed forms.

Reference values name their source: the section of
/work/shared/reference/published-checks.md ("the sheet") and the work it
cites, with the sheet's confidence (text / derived / memory).

Tolerance, unless a test says otherwise: relative 1e-10 plus an absolute
floor. The curvature is exact up to round-off, so 1e-10 leaves about five
orders of magnitude above double precision and still catches any formula or
sign error. The floor (tests/conftest.py) is machine epsilon times the size of
the terms that cancel in forming R_abcd times the weight of projecting four
indices on the tetrad; it only matters where the reference vanishes.
"""

from __future__ import annotations

import numpy as np
import pytest

from auditor import units
from auditor.crew import peak_accel_g, tidal_levels
from auditor.crew.tidal import tidal_eigen, tidal_tensor
from auditor.crew.worldline import comoving_frame
from auditor.frames import eulerian, static
from auditor.pointwise import analyse
from tests.conftest import assert_close, frame_floor
from tests.crew import (MORRIS_THORNE, PAINLEVE_GULLSTRAND, PI, SCHWARZSCHILD,
                         spherical_events)

# CODATA values through scipy.constants, as the package uses them (units.py).
C = units.C_M_S
G = units.G_SI
G_N = units.G_STANDARD_M_S2


def _curvature(geo, x, parameters=None):
    batch = geo.evaluate(x, parameters, use_exclude=False)
    assert batch.ok.all(), x[~batch.ok]
    return batch


def _schwarzschild_tides(M, r):
    """Sheet §4 (derived): radial −2M/r³, transverse +M/r³ twice, ascending."""
    return np.column_stack([-2 * M / r**3, M / r**3, M / r**3])


# -- §4 Schwarzschild: static frame ---------------------------------------------

@pytest.mark.parametrize("M", [1.0, 0.3, 7.5])
def test_schwarzschild_static_frame_tidal_eigenvalues(geometry_cache, rng, M):
    geo = geometry_cache.text(SCHWARZSCHILD)
    params = {"M": M}
    x = spherical_events(rng, 16, 2.05 * M, 40 * M)
    batch = _curvature(geo, x, params)
    fields = analyse(batch, "static")
    E, ok = static(batch.curvature.g)
    assert ok.all()
    # Sheet §4, static frame (derived): R_r̂t̂r̂t̂ = −2M/r³, R_θ̂t̂θ̂t̂ = R_φ̂t̂φ̂t̂ = +M/r³.
    assert_close(fields.tidal_eigenvalues, _schwarzschild_tides(M, x[:, 1]),
                 frame_floor(batch.curvature, E), what="Schwarzschild static tides")
    # Eigenvector of the stretch is the radial leg (frame component 1 of 3).
    assert_close(np.abs(fields.tidal_vectors[:, 0, 0]), 1.0, 0.0, rtol=1e-9,
                 what="radial stretch direction")
    # In Schwarzschild coordinates the Eulerian observer is the static one.
    eul = analyse(batch, "eulerian")
    assert_close(eul.tidal_eigenvalues, fields.tidal_eigenvalues,
                 frame_floor(batch.curvature, E), what="Eulerian = static")


def test_static_tides_undefined_inside_horizon(geometry_cache, rng):
    # Inside r = 2M, ∂_t is spacelike: no static observer, so the static tidal
    # map is NaN there (not a number that could be mistaken for a tide).
    geo = geometry_cache.text(SCHWARZSCHILD)
    x = spherical_events(rng, 5, 0.3, 1.9)
    fields = analyse(_curvature(geo, x), "static")
    assert np.isnan(fields.tidal_eigenvalues).all()


# -- §4 Schwarzschild: radially moving crews --------------------------------------

@pytest.mark.parametrize("M", [1.0, 2.5])
def test_schwarzschild_radial_freefall_tides(geometry_cache, rng, M):
    geo = geometry_cache.text(SCHWARZSCHILD)
    x = spherical_events(rng, 16, 2.05 * M, 40 * M)
    curv = _curvature(geo, x, {"M": M}).curvature
    r = x[:, 1]
    f = 1 - 2 * M / r
    # Radial geodesic from rest at infinity (Killing energy E = 1; any GR text,
    # e.g. Hartle 2003 ch. 9 — from memory): u^t = E/f, u^r = −sqrt(E² − f).
    u = np.zeros((len(r), 4))
    u[:, 0] = 1 / f
    u[:, 1] = -np.sqrt(2 * M / r)
    E = comoving_frame(curv.g, u)
    # the frame is orthonormal with e_0 = u
    eta = np.einsum("nam,nmv,nbv->nab", E, curv.g, E)
    assert_close(eta, np.broadcast_to(np.diag([-1.0, 1, 1, 1]), eta.shape), 1e-12,
                 what="comoving frame orthonormality")  # a few ulps of |E|²·|g| ~ 1/f
    assert_close(E[:, 0], u, 0.0, rtol=1e-15, what="e_0 = u")
    lam, _ = tidal_eigen(curv.riemann, E)
    # Sheet §4: unchanged by radial boosts (MTW §31.2 — memory), so −2M/r³, M/r³, M/r³.
    assert_close(lam, _schwarzschild_tides(M, r), frame_floor(curv, E),
                 what="free-fall tides (from rest at infinity)")

    # Any radial speed, in or out: Killing energy E_k ∈ (sqrt f, 3), sign random.
    Ek = rng.uniform(np.sqrt(f) * 1.0001, 3.0)
    sign = rng.choice([-1.0, 1.0], len(r))
    u[:, 0] = Ek / f
    u[:, 1] = sign * np.sqrt(Ek**2 - f)
    E = comoving_frame(curv.g, u)
    lam, _ = tidal_eigen(curv.riemann, E)
    # Boosts up to γ = E_k/sqrt(f) ~ 10 multiply the cancelling terms by γ²:
    # the floor (projection weight of four legs, computed from E) covers it.
    assert_close(lam, _schwarzschild_tides(M, r), frame_floor(curv, E),
                 what="radially boosted tides")


def test_tidal_map_depends_on_the_observer(geometry_cache):
    # Not every boost leaves the tides alone: a crew moving along φ̂ at speed v
    # relative to the static observer sees other eigenvalues (derived). With
    # μ = M/r³ the static-frame components are R_t̂r̂t̂r̂ = −2μ, R_t̂θ̂t̂θ̂ = R_t̂φ̂t̂φ̂ = μ
    # (sheet §4), R_r̂θ̂r̂θ̂ = R_r̂φ̂r̂φ̂ = −μ (sheet §3's R_θ̂r̂θ̂r̂ = (b′r − b)/(2r³) with
    # b = 2M) and R_θ̂φ̂θ̂φ̂ = 2μ (from R_θ̂θ̂ = 0 in vacuum). For u = γ(e_t̂ + v e_φ̂):
    # E_r̂r̂ = γ²(R_r̂t̂r̂t̂ + v² R_r̂φ̂r̂φ̂) = −2μ − 3μγ²v², E_θ̂θ̂ = γ²(μ + 2μv²) = μ + 3μγ²v²,
    # and the boost direction keeps μ (e_φ̂′ ∧ u = −e_t̂ ∧ e_φ̂); trace zero.
    geo = geometry_cache.text(SCHWARZSCHILD)
    M, r, v = 1.0, 6.0, 0.6
    x = np.array([[0.0, r, PI / 2, 0.0]])
    curv = _curvature(geo, x).curvature
    gam = 1 / np.sqrt(1 - v * v)
    Es, _ = static(curv.g)
    u = gam * (Es[:, 0] + v * Es[:, 3])
    lam, _ = tidal_eigen(curv.riemann, comoving_frame(curv.g, u))
    k = 3 * M / r**3 * gam**2 * v**2
    expected = np.sort([-2 * M / r**3 - k, M / r**3, M / r**3 + k])
    # rtol 1e-10 (module docstring); the values are ~M/r³ ~ 5e-3, so the 1e-16
    # absolute floor is a few ulps of them.
    assert_close(lam[0], expected, 1e-16, what="tangentially boosted tides")


# -- Painlevé–Gullstrand: Eulerian observers fall freely ---------------------------

def test_painleve_gullstrand_eulerian_tides(geometry_cache, rng):
    geo = geometry_cache.text(PAINLEVE_GULLSTRAND)
    M = 1.0
    # outside and inside the horizon: the PG slices are spacelike everywhere
    x = np.vstack([spherical_events(rng, 12, 2.2, 30.0), spherical_events(rng, 8, 0.2, 1.9)])
    batch = _curvature(geo, x)
    fields = analyse(batch, "eulerian")
    E, ok = eulerian(batch.curvature.g, batch.curvature.ginv)
    assert ok.all() and fields.frame_eulerian.all()
    # The Eulerian observers are radial free-fallers from rest at infinity
    # (n^μ = (1, −sqrt(2M/r), 0, 0), derived from lapse 1 and shift sqrt(2M/r)),
    # so sheet §4's −2M/r³, M/r³, M/r³ apply at every r.
    assert_close(E[:, 0, 1], -np.sqrt(2 * M / x[:, 1]), 0.0, rtol=1e-14,
                 what="PG Eulerian n^r")
    assert_close(fields.tidal_eigenvalues, _schwarzschild_tides(M, x[:, 1]),
                 frame_floor(batch.curvature, E), what="PG Eulerian tides")
    # Where both apply, the static frame of the PG chart agrees (same physics).
    out = x[:, 1] > 2.0
    st = analyse(batch, "static").tidal_eigenvalues
    assert_close(st[out], _schwarzschild_tides(M, x[out, 1]),
                 frame_floor(batch.curvature, E)[out] * 10, what="PG static tides")
    assert np.isnan(st[~out]).all()


# -- §4 Earth's surface in SI ----------------------------------------------------

def test_earth_surface_tidal_gradient(geometry_cache):
    # Sheet §4: M = 5.9722e24 kg, r = 6.371e6 m, 2GM/r³ = 3.0828e−6 s⁻² (derived).
    M_kg, r_m = 5.9722e24, 6.371e6
    length_m = 1.0
    M_geo = G * M_kg / C**2 / length_m       # geometric mass in units of length_m
    geo = geometry_cache.text(SCHWARZSCHILD)
    batch = _curvature(geo, np.array([[0.0, r_m / length_m, 1.1, 0.4]]), {"M": M_geo})
    lam = analyse(batch, "static").tidal_eigenvalues[0]
    radial_s2 = units.curvature_s2(lam[0], length_m)
    transverse_s2 = units.curvature_s2(lam[1:], length_m)
    # 5 significant figures published: half a unit in the last place is 1.6e-5
    # relative; 2e-5 allows that and nothing more.
    assert radial_s2 == pytest.approx(-3.0828e-6, rel=2e-5)
    assert transverse_s2 == pytest.approx([3.0828e-6 / 2] * 2, rel=2e-5)
    # Across a 2 m body: 2GM ℓ/r³ (sheet §4), in g.
    got = peak_accel_g(lam[None, :], length_m, 2.0)[0]
    assert got == pytest.approx(3.0828e-6 * 2.0 / G_N, rel=2e-5)


# -- §3 Morris–Thorne static frame ------------------------------------------------

def test_morris_thorne_static_frame_tidal_tensor(geometry_cache, rng):
    geo = geometry_cache.text(MORRIS_THORNE)
    b0, a = 1.0, 0.7
    x = spherical_events(rng, 16, 1.02 * b0, 8 * b0)
    r = x[:, 1]
    batch = _curvature(geo, x)
    curv = batch.curvature
    E, ok = static(curv.g)
    assert ok.all()
    # our b(r), Φ(r) and their derivatives
    b, db = b0**2 / r, -b0**2 / r**2
    dphi, ddphi = a * b0 / r**2, -2 * a * b0 / r**3
    # Sheet §3, static orthonormal frame (derived):
    # R_r̂t̂r̂t̂ = (1 − b/r)[Φ″ + Φ′² − (b′r − b)Φ′/(2r(r − b))],  R_θ̂t̂θ̂t̂ = (r − b)Φ′/r².
    Err = (1 - b / r) * (ddphi + dphi**2 - (db * r - b) * dphi / (2 * r * (r - b)))
    Ett = (r - b) * dphi / r**2
    expected = np.zeros((len(r), 3, 3))
    expected[:, 0, 0], expected[:, 1, 1], expected[:, 2, 2] = Err, Ett, Ett
    # static legs: Gram–Schmidt of ∂_r, ∂_θ, ∂_φ, i.e. r̂, θ̂, φ̂ in that order
    assert_close(tidal_tensor(curv.riemann, E), expected, frame_floor(curv, E),
                 what="Morris-Thorne static tidal tensor")
    fields = analyse(batch, "static")
    assert_close(fields.tidal_eigenvalues, np.sort(np.column_stack([Err, Ett, Ett]), axis=1),
                 frame_floor(curv, E), what="Morris-Thorne static eigenvalues")


def test_traveller_criterion_number():
    # Sheet §3 (derived number; the criterion is memory of Morris & Thorne 1988):
    # 1 g_⊕ across 2 m is |R_ĵ0̂ĵ0̂| = g_⊕/(c² · 2 m) = 5.4557e−17 m⁻².
    lam = np.array([[5.4557e-17, 0.0, -1e-20]])
    # 5 significant figures published: 2e-5 relative (half a unit is 9e-6).
    assert peak_accel_g(lam, 1.0, 2.0)[0] == pytest.approx(1.0, rel=2e-5)
    # The same criterion in coordinate units of 100 m: the eigenvalue scales as L².
    assert peak_accel_g(lam * 100.0**2, 100.0, 2.0)[0] == pytest.approx(1.0, rel=2e-5)
    # ≈ (1.35e10 cm)⁻² (sheet §3): three figures, 1.35 ± 0.005 → 0.74 % in the square.
    assert 5.4557e-17 == pytest.approx(1 / 1.35e8**2, rel=7.5e-3)
    # The default comfort level is that criterion, 1 g (Morris & Thorne 1988).
    levels = tidal_levels()
    assert levels[0].key == "comfort" and levels[0].value_g == 1.0
    assert "Morris & Thorne 1988" in levels[0].source and levels[0].load == "tidal"
    assert all(l.analogy for l in levels[1:])


# -- flat space in curvilinear coordinates --------------------------------------

@pytest.mark.parametrize("frame", ["static", "eulerian"])
def test_minkowski_spherical_tidal_map_vanishes(geometry_cache, rng, frame):
    geo = geometry_cache.sample("minkowski_spherical")
    x = spherical_events(rng, 24, 0.05, 50.0)
    batch = _curvature(geo, x)
    fields = analyse(batch, frame)
    E = fields.tetrad
    # Flat (textbook): every tidal eigenvalue is zero; only round-off remains,
    # bounded by the floor (terms like ½∂²g_θθ = 1 cancel against ΓΓ = 1).
    assert np.isfinite(fields.tidal_eigenvalues).all()
    assert_close(fields.tidal_eigenvalues, 0.0, frame_floor(batch.curvature, E),
                 what="Minkowski tides")
    # The floor above is conservative; the values themselves are round-off on
    # the chart's own curvature scale 1/r² (terms of size 1 cancelling, over
    # legs of length 1/r): a hundred ulps of it is ample.
    assert (np.abs(fields.tidal_eigenvalues) * x[:, 1:2] ** 2 <= 100 * np.finfo(float).eps).all()
