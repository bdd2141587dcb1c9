"""The sampled cross-check: never below the exact margins, converging to them,
and blind where published-checks §9 says sampling is blind.

Tolerance ``tol = 64 ε S`` as in test_margins.py: 16 rounded products per
evaluated margin (≤ ~16 ε S) with a factor 4 of headroom; S is max|T_âb̂| for
tensors built directly and max(|L|ᵀ|T₀||L|) for T = Lᵀ T₀ L. Random tests
print their seed (fixture ``rng`` of tests/conftest.py).
"""

from __future__ import annotations

import numpy as np
import pytest

from auditor.conditions import (SampledMargins, all_margins, fibonacci_directions, nec_margin,
                                sampled_margins)
from auditor.conditions.sampled import DEFAULT_DIRECTIONS, DEFAULT_RAPIDITIES

EPS = np.finfo(float).eps


def boost(rapidity, direction):
    """Pure boost Λ (ΛᵀηΛ = η) of the given rapidity along a unit 3-vector."""
    n = np.asarray(direction, float) / np.linalg.norm(direction)
    g, sh = np.cosh(rapidity), np.sinh(rapidity)
    L = np.eye(4)
    L[0, 0] = g
    L[0, 1:] = L[1:, 0] = sh * n
    L[1:, 1:] += (g - 1.0) * np.outer(n, n)
    return L


def type_II(mu, f, p2, p3):
    """Published-checks §9: T_âb̂ = [[μ+f, −f], [−f, −μ+f]] ⊕ diag(p2, p3)."""
    T = np.zeros((4, 4))
    T[0, 0], T[0, 1], T[1, 0], T[1, 1] = mu + f, -f, -f, -mu + f
    T[2, 2], T[3, 3] = p2, p3
    return T


def frames(T0, Ls):
    """(T, tol) with T = Lᵀ T0 L and tol = 64 ε max(|L|ᵀ|T0||L|)."""
    T = np.array([L.T @ t @ L for t, L in zip(T0, Ls)])
    terms = np.array([np.abs(L).T @ np.abs(t) @ np.abs(L) for t, L in zip(T0, Ls)])
    return T, 64 * EPS * terms.max(axis=(1, 2))


def random_symmetric(rng, n):
    T = rng.normal(size=(n, 4, 4))
    return 0.5 * (T + np.swapaxes(T, 1, 2))


def as_array(m):
    return np.array([m.nec, m.wec, m.sec, m.dec])


def test_exact_never_above_sampled(rng):
    n = 120
    T0 = np.concatenate([random_symmetric(rng, n),
                         np.array([type_II(*rng.uniform(-1, 1, 4)) for _ in range(n)])])
    Ls = [np.eye(4) if i % 3 == 0 else boost(rng.uniform(0, 3), rng.normal(size=3))
          for i in range(2 * n)]
    T, tol = frames(T0, Ls)
    exact = all_margins(T)
    sampled = sampled_margins(T)
    assert isinstance(sampled, SampledMargins)
    diff = as_array(exact) - as_array(sampled)
    assert np.all(diff <= tol), diff.max(axis=1)


def test_sampling_converges_to_the_exact_margin(rng):
    """Dense samples approach the exact minima. Bound (derived, see
    test_margins.check_against_brute): a sample within 2h of the minimiser,
    h = sqrt(4π/n) (covering radius of the lattice ≤ 2h: common practice),
    costs ≤ 32 h² max|T| on the sphere. For DEC both directions are off by
    ≤ 2h; the Riemannian Hessian on S² × S² has norm ≤ 2(|b| + ‖A‖) + ‖A‖
    ≤ 13 max|T| (|b| ≤ √3, ‖A‖ ≤ 3 in units of max|T|), so the cost is
    ≤ ½·13·2(2h)² max|T| = 52 h² max|T| < 64 h² max|T|."""
    T = random_symmetric(rng, 6)
    exact = all_margins(T)
    scale = np.abs(T).max(axis=(1, 2))
    dense = sampled_margins(T, n_dirs=20000, rapidities=(), dec_dirs=1)
    h = np.sqrt(4 * np.pi / 20000)
    assert np.all(dense.nec - exact.nec <= 32 * h**2 * scale)
    pairs = sampled_margins(T, n_dirs=1500, rapidities=())
    h = np.sqrt(4 * np.pi / 1500)
    assert np.all(pairs.dec - exact.dec <= 64 * h**2 * scale)
    assert np.all(exact.dec <= pairs.dec + 64 * EPS * scale)


def test_boosted_type_II_violation_is_missed_by_sampling_but_not_by_the_exact_margin():
    """Published-checks §9 (derived): random sampling of observers can miss a
    violation seen only by observers boosted close to a null direction (a type II
    case with γ > 20).

    Rest frame: μ = 1, f = 1, p2 = −1.05, p3 = 0.5 violates NEC (μ + p2 < 0,
    §9). Boost along −x with γ = 25: l_â = (1, −1) (the f part is f l_â l_b̂)
    becomes e^φ (1, −1) while the μ part, −μ η on the t–x block, is invariant,
    so the boosted tensor is the same type II form with f' = f e^{2φ} (derived).
    For that form with c = μ + p2 < 0 ≤ μ + p3 and f' > 0, the NEC margin is
    min over s1 = r of c(1 − r²) + f'(1 − r)², at r = f'/(f' − c), equal to
    −c²/(f' − c) (derived by hand)."""
    mu, f, p2, p3 = 1.0, 1.0, -1.05, 0.5
    gamma = 25.0
    phi = np.arccosh(gamma)
    T, tol = frames(type_II(mu, f, p2, p3)[None], [boost(phi, (-1.0, 0.0, 0.0))])
    f_boosted = f * np.exp(2 * phi)
    assert np.allclose(T[0], type_II(mu, f_boosted, p2, p3), rtol=0, atol=tol[0])
    c = mu + p2
    expected = -c * c / (f_boosted - c)                       # ≈ −1.0e−6
    exact = all_margins(T)
    # Relative error of the closed form's own evaluation is a few ε; the
    # margin's round-off is tol (module docstring).
    assert abs(exact.nec[0] - expected) <= tol[0] + 8 * EPS * abs(expected)
    assert expected < -1e4 * tol[0]                            # far beyond round-off
    # NEC fails, so WEC and SEC fail, and the DEC margin (which includes
    # k1 = k2) is at most the NEC one.
    for m in (exact.wec, exact.sec, exact.dec):
        assert m[0] < -1e4 * tol[0]
    # The default sampler (256 directions, rapidities ≤ 3) sees nothing wrong.
    sampled = sampled_margins(T)
    assert DEFAULT_DIRECTIONS == 256 and max(DEFAULT_RAPIDITIES) == 3.0
    assert sampled.nec[0] > 0 and sampled.wec[0] > 0 and sampled.dec[0] > 0


def test_sampled_observer_set_contains_the_reference_observer(rng):
    """v = 0 is always sampled: the WEC and SEC minima are at most X_00 at u = n
    (T_00 and ½(ρ + tr A) respectively), whatever the other settings."""
    T = random_symmetric(rng, 40)
    tol = 64 * EPS * np.abs(T).max(axis=(1, 2))   # the two sides round differently
    s = sampled_margins(T, n_dirs=7, rapidities=())
    assert np.all(s.wec <= T[:, 0, 0] + tol)
    assert np.all(s.sec <= 0.5 * (T[:, 0, 0] + np.trace(T[:, 1:, 1:], axis1=1, axis2=2)) + tol)
    # NEC uses only null observers: with one direction e it is T(n+e, n+e).
    e = fibonacci_directions(1)[0]
    k = np.concatenate([[1.0], e])
    one = sampled_margins(T, n_dirs=1, rapidities=())
    assert np.allclose(one.nec, np.einsum("a,nab,b->n", k, T, k), rtol=0,
                       atol=64 * EPS * np.abs(T).max())
    assert np.all(nec_margin(T)[0] <= one.nec + 64 * EPS * np.abs(T).max())


def test_fibonacci_directions():
    d = fibonacci_directions(1000)
    assert d.shape == (1000, 3)
    assert np.allclose(np.linalg.norm(d, axis=1), 1.0, atol=4 * EPS)
    # Quasi-uniform: the centroid of n points vanishes to O(1/n) (the lattice
    # is symmetric in z to O(1/n); common practice for equal-area lattices).
    assert np.linalg.norm(d.mean(axis=0)) < 2.0 / 1000
    assert not d.flags.writeable
    with pytest.raises(ValueError, match="`n` must be a positive integer"):
        fibonacci_directions(0)


@pytest.mark.parametrize("kwargs, match", [
    ({"rapidities": (-1.0,)}, "`rapidities` must be finite and non-negative"),
    ({"rapidities": (np.inf,)}, "`rapidities` must be finite and non-negative"),
    ({"n_dirs": 0}, "`n` must be a positive integer"),
])
def test_argument_validation(kwargs, match):
    with pytest.raises(ValueError, match=match):
        sampled_margins(np.zeros((1, 4, 4)), **kwargs)
    with pytest.raises(ValueError, match=r"`T` must have shape \(N, 4, 4\)"):
        sampled_margins(np.zeros((4, 4)))


def test_an_events_sampled_minima_do_not_depend_on_its_batch(rng):
    # The region audit runs the cross-check on whichever of its events fall in a
    # chunk, one or many: an event's values must be the same bits in any batch.
    T = rng.standard_normal((400, 4, 4))
    T = T + np.swapaxes(T, 1, 2)
    whole = sampled_margins(T)
    for a in range(0, 400, 13):
        for n in (1, 2, 5):
            part = sampled_margins(T[a:a + n])
            for name in ("nec", "wec", "sec", "dec"):
                np.testing.assert_array_equal(getattr(part, name), getattr(whole, name)[a:a + n],
                                              err_msg=f"{name} of events {a}..{a + n - 1}")
