"""One spacetime written in the three metric forms of the file format
(line_element, [metric.components], [metric.adm]) gives the same geometry.

Reference: the forms are algebraically identical (metric-format.md, "[metric]":
ds² = −N² dt² + γ_ij (dx^i + β^i dt)(dx^j + β^j dt) for the 3+1 form; derived),
so the only differences are round-off from differently arranged expressions.
Tolerance: relative 1e-12 (a few hundred ulps: the expressions differ in
arrangement, not in conditioning) plus the round-off floors of tests/conftest.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import (EPS, FLOOR_FACTOR, assert_close, einstein_floor,
                            kretschmann_floor, ricci_floor, riemann_floor)

BUBBLE_HEAD = """
name = "bubble, {form}"
coordinates = ["t", "x", "y", "z"]
[parameters]
v = 0.5
R = 1.0
sigma = 8.0
[define]
r_s = "sqrt((x - v*t)**2 + y**2 + z**2)"
f = "(tanh(sigma*(r_s + R)) - tanh(sigma*(r_s - R))) / (2*tanh(sigma*R))"
"""

# Alcubierre 1994 (published-checks §1): ds² = −dt² + (dx − v f dt)² + dy² + dz²
BUBBLE = {
    "line_element": """[metric]
line_element = "-dt**2 + (dx - v*f*dt)**2 + dy**2 + dz**2"
""",
    "components": """[metric.components]
"t t" = "-1 + v**2*f**2"
"t x" = "-v*f"
"x x" = "1"
"y y" = "1"
"z z" = "1"
""",
    "adm": """[metric.adm]
lapse = "1"
shift = ["-v*f", "0", "0"]
spatial = "identity"
""",
}

WORMHOLE_HEAD = """
name = "wormhole, {form}"
coordinates = ["t", "l", "theta", "phi"]
[parameters]
b0 = 1.0
a = 0.2
[define]
r = "sqrt(l**2 + b0**2)"
Phi = "-a*b0**2/(b0**2 + l**2)"
"""

# Morris & Thorne 1988 (published-checks §3) in proper distance l, as in
# sample_metrics/morris_thorne_wormhole.toml
WORMHOLE = {
    "line_element": """[metric]
line_element = "-exp(2*Phi)*dt**2 + dl**2 + r**2*(dtheta**2 + sin(theta)**2*dphi**2)"
""",
    "components": """[metric.components]
"t t" = "-exp(2*Phi)"
"l l" = "1"
"theta theta" = "r**2"
"phi phi" = "r**2*sin(theta)**2"
""",
    "adm": """[metric.adm]
lapse = "exp(Phi)"
shift = ["0", "0", "0"]
spatial = [["1", "0", "0"], ["0", "r**2", "0"], ["0", "0", "r**2*sin(theta)**2"]]
""",
}


def _events(case, rng, n):
    if case == "bubble":
        # the interior, the wall and the tail
        t = rng.uniform(-1, 1, n)
        d = rng.normal(size=(n, 3))
        d *= (rng.uniform(0.05, 2.3, n) / np.linalg.norm(d, axis=1))[:, None]
        return np.column_stack([t, 0.5 * t + d[:, 0], d[:, 1], d[:, 2]])
    return np.column_stack([rng.uniform(-2, 2, n), rng.uniform(-4, 4, n),
                            rng.uniform(0.2, np.pi - 0.2, n), rng.uniform(-np.pi, np.pi, n)])


# The sample file supplies one of the three forms (its own), inline text the others.
SAMPLE_OF = {"bubble": ("tanh_wall_bubble", "line_element"),
             "wormhole": ("morris_thorne_wormhole", "adm")}


@pytest.mark.parametrize("case", ["bubble", "wormhole"])
def test_three_forms_agree(case, geometry_cache, rng):
    head, forms = (BUBBLE_HEAD, BUBBLE) if case == "bubble" else (WORMHOLE_HEAD, WORMHOLE)
    stem, sample_form = SAMPLE_OF[case]
    geos = {form: geometry_cache.text(head.format(form=form) + body)
            for form, body in forms.items() if form != sample_form}
    geos[sample_form] = geometry_cache.sample(stem)
    assert {form: g.metric.form for form, g in geos.items()} == {f: f for f in forms}
    assert geos[sample_form].metric.parameters == \
        {"bubble": {"v": 0.5, "R": 1.0, "sigma": 8.0}, "wormhole": {"b0": 1.0, "a": 0.2}}[case]
    x = _events(case, rng, 10)
    curvs = {}
    for form, geo in geos.items():
        batch = geo.evaluate(x)
        assert batch.ok.all(), form
        curvs[form] = batch.curvature
    ref = curvs[sample_form]
    for form in forms:
        if form == sample_form:
            continue
        c = curvs[form]
        what = f"{case}: {form} vs {sample_form} (sample file)"
        assert_close(c.g, ref.g, FLOOR_FACTOR * EPS, rtol=1e-12, what=what + " g")
        assert_close(c.riemann, ref.riemann, riemann_floor(ref), rtol=1e-12,
                     what=what + " R_abcd")
        assert_close(c.ricci, ref.ricci, ricci_floor(ref), rtol=1e-12, what=what + " R_ab")
        assert_close(c.einstein, ref.einstein, einstein_floor(ref), rtol=1e-12,
                     what=what + " G_ab")
        assert_close(c.kretschmann, ref.kretschmann, kretschmann_floor(ref), rtol=1e-12,
                     what=what + " K")
