"""The curvature engine against a naive re-implementation and against sympy.diffgeom.

References (tests/reference/naive.py): plain SymPy index loops from the MTW
formulas (published-checks.md, "Conventions"; Misner, Thorne & Wheeler 1973),
and SymPy's own ``sympy.diffgeom.metric_to_Riemann_components``; both are
evaluated at 30 digits, so the reference carries no double-precision
round-off. The metrics are written here by hand in SymPy, independently of the
metric-file parser; the package reads the same spacetime from its file.

Tolerance: relative 1e-10, plus the round-off floor of tests/conftest.py
(machine epsilon times ``Curvature.scale`` times the contraction weight) where
a component is (near) zero. Events are random; each test prints its seed.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp

from tests.conftest import (EPS, FLOOR_FACTOR, assert_close, einstein_floor, inverse_weight,
                            kretschmann_floor, ricci_floor, riemann_floor, scalar_floor)
from tests.reference.naive import Evaluator, diffgeom_curvature, naive_curvature

PI = np.pi
t, x, y, z = sp.symbols("t x y z", real=True)
r, th, ph = sp.symbols("r theta phi", real=True)


def christoffel_floor(curv):
    """Γ^a_bc = g^ad Γ_dbc: a few ulps of Σ|g^ad| |∂g| (three terms of ∂g each)."""
    dgmax = np.abs(curv.dg).reshape(len(curv.dg), -1).max(axis=1)
    return FLOOR_FACTOR * EPS * inverse_weight(curv.ginv) * 1.5 * dgmax


# -- the spacetimes ---------------------------------------------------------------

def _schwarzschild():
    M = sp.Symbol("M", real=True)
    g = sp.diag(-(1 - 2 * M / r), 1 / (1 - 2 * M / r), r**2, r**2 * sp.sin(th)**2)
    return g, (t, r, th, ph), (M,), {}


NONDIAG_TOML = """
name = "Non-diagonal test metric"
coordinates = ["t", "x", "y", "z"]
[parameters]
a = 0.3
b = 0.4
c = 0.5
[metric]
line_element = "-(1 + a*x**2)*dt**2 + 2*b*y*dt*dx + dx**2 + dy**2 + exp(c*x)*dz**2"
"""


def _nondiagonal():
    """Our own test metric (no source needed: both sides compute the same g):
    ds² = −(1 + a x²) dt² + 2 b y dt dx + dx² + dy² + e^{cx} dz², Lorentzian
    everywhere (det of the t-x block = −(1 + a x²) − b² y² < 0)."""
    a, b, c = sp.symbols("a b c", real=True)
    g = sp.Matrix([[-(1 + a * x**2), b * y, 0, 0], [b * y, 1, 0, 0], [0, 0, 1, 0],
                   [0, 0, 0, sp.exp(c * x)]])
    return g, (t, x, y, z), (a, b, c), {}


def _bubble():
    """Alcubierre 1994 (published-checks §1): the metric with the profile as an
    undefined function F(t,x,y,z), so the naive tensors stay small; F and its
    derivatives are filled in from the explicit tanh profile at each event."""
    v, R, sigma = sp.symbols("v R sigma", real=True)
    F = sp.Function("F")(t, x, y, z)
    g = sp.Matrix([[-1 + v**2 * F**2, -v * F, 0, 0], [-v * F, 1, 0, 0], [0, 0, 1, 0],
                   [0, 0, 0, 1]])
    rs = sp.sqrt((x - v * t)**2 + y**2 + z**2)
    f = (sp.tanh(sigma * (rs + R)) - sp.tanh(sigma * (rs - R))) / (2 * sp.tanh(sigma * R))
    return g, (t, x, y, z), (v, R, sigma), {F: f}


def _events(rng, name, n):
    if name == "schwarzschild":
        return np.column_stack([rng.uniform(-3, 3, n), rng.uniform(2.3, 15, n),
                                rng.uniform(0.2, PI - 0.2, n), rng.uniform(-PI, PI, n)])
    if name == "nondiagonal":
        return rng.uniform(-2, 2, (n, 4))
    # bubble: the interior, the wall and the tail, 0.05 ≤ r_s ≤ 2.3, at t ≠ 0 too
    # (fixed points off the wall: test_bubble_precision_off_the_wall)
    tt = rng.uniform(-1, 1, n)
    d = rng.normal(size=(n, 3))
    d *= (rng.uniform(0.05, 2.3, n) / np.linalg.norm(d, axis=1))[:, None]
    return np.column_stack([tt, 0.5 * tt + d[:, 0], d[:, 1], d[:, 2]])


CASES = {
    "schwarzschild": (_schwarzschild, lambda cache: cache.sample("schwarzschild")),
    "nondiagonal": (_nondiagonal, lambda cache: cache.text(NONDIAG_TOML)),
    "bubble": (_bubble, lambda cache: cache.sample("tanh_wall_bubble")),
}


@pytest.fixture(scope="module")
def naive_tensors():
    """Naive symbolic tensors per case, built once per module (a few seconds each)."""
    built = {}

    def get(name):
        if name not in built:
            g, coords, params, functions = CASES[name][0]()
            nc = naive_curvature(g, coords)
            trees = {"g": nc.g, "christoffel": nc.christoffel, "riemann_up": nc.riemann_up,
                     "ricci": nc.ricci, "ricci_scalar": nc.ricci_scalar,
                     "einstein": nc.einstein, "kretschmann": nc.kretschmann}
            syms = list(coords) + list(params)
            built[name] = (params, Evaluator(trees, syms, functions, cse=True))
        return built[name]
    return get


@pytest.mark.parametrize("name", list(CASES))
def test_against_naive_loops(name, naive_tensors, geometry_cache, rng):
    params, evaluator = naive_tensors(name)
    geo = CASES[name][1](geometry_cache)
    pnames = [str(p) for p in params]
    assert list(geo.metric.parameters) == pnames
    pvals = [geo.metric.parameters[p] for p in pnames]
    ev = _events(rng, name, 5)
    curv = geo.evaluate(ev, use_exclude=False).curvature
    assert curv is not None and len(curv) == len(ev)
    refs = [evaluator(list(point) + pvals) for point in ev]
    ref = {k: np.array([r_[k] for r_ in refs]) for k in refs[0]}
    gam, ric, rs, ein, kr = (ref[k] for k in ("christoffel", "ricci", "ricci_scalar",
                                                "einstein", "kretschmann"))
    # R_abcd = g_ae R^e_bcd, lowered in double precision from the 30-digit values
    # (adds at most a few ulps of Σ|g_ae R^e_bcd|, far below the floor)
    riem = np.einsum("nae,nebcd->nabcd", ref["g"], ref["riemann_up"])
    assert_close(curv.g, ref["g"], FLOOR_FACTOR * EPS, what=f"{name} g_ab")
    assert_close(curv.christoffel, gam, christoffel_floor(curv), what=f"{name} Γ^a_bc")
    assert_close(curv.riemann, riem, riemann_floor(curv), what=f"{name} R_abcd")
    assert_close(curv.ricci, ric, ricci_floor(curv), what=f"{name} R_ab")
    assert_close(curv.ricci_scalar, rs, scalar_floor(curv), what=f"{name} R")
    assert_close(curv.einstein, ein, einstein_floor(curv), what=f"{name} G_ab")
    assert_close(curv.kretschmann, kr, kretschmann_floor(curv), what=f"{name} K")


@pytest.mark.parametrize("name", ["schwarzschild", "nondiagonal"])
def test_against_sympy_diffgeom(name, geometry_cache, rng):
    g, coords, params, _ = CASES[name][0]()
    riem_up, ricci = diffgeom_curvature(g, coords)
    syms = list(coords) + list(params)
    evaluator = Evaluator({"riemann_up": riem_up, "ricci": ricci}, syms, cse=True)
    geo = CASES[name][1](geometry_cache)
    pvals = [geo.metric.parameters[str(p)] for p in params]
    ev = _events(rng, name, 4)
    curv = geo.evaluate(ev, use_exclude=False).curvature
    refs = [evaluator(list(p) + pvals) for p in ev]
    riem_ref = np.array([r_["riemann_up"] for r_ in refs])     # R^a_bcd
    ricci_ref = np.array([r_["ricci"] for r_ in refs])
    # the package stores R_abcd; raise the first index: R^a_bcd = g^ae R_ebcd
    riem_up_pkg = np.einsum("nae,nebcd->nabcd", curv.ginv, curv.riemann)
    rowsum = np.abs(curv.ginv).sum(axis=2).max(axis=1)
    assert_close(riem_up_pkg, riem_ref, riemann_floor(curv) * rowsum,
                 what=f"{name} R^a_bcd vs sympy.diffgeom")
    assert_close(curv.ricci, ricci_ref, ricci_floor(curv), what=f"{name} R_ab vs sympy.diffgeom")


def test_naive_reference_sees_a_sign_error():
    """The reference is not vacuous: Schwarzschild has R^r_trt = −2M(r − 2M)/r⁴
    (derived by hand from MTW's formula: R^r_trt = ∂_r Γ^r_tt + Γ^r_rr Γ^r_tt − Γ^r_tt Γ^t_tr),
    which is non-zero and changes sign if the two derivative terms are swapped
    (lowered and put in the static frame it is the sheet's §4 R_r̂t̂r̂t̂ = −2M/r³)."""
    g, coords, params, _ = _schwarzschild()
    nc = naive_curvature(g, coords, kretschmann=False)
    M = params[0]
    assert sp.simplify(nc.riemann_up[1][0][1][0] + 2 * M * (r - 2 * M) / r**4) == 0
    assert sp.simplify(sum(nc.ricci[a][a] for a in range(4))) == 0   # vacuum (common practice)


@pytest.mark.parametrize("where", ["tail", "centre"])
def test_bubble_precision_off_the_wall(where, naive_tensors, geometry_cache):
    """Off the wall the curvature is small but well defined; the package must
    still meet rtol 1e-10 + its own round-off floor there (reference: the naive
    30-digit evaluation of the sheet §1 metric). Differentiating tanh as
    1 − tanh² fails here: its absolute error eps is a relative error
    ~eps·e^{2|a|}, ~3e-9 at σ(r_s − R) = 9.6 and ~1e-9 at r_s = 0.05."""
    params, evaluator = naive_tensors("bubble")
    geo = CASES["bubble"][1](geometry_cache)
    pvals = [geo.metric.parameters[str(p)] for p in params]
    R, sigma = geo.metric.parameters["R"], geo.metric.parameters["sigma"]
    # tail: σ(r_s − R) = 9.6, inside the file's region box; centre: r_s = 0.05
    d = R + 9.6 / sigma if where == "tail" else 0.05
    ev = np.array([[0.2, 0.1 + 0.6 * d, 0.8 * d, 0.0]])      # v t = 0.1: r_s = d
    curv = geo.evaluate(ev).curvature
    ref = evaluator(list(ev[0]) + pvals)
    riem = np.einsum("ae,ebcd->abcd", ref["g"], ref["riemann_up"])[None]
    assert_close(curv.riemann, riem, riemann_floor(curv), what=f"bubble R_abcd ({where})")
    assert_close(curv.einstein, ref["einstein"][None], einstein_floor(curv),
                 what=f"bubble G_ab ({where})")
