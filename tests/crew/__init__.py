"""Tests of crew safety: tidal maps, crew worldlines, stations.

Shared inline metrics (written with the metric-file language) and small
helpers. Every closed form the tests compare against names its source beside
the value; "derived" marks derivations written out in the test's comments.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from auditor.metric.model import Crew

PI = np.pi

#: Schwarzschild in Schwarzschild coordinates (K. Schwarzschild 1916; any GR text).
SCHWARZSCHILD = """
name = "Schwarzschild"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
M = 1.0
[metric.components]
"t t" = "-(1 - 2*M/r)"
"r r" = "1/(1 - 2*M/r)"
"theta theta" = "r**2"
"phi phi" = "r**2*sin(theta)**2"
"""

#: Schwarzschild in Painlevé–Gullstrand coordinates: the brief's line element
#: ds² = −dt² + (dr + sqrt(2M/r) dt)² + r² dΩ² (Painlevé 1921, Gullstrand 1922 —
#: citations from memory). Lapse 1, shift sqrt(2M/r): the t = const slices are
#: flat and spacelike everywhere, inside the horizon too.
PAINLEVE_GULLSTRAND = """
name = "Schwarzschild, Painleve-Gullstrand coordinates"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
M = 1.0
[metric]
line_element = "-dt**2 + (dr + sqrt(2*M/r)*dt)**2 + r**2*dtheta**2 + r**2*sin(theta)**2*dphi**2"
"""

#: Morris–Thorne wormhole (Morris & Thorne 1988, published-checks §3) with our
#: choice b(r) = b0²/r (throat r = b0, b′ = −b0²/r² < 1: flaring out) and a
#: redshift function Φ(r) = −a b0 / r (finite, Φ′ and Φ″ non-zero).
MORRIS_THORNE = """
name = "Morris-Thorne wormhole"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
b0 = 1.0
a = 0.7
[define]
b = "b0**2/r"
Phi = "-a*b0/r"
[metric.components]
"t t" = "-exp(2*Phi)"
"r r" = "1/(1 - b/r)"
"theta theta" = "r**2"
"phi phi" = "r**2*sin(theta)**2"
"""

#: Plane-fronted wave with a profile of the null coordinate u = t − z only:
#: ds² = −dt² + dx² + dy² + dz² + H(u)(dt − dz)², H = a sech²((t − z)/w).
#: With v = −(t + z)/2 this is Brinkmann's form H du² + 2 du dv + dx² + dy²
#: (published-checks §8); H_xx + H_yy = 0 and H has no x, y dependence, so
#: all curvature vanishes (derived: R_uiuj = −½ ∂_i∂_j H = 0): flat.
PP_WAVE_FLAT = """
name = "Plane-fronted wave, profile of u only (flat)"
coordinates = ["t", "x", "y", "z"]
[parameters]
a = 0.6
w = 1.0
[metric]
line_element = "-dt**2 + dx**2 + dy**2 + dz**2 + a*sech((t - z)/w)**2*(dt - dz)**2"
"""

#: Vacuum plane wave H = A (x² − y²) in the same coordinates (Brinkmann form
#: with u = t − z, published-checks §8: H_xx + H_yy = 0, vacuum), first
#: coordinate timelike where H > −1 (g^tt = −(1 + H), derived from the
#: Kerr–Schild inverse g^ab = η^ab − H ℓ^a ℓ^b, ℓ = dt − dz).
PLANE_WAVE = """
name = "Vacuum plane wave"
coordinates = ["t", "x", "y", "z"]
[parameters]
A = 0.04
[metric]
line_element = "-dt**2 + dx**2 + dy**2 + dz**2 + A*(x**2 - y**2)*(dt - dz)**2"
"""

#: A thin vacuum plane-wave pulse: H = B0 exp(−u²/w²)(x² − y²), u = t − z.
PLANE_WAVE_PULSE = """
name = "Thin vacuum plane-wave pulse"
coordinates = ["t", "x", "y", "z"]
[parameters]
B0 = 0.5
w = 0.01
[define]
B = "B0*exp(-(t - z)**2/w**2)"
[metric]
line_element = "-dt**2 + dx**2 + dy**2 + dz**2 + B*(x**2 - y**2)*(dt - dz)**2"
"""


def with_crew(metric, start, velocity=(0.0, 0.0, 0.0), duration=1.0, **kw):
    """A copy of ``metric`` whose ``[crew]`` asks for a worldline.

    ``start`` is a sequence of the four coordinate values. The loader's own
    validation of ``[crew]`` is exercised by the command-line tests.
    """
    start = {c: float(v) for c, v in zip(metric.coordinates, start)}
    crew = replace(metric.crew, start=start, velocity=tuple(float(v) for v in velocity),
                   duration=float(duration), **kw)
    assert isinstance(crew, Crew)
    return replace(metric, crew=crew)


def spherical_events(rng, n, r_lo, r_hi):
    """n events (t, r, theta, phi), r uniform in [r_lo, r_hi], away from the axis."""
    return np.column_stack([rng.uniform(-5, 5, n), rng.uniform(r_lo, r_hi, n),
                            rng.uniform(0.15, PI - 0.15, n), rng.uniform(-PI, PI, n)])
