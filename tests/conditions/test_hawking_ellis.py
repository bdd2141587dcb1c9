"""Hawking–Ellis types: canonical forms in many frames, at the round-off level.

Types from the Jordan structure of T^â_b̂ = η^{âĉ}T_ĉb̂ (Hawking & Ellis 1973
§4.3, from memory; published-checks §9). Every canonical tensor below is
boosted (rapidity up to 3) and rotated, and half of the copies are perturbed
by a random symmetric matrix with entries up to ``tol``; none of that may
change the type.

``tol`` is what a caller would pass, the round-off of the components: each
component of T = Lᵀ T₀ L sums 16 products, each rounded to ≤ ε relative,
so tol = 16 ε max(|L|ᵀ|T₀||L|) (the size of the terms, not of the result).
Random tests print their seed (fixture ``rng`` of tests/conftest.py).
"""

from __future__ import annotations

import numpy as np
import pytest

from auditor.conditions import TYPE_NAMES, classify

EPS = np.finfo(float).eps
ETA = np.diag([-1.0, 1.0, 1.0, 1.0])


def boost(rapidity, direction):
    """Pure boost Λ (ΛᵀηΛ = η) of the given rapidity along a unit 3-vector."""
    n = np.asarray(direction, float) / np.linalg.norm(direction)
    g, sh = np.cosh(rapidity), np.sinh(rapidity)
    L = np.eye(4)
    L[0, 0] = g
    L[0, 1:] = L[1:, 0] = sh * n
    L[1:, 1:] += (g - 1.0) * np.outer(n, n)
    return L


def rotation(rng):
    q, r = np.linalg.qr(rng.normal(size=(3, 3)))
    L = np.eye(4)
    L[1:, 1:] = q * np.sign(np.diag(r))
    return L


def lorentz(rng, max_rapidity):
    return rotation(rng) @ boost(rng.uniform(0, max_rapidity), rng.normal(size=3)) @ rotation(rng)


def in_frames(T0, rng, copies, max_rapidity=3.0):
    """Copies of T0 in the rest frame and random frames; every other copy is
    perturbed at the round-off level. Returns (T, tol)."""
    Ts, tols = [], []
    for i in range(copies):
        L = np.eye(4) if i == 0 else lorentz(rng, max_rapidity)
        T = L.T @ T0 @ L
        tol = 16 * EPS * (np.abs(L).T @ np.abs(T0) @ np.abs(L)).max()
        if i % 2 == 1:
            E = rng.uniform(-1, 1, (4, 4))
            T = T + tol * 0.5 * (E + E.T)
        Ts.append(T)
        tols.append(tol)
    return np.array(Ts), np.array(tols)


# -- canonical tensors (lower indices T_âb̂) -------------------------------------------

def diag(*v):
    return np.diag(v).astype(float)


def null_dust(mu):
    """T = μ k k with k^â = (1, 1, 0, 0) null, k_â = (−1, 1, 0, 0)."""
    k = np.array([-1.0, 1.0, 0.0, 0.0])
    return mu * np.outer(k, k)


def type_II(mu, f, p2, p3):
    """Published-checks §9: T_âb̂ = [[μ+f, −f], [−f, −μ+f]] ⊕ diag(p2, p3)."""
    T = np.zeros((4, 4))
    T[0, 0], T[0, 1], T[1, 0], T[1, 1] = mu + f, -f, -f, -mu + f
    T[2, 2], T[3, 3] = p2, p3
    return T


def type_III(rho, f, p):
    """T^âb̂ = [[ρ, 0, f, 0], [0, −ρ, f, 0], [f, f, −ρ, 0], [0, 0, 0, p]], lowered
    with η (derived: T^â_b̂ + ρ I on the first three axes is nilpotent of order
    exactly 3, checked in test_type_III_construction)."""
    upper = np.array([[rho, 0, f, 0], [0, -rho, f, 0], [f, f, -rho, 0], [0, 0, 0, p]], float)
    return ETA @ upper @ ETA


def section9(rho, f, p1, p2, p3):
    """Published-checks §9 hand-built case: diag(ρ, p1, p2, p3) with T_0x = f."""
    T = diag(rho, p1, p2, p3)
    T[0, 1] = T[1, 0] = f
    return T


CANONICAL = [
    # (name, T_âb̂, expected code, source)
    ("vacuum", np.zeros((4, 4)), 0, "contract: T = 0 within tolerance"),
    ("lambda>0", -diag(-1, 1, 1, 1) / (8 * np.pi), 1,
     "published-checks §6, T = −Λη/8π: degenerate type I (H&E §4.3, memory)"),
    ("lambda<0", diag(-1, 1, 1, 1) / (8 * np.pi), 1, "published-checks §6"),
    ("dust", diag(1, 0, 0, 0), 1, "H&E §4.3 (memory): timelike eigenvector"),
    ("perfect fluid", diag(1, 0.3, 0.3, 0.3), 1, "H&E §4.3 (memory)"),
    ("reissner-nordstrom", diag(1, -1, 1, 1), 1,
     "published-checks §5, ρ, p_r = −ρ, p_t = ρ: diagonal, type I"),
    ("null dust", null_dust(1.0), 2, "published-checks §8: null dust is type II"),
    ("null dust + lambda", null_dust(0.7) + 0.3 * diag(1, -1, -1, -1), 2,
     "published-checks §8 and §6 combined (derived: same null eigenvector)"),
    ("small null dust + lambda", null_dust(1e-6) + 0.3 * diag(1, -1, -1, -1), 2, "as above"),
    ("type II", type_II(0.7, 0.4, -0.3, 0.5), 2, "published-checks §9 form"),
    ("type II, f < 0", type_II(-0.2, -0.6, 0.9, 0.1), 2, "published-checks §9 form"),
    ("type II, p2 = -mu", type_II(0.7, 0.4, -0.7, 0.5), 2, "§9 form, triple eigenvalue"),
    ("type II, p2 = p3 = -mu", type_II(0.7, 0.4, -0.7, -0.7), 2, "§9 form, fourfold"),
    ("type II, p2 near -mu", type_II(0.7, 0.4, -0.7 + 1e-5, 0.5), 2, "§9 form"),
    ("type III", type_III(0.5, 0.8, 0.3), 3, "derived form above"),
    ("type III, p = -rho", type_III(0.5, 0.8, -0.5), 3, "derived form above, fourfold"),
    ("type III, p near -rho", type_III(0.5, 0.8, -0.5 + 1e-4), 3, "derived form above"),
    ("section 9, type I", section9(1.0, 0.3, 0.5, 0.2, -0.1), 1,
     "published-checks §9: |ρ + p1| = 1.5 > 2|f| = 0.6"),
    ("section 9, type IV", section9(1.0, 0.9, 0.5, 0.2, -0.1), 4,
     "published-checks §9: |ρ + p1| = 1.5 < 2|f| = 1.8"),
    ("section 9, type IV (2)", section9(0.2, 0.5, -0.3, 0.2, 0.7), 4,
     "published-checks §9: |ρ + p1| = 0.1 < 2|f| = 1.0"),
    ("type I, close eigenvalues", diag(1, 0.3, 0.3 + 1e-6, 0.3), 1,
     "H&E §4.3 (memory): diagonal, so type I"),
]


@pytest.mark.parametrize("name, T0, code, source", CANONICAL, ids=[c[0] for c in CANONICAL])
def test_canonical_types_in_boosted_and_perturbed_frames(rng, name, T0, code, source):
    T, tol = in_frames(T0, rng, copies=40)
    got = classify(T, tol)
    assert np.all(got == code), (name, source, np.bincount(got, minlength=5))


def test_type_III_construction():
    """The type III form has T^â_b̂ = −ρ I + N on the first three axes with
    N³ = 0 ≠ N² (exact integers), eigenvalue −ρ (triple) and p."""
    M = ETA @ type_III(2.0, 3.0, 5.0)
    N = M[:3, :3] + 2.0 * np.eye(3)
    assert np.all(N @ N @ N == 0) and np.any(N @ N != 0)
    assert np.all(M[3, :3] == 0) and M[3, 3] == 5.0


def test_section9_boundary_on_random_parameters(rng):
    """Published-checks §9 (derived): type I when |ρ + p1| > 2|f|, type IV when
    |ρ + p1| < 2|f|. Parameters within 20 % of the boundary are skipped: there
    the eigenvalue pair is close to a Jordan block, whose round-off splitting
    (module docstring) makes the boundary itself undecidable."""
    params = rng.uniform(-1, 1, (600, 5))
    rho, f, p1 = params[:, 0], params[:, 1], params[:, 2]
    ratio = np.abs(rho + p1) / (2 * np.abs(f))
    keep = (ratio < 0.8) | (ratio > 1.25)
    Ts, tols, expected = [], [], []
    for prm, r in zip(params[keep], ratio[keep]):
        T, tol = in_frames(section9(*prm), rng, copies=3)
        Ts.append(T)
        tols.append(tol)
        expected += [1 if r > 1 else 4] * 3
    got = classify(np.concatenate(Ts), np.concatenate(tols))
    expected = np.array(expected)
    assert np.array_equal(got, expected), np.flatnonzero(got != expected)[:10]
    assert 1 in expected and 4 in expected


def test_type_of_random_tensors_is_frame_independent(rng):
    """Generic random tensors are type I or IV; the type is a Lorentz invariant."""
    T0 = rng.normal(size=(300, 4, 4))
    T0 = 0.5 * (T0 + np.swapaxes(T0, 1, 2))
    tol0 = 16 * EPS * np.abs(T0).max(axis=(1, 2))
    Ls = [lorentz(rng, 3.0) for _ in T0]
    T1 = np.array([L.T @ t @ L for t, L in zip(T0, Ls)])
    tol1 = np.array([16 * EPS * (np.abs(L).T @ np.abs(t) @ np.abs(L)).max()
                     for t, L in zip(T0, Ls)])
    c0, c1 = classify(T0, tol0), classify(T1, tol1)
    assert np.array_equal(c0, c1)
    assert set(np.unique(c0)) == {1, 4}


def test_vacuum_threshold():
    """Vacuum iff max|T_âb̂| ≤ tol (contract: "vacuum" where T vanishes within tolerance)."""
    T = np.array([diag(1, 0.3, 0.3, 0.3) * 1e-20, null_dust(1e-20), diag(1, 0.3, 0.3, 0.3)])
    assert classify(T, 1e-20).tolist() == [0, 0, 1]
    # Just above the threshold the tensor is not vacuum, but a tolerance of 10 %
    # of it hides the Jordan structure of the null dust (type read as I).
    assert classify(T, 1e-21).tolist() == [1, 1, 1]
    # With round-off-sized tolerances the types are resolved at any scale.
    assert classify(T, [1e-35, 1e-35, 1e-15]).tolist() == [1, 2, 1]
    assert classify(np.zeros((2, 4, 4)), 0.0).tolist() == [0, 0]


def test_type_names():
    assert TYPE_NAMES == {0: "vacuum", 1: "I", 2: "II", 3: "III", 4: "IV"}
    assert classify(np.zeros((1, 4, 4)), 0.0).dtype.kind == "i"
    assert classify(np.zeros((0, 4, 4)), 0.0).shape == (0,)


@pytest.mark.parametrize("T, tol, match", [
    (np.zeros((4, 4)), 0.0, r"`T` must have shape \(N, 4, 4\)"),
    (np.full((1, 4, 4), np.nan), 0.0, "`T` must be finite"),
    (np.zeros((1, 4, 4)), -1.0, "`tol` must be finite and non-negative"),
    (np.zeros((1, 4, 4)), np.nan, "`tol` must be finite and non-negative"),
    (np.zeros((2, 4, 4)), [1.0, 2.0, 3.0], r"`tol` must be a scalar or have shape \(2,\)"),
])
def test_input_validation(T, tol, match):
    with pytest.raises(ValueError, match=match):
        classify(T, tol)
