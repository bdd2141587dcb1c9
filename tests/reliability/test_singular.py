"""Singular spacetimes: audited where they can be, skipped where they cannot,
counted by reason; verdicts from valid events only; no silent NaN.

Cases (each a region that deliberately crosses the bad set, with the bad
events exactly on the grid):

- Schwarzschild through its horizon, with r = 0 and the polar axis on the grid
  (K. Schwarzschild 1916; published-checks §4). r = 0: g is not finite;
  r = 2M: g_tt = 0 and g_rr = 1/0 (singular); θ = 0, π: g_φφ = r² sin²θ = 0 to
  double precision (degenerate). Inside the horizon (0 < r < 2M) g^tt =
  −1/(1 − 2M/r) > 0, the t = const slice is timelike, and the conditions are
  still decided there in the principal frame (cli-contract, "Verdict
  semantics"); the Eulerian energy density is masked there. Vacuum: every
  audited margin is within its tolerance, inside the horizon too.
- A Morris–Thorne wormhole in its r chart, b(r) = b0²/r and Φ = 0 (Morris &
  Thorne 1988; published-checks §3): g_rr = 1/(1 − b0²/r²) is infinite at the
  throat r = b0 (singular) and negative inside it (not Lorentzian). Outside, the
  static-frame formulas of §3 give ρ = b'/(8πr²) = −b0²/(8πr⁴), p_r = −b/(8πr³) =
  −b0²/(8πr⁴) and p_t = b0²/(8πr⁴) (derived), so the NEC margin
  min_k T(k,k) = ρ + p_r = −b0²/(4πr⁴): a known violation at every audited event.
- Flat FLRW dust from the big bang, a = t^(2/3) (Friedmann 1922; published-checks
  §7): at t = 0 the spatial metric vanishes and ȧ is infinite (left out). For
  t > 0, 8πρ = 3ȧ²/a² gives ρ = 1/(6πt²), p = 0: NEC, WEC and DEC margins ρ and
  the SEC margin ρ/2 (derived; u = n minimises (T − ½ tr T g)(u,u) = ρ/2 + ρ|w|²/2).
- Minkowski with a null first coordinate u = t − x (ds² = −du² − 2 du dx + dy² +
  dz²; common practice): g^uu = 0 everywhere, no event has a spacelike slice.
- Regions wholly inside an excluded zone: exit 2, one line, no output file.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from auditor.audit import audit
from auditor.errors import NoAuditablePointError
from auditor.metric import loads_metric
from auditor.pointwise import CONDITIONS

from tests.reliability import (assert_one_line_error, load_json_strict, null_paths,
                               run_inprocess)

EPS = np.finfo(float).eps

SCHWARZSCHILD = """name = "Schwarzschild through the horizon"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
M = 1.0
[metric.components]
"t t" = "-(1 - 2*M/r)"
"r r" = "1/(1 - 2*M/r)"
"theta theta" = "r**2"
"phi phi" = "r**2*sin(theta)**2"
[region]
t = 0.0
r = [0.0, 4.0]
theta = [0.0, 3.141592653589793]
phi = [0.0, 3.0]
points = { r = 17, theta = 9, phi = 3 }
"""
WORMHOLE = """name = "Morris-Thorne wormhole, r chart, b = b0**2/r"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
b0 = 1.0
[metric.components]
"t t" = "-1"
"r r" = "1/(1 - b0**2/r**2)"
"theta theta" = "r**2"
"phi phi" = "r**2*sin(theta)**2"
[region]
t = 0.0
r = [0.5, 3.0]
theta = [0.5, 2.5]
phi = 0.0
points = { r = 11, theta = 5 }
"""
FLRW_DUST = """name = "Flat FLRW dust from the big bang"
coordinates = ["t", "x", "y", "z"]
[define]
a = "t**(2/3)"
[metric]
line_element = "-dt**2 + a**2*(dx**2 + dy**2 + dz**2)"
[region]
t = [0.0, 2.0]
x = [-1.0, 1.0]
y = 0.0
z = 0.0
points = { t = 9, x = 5 }
"""
NULL_CHART = """name = "Minkowski, null first coordinate"
coordinates = ["u", "x", "y", "z"]
[metric]
line_element = "-du**2 - 2*du*dx + dy**2 + dz**2"
[region]
u = 0.0
x = [-1.0, 1.0]
y = [-1.0, 1.0]
z = [-1.0, 1.0]
points = 4
"""


def events_of(result):
    """Grid events (N, 4), in the order of the maps."""
    return result.grid.events(0, result.points)


def assert_no_silent_nan(result):
    """Margins and tolerances are finite at every audited event and NaN at every
    excluded one; verdicts count audited events only."""
    ok = result.maps["reason"] == 0
    assert result.audited_points == int(ok.sum()) > 0
    for c in CONDITIONS:
        m, tol = result.maps["margin_" + c], result.maps["tol_" + c]
        assert np.isfinite(m[ok]).all() and np.isfinite(tol[ok]).all(), c
        assert (tol[ok] >= 0).all(), c
        assert np.isnan(m[~ok]).all(), f"{c}: a margin at an excluded event"
        s = result.conditions[c]
        assert isinstance(s.holds, bool)
        assert s.holds == bool((m[ok] >= -tol[ok]).all())
        assert math.isfinite(s.min_margin) and s.min_margin == m[ok].min()
        assert s.violating_fraction == pytest.approx(np.count_nonzero(m[ok] < -tol[ok]) / ok.sum())


def assert_worst_points_are_audited(result):
    ok_events = {tuple(e) for e in events_of(result)[result.maps["reason"] == 0]}
    for c in CONDITIONS:
        wp = result.conditions[c].worst_point
        assert tuple(wp[n] for n in result.metric.coordinates) in ok_events, (c, wp)


def check_json(path, spatial_axes: int):
    """Strict JSON (no NaN literal); verdicts are booleans; nulls only where a
    value does not apply or is masked."""
    doc = load_json_strict(path)
    for c in CONDITIONS:
        cond = doc["conditions"][c]
        assert isinstance(cond["holds"], bool)
        for key in ("min_margin", "saturated_fraction", "violating_fraction"):
            assert isinstance(cond[key], float) and math.isfinite(cond[key]), (c, key)
    for key in ("points", "audited_points", "excluded_points", "non_eulerian_points"):
        assert isinstance(doc[key], int)
    allowed = ("tidal.", "station.", "energy.")
    for p in null_paths(doc):
        region_only = spatial_axes < 3 and any(p.endswith(s) for s in (".volume", ".eulerian_energy")) \
            and ".regions[" in p
        assert p.startswith(allowed) or ".refined_" in p or region_only, f"null at {p}"
    return doc


# -- Schwarzschild --------------------------------------------------------------------
@pytest.fixture(scope="module")
def schwarzschild():
    return audit(loads_metric(SCHWARZSCHILD, path="schwarzschild.toml"), progress=False)


def test_schwarzschild_exclusions_are_the_singular_sets(schwarzschild):
    res = schwarzschild
    ev = events_of(res)
    r, theta = ev[:, 1], ev[:, 2]
    # Exactly on the grid: r = 0 and r = 2M (step 0.25); θ = 0 and π, where
    # sin²θ is 0 or 1.5e-32 against ≥ sin²(π/8) = 0.146 at every other grid angle.
    singular = (r == 0.0) | (r == 2.0)
    degenerate = ~singular & (np.sin(theta) ** 2 < 1e-30)
    assert singular.sum() == 2 * 9 * 3 and degenerate.sum() == 15 * 2 * 3
    expect = {"singular": int(singular.sum()), "degenerate": int(degenerate.sum()),
              "not_lorentzian": 0, "non_positive_lapse": 0, "user_exclusion": 0}
    assert res.excluded_by_reason == expect
    codes = res.maps["reason"]
    assert (codes[singular] == 1).all() and (codes[degenerate] == 2).all()
    assert (codes[~singular & ~degenerate] == 0).all()


def test_inside_the_horizon_is_audited_in_the_principal_frame(schwarzschild):
    res = schwarzschild
    ev = events_of(res)
    ok = res.maps["reason"] == 0
    inside = ok & (ev[:, 1] < 2.0)
    assert res.non_eulerian_points == int(inside.sum()) > 0
    assert not res.maps["eulerian"][inside].any() and res.maps["eulerian"][ok & ~inside].all()
    # Eulerian-only outputs are masked inside, defined outside.
    assert np.isnan(res.maps["rho"][inside]).all()
    assert np.isfinite(res.maps["rho"][ok & ~inside]).all()
    # Vacuum (published-checks §4): every audited margin within its tolerance,
    # in either frame; the verdicts hold.
    for c in CONDITIONS:
        m, tol = res.maps["margin_" + c], res.maps["tol_" + c]
        assert (np.abs(m[ok]) <= tol[ok]).all(), c
        assert res.conditions[c].holds
    # Outside the horizon ρ_E = 0 within its round-off.
    out = ok & ~inside
    assert (np.abs(res.maps["rho"][out]) <= res.maps["tol_T"][out]).all()


def test_schwarzschild_results_use_valid_events_only(schwarzschild):
    assert_no_silent_nan(schwarzschild)
    assert_worst_points_are_audited(schwarzschild)
    assert schwarzschild.exit_code() == 0


def test_schwarzschild_json_has_no_nan_and_boolean_verdicts(tmp_path, capsys):
    path = tmp_path / "schwarzschild.toml"
    path.write_text(SCHWARZSCHILD)
    code, out, err = run_inprocess(["check", path, "--quiet", "--json", tmp_path / "a.json"],
                                   capsys)
    assert code == 0, err
    doc = check_json(tmp_path / "a.json", spatial_axes=3)
    # The grid of SCHWARZSCHILD: r = 0 and r = 2M on 9 θ x 3 φ samples (2·27 =
    # 54 singular); θ = 0 and π at the 15 other radii and 3 φ (2·15·3 = 90 degenerate).
    assert doc["excluded_by_reason"]["singular"] == 54
    assert doc["excluded_by_reason"]["degenerate"] == 90
    assert doc["non_eulerian_points"] > 0


# -- wormhole throat --------------------------------------------------------------------
@pytest.fixture(scope="module")
def wormhole():
    return audit(loads_metric(WORMHOLE, path="wormhole.toml"), progress=False)


def test_wormhole_throat_and_interior_are_excluded_by_reason(wormhole):
    res = wormhole
    r = events_of(res)[:, 1]
    b0 = 1.0
    expect = {"singular": int((r == b0).sum()), "degenerate": 0,
              "not_lorentzian": int((r < b0).sum()), "non_positive_lapse": 0,
              "user_exclusion": 0}
    assert expect["singular"] == 5 and expect["not_lorentzian"] == 10
    assert res.excluded_by_reason == expect


def test_wormhole_nec_margin_is_the_published_value(wormhole):
    res = wormhole
    ok = res.maps["reason"] == 0
    r = events_of(res)[ok, 1]
    exact = -1.0 / (4 * np.pi * r**4)      # ρ + p_r, Morris & Thorne 1988 (§3, derived)
    for c in ("NEC", "WEC", "DEC", "SEC"):
        # For this stress tensor every condition's worst observer is the radial
        # null direction (ρ + p_r = ρ + p_r, ρ + p_t = 0): margin ρ + p_r (derived).
        m, tol = res.maps["margin_" + c][ok], res.maps["tol_" + c][ok]
        # The kernels are exact up to round-off: tolerance plus 1e-12 relative.
        np.testing.assert_array_less(np.abs(m - exact), tol + 1e-12 * np.abs(exact))
        assert (m < -tol).all() and not res.conditions[c].holds
    assert_no_silent_nan(res)
    assert_worst_points_are_audited(res)
    assert res.exit_code() == 1


def test_wormhole_margins_stay_honest_next_to_the_throat(wormhole):
    """Approaching the coordinate singularity the round-off grows like
    1/(r − b0); the reported tolerance must grow with it and keep bounding the error."""
    from auditor.geometry import Geometry
    from auditor.pointwise import analyse
    geo = Geometry(wormhole.metric)
    r = 1.0 + np.array([1e-9, 1e-6, 1e-3, 0.1, 1.0])
    x = np.stack([0 * r, r, np.full_like(r, 1.2), 0 * r], axis=1)
    batch = geo.evaluate(x)
    assert batch.ok.all()
    f = analyse(batch)
    exact = -1.0 / (4 * np.pi * r**4)
    err = np.abs(f.margins["NEC"] - exact)
    assert (err <= f.tolerances["NEC"] + 1e-12 * np.abs(exact)).all(), (err, f.tolerances["NEC"])
    # ... while staying far below the signal: the violation is still decided.
    assert (f.tolerances["NEC"] < 0.01 * np.abs(exact)).all()


# -- big bang ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def big_bang():
    return audit(loads_metric(FLRW_DUST, path="flrw.toml"), progress=False)


def test_big_bang_slice_is_left_out_and_the_rest_is_dust(big_bang):
    res = big_bang
    ev = events_of(res)
    t = ev[:, 0]
    ok = res.maps["reason"] == 0
    assert (ok == (t > 0)).all(), "only the t = 0 slice may be excluded"
    counts = res.excluded_by_reason
    assert counts["singular"] + counts["degenerate"] == int((t == 0).sum()) == 5
    rho = 1.0 / (6 * np.pi * t[ok] ** 2)    # Friedmann, published-checks §7 (derived)
    for c, want in (("NEC", rho), ("WEC", rho), ("DEC", rho), ("SEC", rho / 2)):
        m, tol = res.maps["margin_" + c][ok], res.maps["tol_" + c][ok]
        np.testing.assert_array_less(np.abs(m - want), tol + 1e-12 * want)
    np.testing.assert_array_less(np.abs(res.maps["rho"][ok] - rho), 1e-12 * rho +
                                 res.maps["tol_T"][ok])
    assert_no_silent_nan(res)
    assert_worst_points_are_audited(res)
    assert res.exit_code() == 0


# -- a slice that is nowhere spacelike ------------------------------------------------------
@pytest.fixture(scope="module")
def null_chart():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)   # checked by its own test below
        return audit(loads_metric(NULL_CHART, path="null.toml"), progress=False)


def test_null_slice_is_decided_in_the_principal_frame(null_chart):
    res = null_chart
    ok = res.maps["reason"] == 0
    assert ok.all() and res.non_eulerian_points == res.points
    assert np.isnan(res.maps["rho"]).all()
    for c in CONDITIONS:       # flat: saturated everywhere (common practice)
        m, tol = res.maps["margin_" + c], res.maps["tol_" + c]
        assert (np.abs(m) <= tol).all() and res.conditions[c].holds
    assert_no_silent_nan(res)


def test_eulerian_energy_is_masked_where_no_slice_is_spacelike(tmp_path, capsys):
    """Regression (found here): with no spacelike slice the Eulerian energy
    integrals were sums over an empty set, reported as 0.0 ("zero within
    round-off") instead of being masked."""
    path = tmp_path / "null.toml"
    path.write_text(NULL_CHART)
    code, out, err = run_inprocess(["check", path, "--quiet", "--json", tmp_path / "n.json"],
                                   capsys)
    assert code == 0, err
    doc = check_json(tmp_path / "n.json", spatial_axes=3)
    energy = doc.get("energy")
    assert energy is None or energy["eulerian_total"] is None


def test_an_audit_of_a_null_slice_raises_no_numpy_warning():
    """Regression (found here): frames/tetrads.py multiplied an infinite lapse by
    g^tt = 0 outside its errstate block: a RuntimeWarning on stderr."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        audit(loads_metric(NULL_CHART, path="null.toml"), progress=False)


# -- nothing auditable ------------------------------------------------------------------
INSIDE_CASES = {
    "wormhole interior (not Lorentzian)": WORMHOLE.replace("r = [0.5, 3.0]", "r = [0.2, 0.9]"),
    "exclusion covers the region": SCHWARZSCHILD.replace(
        "points = { r = 17, theta = 9, phi = 3 }",
        'points = { r = 5, theta = 3, phi = 2 }\nexclude = "5*M - r"'),
    "big bang only": FLRW_DUST.replace("t = [0.0, 2.0]", "t = [-1.0, 0.0]"),
}


@pytest.mark.parametrize("label", list(INSIDE_CASES))
def test_a_region_with_no_auditable_event_exits_2(label, tmp_path, capsys):
    text = INSIDE_CASES[label]
    with pytest.raises(NoAuditablePointError):
        audit(loads_metric(text), progress=False)
    path = tmp_path / "inside.toml"
    path.write_text(text)
    out_json = tmp_path / "out.json"
    code, out, err = run_inprocess(["check", path, "--quiet", "--json", out_json], capsys)
    assert_one_line_error(code, err, "no auditable event in [region]")
    assert not out_json.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["inside.toml"]
