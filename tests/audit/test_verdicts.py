"""Region audits of the sample metrics against the verdicts the literature gives.

Each expected verdict names its source (see ../shared reference sheet
"published checks": sections cited as §n). The audits run at reduced
resolution: verdicts are pointwise decisions, so resolution changes where
they are sampled, not what they are.
"""

from __future__ import annotations

import pytest

from auditor.audit import audit
from auditor.metric import load_metric, loads_metric

from ..conftest import SAMPLES_DIR

ALL = ("NEC", "WEC", "SEC", "DEC")


def run(stem, points=None, geometry_cache=None, **params):
    metric = load_metric(SAMPLES_DIR / f"{stem}.toml", points=points)
    if params:
        metric = metric.with_parameters(**params)
    geometry = geometry_cache.sample(stem) if geometry_cache is not None else None
    return audit(metric, geometry=geometry, crew=False)


def verdicts(res):
    return {c: res.conditions[c].holds for c in ALL}


@pytest.mark.parametrize("stem", ["minkowski_cartesian", "minkowski_spherical", "schwarzschild"])
def test_vacuum_holds_saturated_everywhere(stem, geometry_cache):
    # Vacuum (T = 0): every condition holds at the edge (common practice; Minkowski
    # and Schwarzschild are vacuum solutions, published-checks §4).
    res = run(stem, geometry_cache=geometry_cache)
    assert verdicts(res) == dict.fromkeys(ALL, True)
    for c in ALL:
        assert res.conditions[c].saturated_fraction == 1.0, c
    assert res.he_type_counts["vacuum"] == res.audited_points
    assert res.exit_code() == 0


def test_minkowski_spherical_axis_is_excluded_not_audited(geometry_cache):
    # theta = 0 and pi are on the region's edges: g is degenerate there (r² sin²θ = 0).
    res = run("minkowski_spherical", geometry_cache=geometry_cache)
    assert res.excluded_by_reason["degenerate"] > 0
    assert res.audited_points + res.excluded_points == res.points


def test_schwarzschild_horizon_exclusion_is_counted(geometry_cache):
    res = run("schwarzschild", geometry_cache=geometry_cache)
    assert res.excluded_by_reason["user_exclusion"] > 0


def test_reissner_nordstrom_holds_with_nec_and_dec_saturated(geometry_cache):
    # Published-checks §5 (textbook result, from memory): rho = Q²/(8π r⁴), p_r = −rho,
    # p_t = +rho; all four hold, NEC (radial) and DEC saturated. In the contract's
    # normalisation the WEC and SEC minima include the null boundary |w| = 1, where
    # they equal T(k,k), so they are saturated too (derived).
    res = run("reissner_nordstrom", geometry_cache=geometry_cache)
    assert verdicts(res) == dict.fromkeys(ALL, True)
    assert res.conditions["NEC"].saturated_fraction == 1.0
    assert res.conditions["DEC"].saturated_fraction == 1.0
    assert res.he_type_counts["I"] == res.audited_points


def test_de_sitter_violates_only_sec(geometry_cache):
    # Published-checks §6: Λ > 0 gives rho = Λ/8π, p = −rho; NEC, WEC, DEC hold
    # (NEC saturated), SEC violated.
    res = run("de_sitter_static", geometry_cache=geometry_cache)
    assert verdicts(res) == {"NEC": True, "WEC": True, "SEC": False, "DEC": True}
    assert res.conditions["NEC"].saturated_fraction == 1.0
    assert res.conditions["SEC"].violating_fraction == 1.0
    assert res.exit_code() == 1
    assert res.exit_code(("NEC", "WEC", "DEC")) == 0


def test_anti_de_sitter_violates_wec_and_dec(geometry_cache):
    # Published-checks §6: Λ < 0: WEC and DEC violated, SEC holds, NEC saturated.
    res = run("de_sitter_static", geometry_cache=geometry_cache, Lambda=-0.03)
    assert verdicts(res) == {"NEC": True, "WEC": False, "SEC": True, "DEC": False}
    assert res.conditions["NEC"].saturated_fraction == 1.0


@pytest.mark.parametrize("w, expected", [
    # Published-checks §7 (text, tertiary): with p = w rho and rho > 0,
    # NEC ⇔ w ≥ −1, SEC ⇔ w ≥ −1/3, DEC ⇔ |w| ≤ 1; WEC ⇔ NEC and rho ≥ 0.
    (0.0, {"NEC": True, "WEC": True, "SEC": True, "DEC": True}),
    (-0.5, {"NEC": True, "WEC": True, "SEC": False, "DEC": True}),
    (-1.2, {"NEC": False, "WEC": False, "SEC": False, "DEC": False}),
    (1.5, {"NEC": True, "WEC": True, "SEC": True, "DEC": False}),
])
def test_flrw_verdicts_follow_the_equation_of_state(w, expected, geometry_cache):
    res = run("flrw_flat_w", geometry_cache=geometry_cache, w=w)
    assert verdicts(res) == expected
    # The fluid is homogeneous: each verdict holds or fails at every event.
    for c in ALL:
        assert res.conditions[c].violating_fraction in (0.0, 1.0), c


def test_morris_thorne_throat_violates_nec(geometry_cache):
    # Published-checks §3: flaring out (b'(r0) < 1) gives rho + p_r < 0 at the throat.
    res = run("morris_thorne_wormhole", geometry_cache=geometry_cache)
    nec = res.conditions["NEC"]
    assert not nec.holds
    # the throat l = 0 is on the grid (l in [-4, 4], 41 samples) and violates
    import numpy as np
    grid = res.grid
    l_axis = grid.axis_values[grid.axis_names.index("l")]
    k = int(np.argmin(np.abs(l_axis)))
    margins = res.maps["margin_NEC"].reshape(grid.shape)
    tol = res.maps["tol_NEC"].reshape(grid.shape)
    assert abs(l_axis[k]) < 1e-12
    assert np.all(margins[k] < -tol[k])


def test_tanh_bubble_violates_wec_with_negative_eulerian_energy(geometry_cache):
    # Alcubierre 1994 (published-checks §1, text): the metric violates the weak,
    # dominant and strong energy conditions; rho_E ≤ 0 everywhere.
    res = run("tanh_wall_bubble", points=17, geometry_cache=geometry_cache)
    for c in ("WEC", "SEC", "DEC"):
        assert not res.conditions[c].holds, c
    assert res.energy.total < 0
    assert res.energy.negative_total == pytest.approx(res.energy.total, rel=1e-12)
    assert res.conditions["WEC"].regions, "violating regions are listed"
    region = res.conditions["WEC"].regions[0]
    assert region.eulerian_energy < 0 and region.volume > 0


def test_plane_wave_obeys_all_four(geometry_cache):
    # Published-checks §8: a plane-fronted wave with H_xx + H_yy ≤ 0 (this file's
    # sign convention, stated in its comments) is a null dust plus a vacuum wave
    # and obeys all four conditions, the NEC at the edge.
    res = run("plane_wave_brinkmann", points=9, geometry_cache=geometry_cache)
    assert verdicts(res) == dict.fromkeys(ALL, True)
    assert res.conditions["NEC"].saturated_fraction == 1.0


def test_plane_wave_with_the_wrong_laplacian_sign_violates(geometry_cache):
    # Same source, opposite sign of the transverse Laplacian: T_uu < 0, NEC fails.
    res = run("plane_wave_brinkmann", points=9, geometry_cache=geometry_cache, A0=-0.05)
    assert not res.conditions["NEC"].holds


def test_refined_minimum_of_vacuum_reads_saturated_near_the_singularity(geometry_cache):
    # Schwarzschild is vacuum (published-checks §4): every margin is zero, however
    # large the round-off near r -> 0 (curvature ~ M/r³). The refined minimum is
    # reported with the tolerance at its own event, and within it it reads as
    # saturated, in the JSON and in the terminal summary.
    from auditor.textout import format_audit
    text = (SAMPLES_DIR / "schwarzschild.toml").read_text()
    text = text.replace("r = [1.0, 12.0]", "r = [0.05, 3.0]").replace('exclude = "2.1*M - r"\n', "")
    metric = loads_metric(text)
    res = audit(metric, geometry=geometry_cache.text(text), crew=False, progress=False)
    assert res.grid.axis_values[0][0] == 0.05 and res.excluded_points <= res.points // 10
    out = res.to_json()
    for c in ALL:
        s, j = res.conditions[c], out["conditions"][c]
        assert s.holds and s.saturated_fraction == 1.0
        assert s.refined_tolerance > 0 and abs(s.refined_min_margin) <= s.refined_tolerance
        assert abs(s.min_margin) <= s.min_margin_tolerance
        assert j["refined_tolerance"] == s.refined_tolerance
        assert j["refined_saturated"] is True and j["refined_holds"] is True
        # the refined event sits at the small-r edge, where the round-off is largest
        assert s.refined_worst_point["r"] < 0.1
    rows = [line for line in format_audit(res).splitlines() if line[:3] in ALL]
    assert len(rows) == 4
    for line in rows:
        assert "saturated" in line and line.count("0+-") == 2, line


def test_refined_violation_reads_as_a_violation(geometry_cache):
    # Alcubierre 1994 (published-checks §1): the bubble violates the WEC by an
    # order-one margin, far beyond its round-off, at the grid and refined minima.
    res = run("tanh_wall_bubble", points=9, geometry_cache=geometry_cache)
    s = res.conditions["WEC"]
    assert not s.holds
    assert s.refined_holds is False and s.refined_saturated is False
    assert s.refined_min_margin <= s.min_margin < -1e6 * s.refined_tolerance
    assert s.refined_tolerance > 0 and s.min_margin_tolerance > 0


def test_refined_violation_between_grid_events_is_flagged():
    # Text only: a condition that holds at every audited grid event but whose
    # refined minimum is below minus its tolerance gets a mark and a note.
    from dataclasses import replace
    from auditor.textout import format_audit
    res = run("minkowski_cartesian", points=3)
    nec = res.conditions["NEC"]
    res.conditions["NEC"] = replace(nec, refined_min_margin=-1e-3, refined_tolerance=1e-12)
    text = format_audit(res)
    row = next(line for line in text.splitlines() if line.startswith("NEC"))
    assert "-0.001!" in row and "saturated" in row
    assert "! NEC: the refined minimum, between grid events, is below minus its tolerance" in text
    assert res.exit_code() == 0      # the verdict covers the audited grid events
