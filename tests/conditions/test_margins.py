"""Exact energy-condition margins: closed forms, published verdicts, brute force,
a naive optimiser, and Lorentz covariance of the verdicts.

Conventions (auditor/conditions/margins.py): T is (N, 4, 4), lower-index
orthonormal-frame components, η = diag(−1, 1, 1, 1); observers are normalised
against n (null k = n + s, causal u = n + w, |w| ≤ 1), as in the command-line
contract ("Verdict semantics").

Tolerance ``tol = 64 ε S``: a margin is formula (1) of the module, 16 products
T_âb̂ k^â k^b̂ with |k^â| ≤ 1, each rounded to ≤ ε relative, so its evaluation
error is ≤ ~16 ε max|T|; the factor 4 of headroom covers the closed forms.
S is max|T_âb̂| for tensors built directly, and the size of the cancelling terms
max(|L|ᵀ|T₀||L|) for tensors built as T = Lᵀ T₀ L (boosted or rotated frames),
whose components carry a round-off of a few ε times that size, not of max|T|
(a boosted Λ keeps its size while its terms grow like γ²).
Random tests print their seed (fixture ``rng`` of tests/conftest.py).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import minimize

from auditor.conditions import (Margins, all_margins, dec_lower_bound, dec_margin,
                                fibonacci_directions, nec_margin, sec_margin, wec_margin)

EPS = np.finfo(float).eps


def tol_of(T):
    """64 ε max|T_âb̂| per tensor (module docstring)."""
    return 64.0 * EPS * np.abs(T).max(axis=(-2, -1))


def in_frames(T0, Ls):
    """(T, tol): T[i] = Ls[i]ᵀ T0[i] Ls[i] and 64 ε max(|L|ᵀ|T0||L|) (module docstring)."""
    T0 = np.broadcast_to(T0, (len(Ls), 4, 4))
    T = np.array([transform(t, L) for t, L in zip(T0, Ls)])
    terms = np.array([np.abs(L).T @ np.abs(t) @ np.abs(L) for t, L in zip(T0, Ls)])
    return T, tol_of(terms)


# -- building tensors --------------------------------------------------------------

def rotation(rng):
    """A random spatial rotation as a 4x4 Lorentz matrix (n unchanged)."""
    q, r = np.linalg.qr(rng.normal(size=(3, 3)))
    q = q * np.sign(np.diag(r))
    L = np.eye(4)
    L[1:, 1:] = q
    return L


def boost(rapidity, direction):
    """Pure boost Λ (ΛᵀηΛ = η) of the given rapidity along a unit 3-vector."""
    n = np.asarray(direction, float) / np.linalg.norm(direction)
    g, sh = np.cosh(rapidity), np.sinh(rapidity)
    L = np.eye(4)
    L[0, 0] = g
    L[0, 1:] = L[1:, 0] = sh * n
    L[1:, 1:] += (g - 1.0) * np.outer(n, n)
    return L


def transform(T, L):
    """Lower-index components in the frame e'_â = L^b̂_â e_b̂: T' = Lᵀ T L."""
    return L.T @ T @ L


def type_I(rho, p1, p2, p3):
    """T_âb̂ = diag(ρ, p1, p2, p3) (lower indices equal upper for a diagonal T)."""
    return np.diag([rho, p1, p2, p3]).astype(float)


def type_II(mu, f, p2, p3):
    """Published-checks §9: T_âb̂ = [[μ+f, −f], [−f, −μ+f]] ⊕ diag(p2, p3)."""
    T = np.zeros((4, 4))
    T[0, 0], T[0, 1], T[1, 0], T[1, 1] = mu + f, -f, -f, -mu + f
    T[2, 2], T[3, 3] = p2, p3
    return T


def random_symmetric(rng, n):
    T = rng.normal(size=(n, 4, 4))
    return 0.5 * (T + np.swapaxes(T, 1, 2))


# -- brute force over dense observer sets -------------------------------------------

DENSE = fibonacci_directions(20000)
# Spacing h of the dense set: Fibonacci points cover the sphere with cells of
# area 4π/n, h = sqrt(4π/n) ≈ 0.025; the nearest point to any direction is
# within ~h (common practice for quasi-uniform lattices; 2h is used below).
H_DENSE = np.sqrt(4 * np.pi / len(DENSE))
SPEEDS = np.linspace(0.0, 1.0, 41)


def brute(T):
    """Dense-sample minima (nec, wec, sec, dec) of one tensor.

    DEC samples s1 densely and minimises over s2 in closed form
    (s2 = −(b + A s1)/|b + A s1|, module docstring of margins).
    """
    def ball(X):
        rho, b, A = X[0, 0], X[0, 1:], X[1:, 1:]
        lin = DENSE @ b
        quad = np.einsum("ki,ij,kj->k", DENSE, A, DENSE)
        vals = rho + 2 * SPEEDS[:, None] * lin + SPEEDS[:, None] ** 2 * quad
        return vals[-1].min(), vals.min()

    eta = np.diag([-1.0, 1, 1, 1])
    nec, wec = ball(T)
    _, sec = ball(T - 0.5 * np.trace(eta @ T) * eta)
    rho, b, A = T[0, 0], T[0, 1:], T[1:, 1:]
    dec = (rho + DENSE @ b - np.linalg.norm(b + DENSE @ A, axis=1)).min()
    return np.array([nec, wec, sec, dec])


def exact4(T):
    """Exact margins (nec, wec, sec, dec), shape (4, N)."""
    return np.array([nec_margin(T)[0], wec_margin(T)[0], sec_margin(T)[0], dec_margin(T)[0]])


def check_against_brute(T, tol=None):
    """exact ≤ brute + tol, and brute − exact within the sampling bound.

    Bound: near a smooth minimum the Riemannian Hessian of (1) has norm
    ≤ 4‖A‖ + 2|b| ≤ 16 max|T| (derived), so a sample within 2h costs at most
    ½·16·(2h)² max|T| = 32 h² max|T|; the WEC/SEC speed grid adds its own
    spacing (the ball minimum of these tensors is at v = 0 or v = 1, on the
    grid). The DEC scan is only Lipschitz (constant |b| + ‖A‖ ≤ 5 max|T|),
    bound 10 h max|T|.
    """
    ex = exact4(T)
    scale = np.abs(T).max(axis=(1, 2))
    tol = tol_of(T) if tol is None else tol
    for i in range(T.shape[0]):
        br = brute(T[i])
        assert np.all(ex[:, i] <= br + tol[i]), (ex[:, i], br)
        bound = np.array([32, 32, 32, 0]) * H_DENSE**2 * scale[i]
        bound[3] = 10 * H_DENSE * scale[i]
        assert np.all(br - ex[:, i] <= bound), (ex[:, i], br, bound)


# -- type I -------------------------------------------------------------------------

def type_I_closed_forms(rho, p):
    """Exact margins of diag(ρ, p1, p2, p3) in the contract normalisation (derived).

    NEC: min_{|s|=1} ρ + Σ p_i s_i² = ρ + min_i p_i.
    WEC: min_{|w|≤1} ρ + Σ p_i w_i² = ρ + min(0, min_i p_i).
    SEC: X = T − ½ tr T η has X_00 = ½(ρ + Σp), X_ii = p_i + ½(ρ − Σp), so the
         WEC formula gives min(½(ρ + Σp), min_i (ρ + p_i)).
    DEC: min_{s1,s2} ρ + s1ᵀ diag(p) s2 = ρ − max_i |p_i| (Cauchy–Schwarz,
         attained at s1 = e_j, s2 = −sign(p_j) e_j).
    Their signs reproduce Hawking & Ellis 1973 §4.3 (from memory), as listed
    in published-checks §9: NEC ρ + p_i ≥ 0; WEC ρ ≥ 0 and NEC; SEC
    ρ + Σp_i ≥ 0 and NEC; DEC ρ ≥ |p_i|.
    """
    nec = rho + p.min(axis=1)
    wec = rho + np.minimum(0.0, p.min(axis=1))
    sec = np.minimum(0.5 * (rho + p.sum(axis=1)), (rho[:, None] + p).min(axis=1))
    dec = rho - np.abs(p).max(axis=1)
    return np.array([nec, wec, sec, dec])


def test_type_I_closed_forms_rotated_and_rescaled(rng):
    n = 300
    rho = rng.uniform(-1, 1, n)
    p = rng.uniform(-1, 1, (n, 3))
    # Units spanning the double range: no under- or overflow in the kernels.
    unit = np.array([1e-150, 1e-30, 1.0, 1e30, 1e150])[rng.integers(0, 5, n)]
    T0 = np.array([type_I(rho[i], *p[i]) * unit[i] for i in range(n)])
    T, tol = in_frames(T0, [rotation(rng) for _ in range(n)])
    expected = type_I_closed_forms(rho, p) * unit
    got = exact4(T)
    assert np.all(np.abs(got - expected) <= tol), np.abs(got - expected).max(axis=1)


def test_type_I_brute_force(rng):
    T0 = np.array([type_I(*rng.uniform(-1, 1, 4)) for _ in range(8)])
    check_against_brute(*in_frames(T0, [rotation(rng) for _ in range(8)]))


@pytest.mark.parametrize("case, rho, p, verdict", [
    # Published-checks §6 (derived; textbook statement from memory): Λ > 0,
    # ρ = Λ/8π, p = −ρ: NEC, WEC, DEC hold (NEC saturated), SEC violated.
    ("lambda>0", 1.0, (-1.0, -1.0, -1.0), {"NEC": 0, "WEC": 0, "SEC": -1, "DEC": 0}),
    # Λ < 0: WEC and DEC violated, SEC holds, NEC saturated (same source).
    # SEC is saturated too in this normalisation: X = Λη/8π gives
    # X(n+w, n+w) = −Λ(1 − |w|²)/8π, zero on the null observers (derived).
    ("lambda<0", -1.0, (1.0, 1.0, 1.0), {"NEC": 0, "WEC": -1, "SEC": 0, "DEC": -1}),
    # Published-checks §5 (derived; textbook, memory): Reissner–Nordström static
    # frame ρ, p_r = −ρ, p_t = +ρ: all hold; NEC and DEC saturated. WEC and SEC
    # margins are then 0 as well: their minima include the null observers, so
    # they never exceed the NEC margin (derived).
    ("reissner-nordstrom", 1.0, (-1.0, 1.0, 1.0), {"NEC": 0, "WEC": 0, "SEC": 0, "DEC": 0}),
    # Published-checks §7 (text, tertiary): perfect fluid p = wρ, ρ > 0:
    # NEC ⇔ w ≥ −1, SEC ⇔ w ≥ −1/3, DEC ⇔ |w| ≤ 1.
    ("fluid w=-1/2", 1.0, (-0.5,) * 3, {"NEC": +1, "WEC": +1, "SEC": -1, "DEC": +1}),
    ("fluid w=2", 1.0, (2.0,) * 3, {"NEC": +1, "WEC": +1, "SEC": +1, "DEC": -1}),
    ("fluid w=-2", 1.0, (-2.0,) * 3, {"NEC": -1, "WEC": -1, "SEC": -1, "DEC": -1}),
])
def test_published_verdicts_in_boosted_frames(rng, case, rho, p, verdict):
    """Sign of the margin (−1 violated, 0 saturated, +1 strictly holds) in the
    rest frame and after random boosts (rapidity ≤ 2) and rotations."""
    T0 = type_I(rho, *p) / (8 * np.pi)
    frames = [np.eye(4)] + [rotation(rng) @ boost(rng.uniform(0, 2), rng.normal(size=3))
                            @ rotation(rng) for _ in range(20)]
    T, tol = in_frames(T0, frames)
    got = dict(zip(["NEC", "WEC", "SEC", "DEC"], exact4(T)))
    for cond, sign in verdict.items():
        m = got[cond]
        if sign == 0:
            assert np.all(np.abs(m) <= tol), (case, cond, m)
        elif sign > 0:
            assert np.all(m > tol), (case, cond, m)
        else:
            assert np.all(m < -tol), (case, cond, m)


# -- type II ------------------------------------------------------------------------

def type_II_verdicts(mu, f, p2, p3):
    """Published-checks §9 (derived) for the type II form above."""
    nec = (f >= 0) & (mu + p2 >= 0) & (mu + p3 >= 0)
    return {"NEC": nec, "WEC": nec & (mu >= 0), "SEC": nec & (p2 + p3 >= 0),
            "DEC": (f >= 0) & (mu >= np.abs(p2)) & (mu >= np.abs(p3))}


def test_type_II_signs_match_published_inequalities(rng):
    n = 600
    mu, f, p2, p3 = rng.uniform(-1, 1, (4, n))
    T0 = np.array([type_II(mu[i], f[i], p2[i], p3[i]) for i in range(n)])
    T, tol = in_frames(T0, [rotation(rng) for _ in range(n)])
    # Rotations keep n, so the published inequalities apply unchanged.
    got = dict(zip(["NEC", "WEC", "SEC", "DEC"], exact4(T)))
    for cond, holds in type_II_verdicts(mu, f, p2, p3).items():
        m = got[cond]
        # Where a condition holds it is saturated: k = n + e_x gives
        # T(k, k) = (μ+f) − 2f + (−μ+f) = 0 (derived), and the rotated frame
        # keeps that observer, so the margin is 0 within round-off.
        assert np.all(np.abs(m[holds]) <= tol[holds]), cond
        assert np.all(m[~holds] < -tol[~holds]), cond
    assert 0 < type_II_verdicts(mu, f, p2, p3)["DEC"].sum() < n   # both branches tested


def test_type_II_nec_closed_form(rng):
    """For f ≥ 0, with c = min(μ + p2, μ + p3): on |s| = 1 the NEC quantity is
    (μ+p2)s2² + (μ+p3)s3² + f(1 − s1)² (derived from the §9 form), minimised by
    putting all of 1 − s1² on the smaller coefficient; for c < 0 the minimum of
    c(1 − r²) + f(1 − r)² over s1 = r is at r = f/(f − c), value −c²/(f − c);
    for c ≥ 0 it is 0 at s = e_x (derived by hand)."""
    n = 400
    mu, p2, p3 = rng.uniform(-1, 1, (3, n))
    f = rng.uniform(0, 1, n)
    T0 = np.array([type_II(mu[i], f[i], p2[i], p3[i]) for i in range(n)])
    T, tol = in_frames(T0, [rotation(rng) for _ in range(n)])
    c = np.minimum(mu + p2, mu + p3)
    with np.errstate(divide="ignore", invalid="ignore"):
        expected = np.where(c < 0, -c * c / (f - c), 0.0)
    # The closed form's own evaluation costs a few ε relative.
    assert np.all(np.abs(nec_margin(T)[0] - expected) <= tol + 8 * EPS * np.abs(expected))


def test_type_II_brute_force(rng):
    T0 = np.array([type_II(*rng.uniform(-1, 1, 4)) for _ in range(8)])
    check_against_brute(*in_frames(T0, [rotation(rng) for _ in range(8)]))


# -- a deliberately naive reference ------------------------------------------------

def _unit(theta, phi):
    """s(θ, φ) and its derivatives ∂s/∂θ, ∂s/∂φ."""
    st, ct, sp, cp = np.sin(theta), np.cos(theta), np.sin(phi), np.cos(phi)
    return (np.array([st * cp, st * sp, ct]), np.array([ct * cp, ct * sp, -st]),
            np.array([-st * sp, st * cp, 0.0]))


def naive_margins(T, rng, starts, dec_starts):
    """scipy.optimize (BFGS, chain-rule gradients) on angle parametrisations,
    best of ``starts`` random starts per condition (``dec_starts`` for DEC,
    whose 4-dimensional problem costs more per start). Shares no code with the
    package. Ball points are w = sin²(ψ) s(θ, φ). Each start uses its own
    random orientation R of the angle chart (s = R s(θ, φ)), so the chart's
    poles, where BFGS stalls, fall in different places."""
    eta = np.diag([-1.0, 1, 1, 1])
    X = T - 0.5 * np.trace(eta @ T) * eta

    def chart(R, theta, phi):
        s, st, sp = _unit(theta, phi)
        return R @ s, R @ st, R @ sp

    def sphere(M, R):
        def f(x):
            s, st, sp = chart(R, x[0], x[1])
            k = np.concatenate([[1.0], s])
            g = 2.0 * (M @ k)[1:]
            return k @ M @ k, np.array([g @ st, g @ sp])
        return f

    def ball(M, R):
        def f(x):
            s, st, sp = chart(R, x[0], x[1])
            r = np.sin(x[2]) ** 2
            k = np.concatenate([[1.0], r * s])
            g = 2.0 * (M @ k)[1:]
            return k @ M @ k, np.array([r * (g @ st), r * (g @ sp),
                                        2 * np.sin(x[2]) * np.cos(x[2]) * (g @ s)])
        return f

    def pair(R):
        def f(x):
            s1, s1t, s1p = chart(R, x[0], x[1])
            s2, s2t, s2p = chart(R, x[2], x[3])
            k1 = np.concatenate([[1.0], s1])
            k2 = np.concatenate([[1.0], s2])
            g1, g2 = (T @ k2)[1:], (T @ k1)[1:]
            return k1 @ T @ k2, np.array([g1 @ s1t, g1 @ s1p, g2 @ s2t, g2 @ s2p])
        return f

    problems = {"NEC": (lambda R: sphere(T, R), 2), "WEC": (lambda R: ball(T, R), 3),
                "SEC": (lambda R: ball(X, R), 3), "DEC": (pair, 4)}
    out = {}
    for name, (make, dim) in problems.items():
        best = np.inf
        for _ in range(dec_starts if name == "DEC" else starts):
            R = rotation(rng)[1:, 1:]
            res = minimize(make(R), rng.uniform(0, 2 * np.pi, dim), jac=True, method="BFGS",
                           options={"gtol": 1e-10})
            best = min(best, res.fun)
        out[name] = best
    return out


def test_dec_on_nearly_isotropic_stresses(rng):
    """A = cI + 1e-4 noise with a large b: the DEC minima form a shallow ring and
    overshooting Newton steps used to stop the search up to 4e-5 max|T| above the
    minimum. With backtracking the margin is not above a dense scan (an upper bound
    of the true minimum, module docstring of margins) by more than 1e-7 max|T|
    (measured during development: never above a 40 000-direction scan on 3000)."""
    n = 200
    T = random_symmetric(rng, n)
    c = rng.normal(size=n)
    T[:, 1:, 1:] = c[:, None, None] * np.eye(3) + 1e-4 * T[:, 1:, 1:]
    md = dec_margin(T)[0]
    scale = np.abs(T).max(axis=(1, 2))
    rho, b, A = T[:, 0, 0], T[:, 0, 1:], T[:, 1:, 1:]
    dense = np.array([(rho[i] + DENSE @ b[i] - np.linalg.norm(b[i] + DENSE @ A[i], axis=1)).min()
                      for i in range(n)])
    excess = (md - dense) / scale
    assert excess.max() < 1e-7, excess.max()


def test_against_naive_optimiser(rng):
    plain = random_symmetric(rng, 3)
    big_stress = random_symmetric(rng, 3)
    big_stress[:, 1:, 1:] *= 10
    boosted, tol_b = in_frames(random_symmetric(rng, 3),
                               [boost(rng.uniform(0, 2), rng.normal(size=3)) for _ in range(3)])
    T = np.concatenate([plain, big_stress, boosted])
    tol = np.concatenate([tol_of(plain), tol_of(big_stress), tol_b])
    ex = dict(zip(["NEC", "WEC", "SEC", "DEC"], exact4(T)))
    scale = np.abs(T).max(axis=(1, 2))
    close = []
    for i in range(T.shape[0]):
        ref = naive_margins(T[i], rng, starts=16, dec_starts=10)
        for cond in ("NEC", "WEC", "SEC", "DEC"):
            # The exact kernels are never beaten by the naive optimiser.
            assert ex[cond][i] <= ref[cond] + tol[i], (i, cond, ex[cond][i], ref[cond])
            # BFGS stops at gradient 1e-10 (or when it can no longer descend),
            # a value error ~(1e-10)²/curvature at a non-degenerate minimum; at
            # degenerate (flat) minima the value error is ~|gradient|·distance,
            # so 1e-9 relative bounds both.
            close.append((cond, ref[cond] - ex[cond][i] <= 1e-9 * scale[i]))
    # NEC/WEC/SEC have few local minima on a 2-sphere or 3-ball: 16 starts in
    # randomly oriented charts found the global one in every case of 40 seeds
    # during development (10 starts missed it in 2 runs of 80). The
    # 4-dimensional DEC landscape can trap every start (seen in development),
    # so there the naive optimiser need only agree in most cases; the other
    # direction is asserted above for every case.
    for cond in ("NEC", "WEC", "SEC"):
        assert all(ok for c, ok in close if c == cond), cond
    dec_ok = [ok for c, ok in close if c == "DEC"]
    assert sum(dec_ok) >= 0.75 * len(dec_ok)


# -- worst observers, hard case, lower bound, scaling ---------------------------------

def test_worst_observers_attain_the_margins(rng):
    plain = random_symmetric(rng, 50)
    boosted, tol_b = in_frames(np.array([type_II(*rng.uniform(-1, 1, 4)) for _ in range(20)]),
                               [boost(rng.uniform(0, 3), rng.normal(size=3)) for _ in range(20)])
    T = np.concatenate([plain, boosted])
    tol = np.concatenate([tol_of(plain), tol_b])
    res = all_margins(T)
    assert isinstance(res, Margins)
    n = T.shape[0]
    assert res.nec_observer.shape == (n, 4) and res.dec_pair.shape == (n, 2, 4)
    eta = np.diag([-1.0, 1, 1, 1])
    X = T - 0.5 * np.einsum("ab,nab->n", eta, T)[:, None, None] * eta
    k = res.nec_observer
    # Normalised against n: k^0 = 1, |s| = 1 (null); |w| ≤ 1 (causal).
    assert np.all(k[:, 0] == 1.0)
    assert np.allclose(np.linalg.norm(k[:, 1:], axis=1), 1.0, atol=8 * EPS)
    assert np.all(np.linalg.norm(res.wec_observer[:, 1:], axis=1) <= 1.0 + 8 * EPS)
    assert np.all(np.linalg.norm(res.sec_observer[:, 1:], axis=1) <= 1.0 + 8 * EPS)
    assert np.allclose(np.linalg.norm(res.dec_pair[:, :, 1:], axis=2), 1.0, atol=8 * EPS)
    value = lambda M, a, b: np.einsum("na,nab,nb->n", a, M, b)   # noqa: E731
    assert np.all(np.abs(value(T, k, k) - res.nec) <= tol)
    assert np.all(np.abs(value(T, res.wec_observer, res.wec_observer) - res.wec) <= tol)
    assert np.all(np.abs(value(X, res.sec_observer, res.sec_observer) - res.sec) <= 2 * tol)
    k1, k2 = res.dec_pair[:, 0], res.dec_pair[:, 1]
    assert np.all(np.abs(value(T, k1, k2) - res.dec) <= tol)
    # DEC includes the pairs k1 = k2, so it never exceeds the NEC margin.
    assert np.all(res.dec <= res.nec + tol)


def test_shared_computation_agrees_with_each_condition_alone(rng):
    """all_margins shares one eigen-decomposition and secular solve among the four
    conditions (SEC's X has A's eigenvectors, shifted eigenvalues); each standalone
    function solves its own problem. Same values to round-off, on plain, type II
    (boosted) and vacuum-like tensors (derivation in the margins module)."""
    plain = random_symmetric(rng, 200)
    boosted, tol_b = in_frames(np.array([type_II(*rng.uniform(-1, 1, 4)) for _ in range(50)]),
                               [boost(rng.uniform(0, 3), rng.normal(size=3)) for _ in range(50)])
    tiny = 1e-30 * random_symmetric(rng, 20)
    T = np.concatenate([plain, boosted, tiny])
    tol = np.concatenate([tol_of(plain), tol_b, tol_of(tiny)])
    res = all_margins(T)
    alone = exact4(T)
    for k, got in enumerate((res.nec, res.wec, res.sec, res.dec)):
        assert np.all(np.abs(got - alone[k]) <= 2 * tol), ("NEC", "WEC", "SEC", "DEC")[k]


def test_settled_points_skip_the_dec_search_within_the_round_off_bound(rng):
    """Where T is at its round-off τ (every |T_âb̂| ≤ τ), the DEC search may be
    skipped: any margin of such a tensor lies within ±(1 + 2√3 + 3)τ < 8τ =
    MARGIN_FACTOR·τ (|ρ| ≤ τ, |b| ≤ √3τ, ‖A‖₂ ≤ 3τ; derived in the margins
    module), so the reported NEC-pair value (an upper bound of the exact DEC
    margin) and the exact value give the same "saturated" verdict."""
    from auditor.conditions.margins import margins_with_observers
    from auditor.conditions.stress import MARGIN_FACTOR
    T = random_symmetric(rng, 300)
    T /= np.abs(T).max(axis=(1, 2))[:, None, None]          # τ = 1
    exact = margins_with_observers(T)["DEC"][0]
    skipped = margins_with_observers(T, settled=np.ones(len(T), bool))["DEC"][0]
    assert np.all(np.abs(exact) < MARGIN_FACTOR) and np.all(np.abs(skipped) < MARGIN_FACTOR)
    assert np.all(skipped >= exact - tol_of(T))
    assert np.any(skipped > exact + 1e-3), "control: the search does change some values"
    # Unsettled points are untouched.
    half = np.arange(len(T)) % 2 == 0
    mixed = margins_with_observers(T, settled=half)["DEC"][0]
    assert np.array_equal(mixed[~half], exact[~half])


def test_hard_case_of_the_secular_equation():
    """b orthogonal to the lowest eigenspace of A (the "hard case" of Moré &
    Sorensen 1983): ρ = 1, A = diag(−1, −1, 2), b = (0, 0, ½).
    On |s| = 1: 1 + s3 − (1 − s3²) + 2 s3² = s3 + 3 s3², minimal at s3 = −1/6
    with value −1/12 (derived by hand)."""
    T = type_I(1.0, -1.0, -1.0, 2.0)
    T[0, 3] = T[3, 0] = 0.5
    m, s = nec_margin(T[None])
    assert abs(m[0] - (-1.0 / 12.0)) <= tol_of(T)
    # The value fixes s only to ~sqrt(tol) (it is stationary there), so 1e-8;
    # the secular solve itself is accurate to a few ε.
    assert abs(s[0, 2] - (-1.0 / 6.0)) <= 1e-8
    # b = 0 with a degenerate lowest eigenspace: the NEC minimiser is any unit
    # vector in it, value ρ + λ1 (derived).
    T2 = type_I(2.0, -1.5, -1.5, 0.5)
    m2, s2 = nec_margin(T2[None])
    assert abs(m2[0] - 0.5) <= tol_of(T2) and abs(s2[0, 2]) <= 1e-12
    check_against_brute(np.array([T, T2]))


def test_dec_lower_bound(rng):
    T = np.concatenate([random_symmetric(rng, 300),
                        np.array([type_I(*rng.uniform(-1, 1, 4)) for _ in range(50)])])
    lb = dec_lower_bound(T)
    md = dec_margin(T)[0]
    tol = tol_of(T)
    assert np.all(lb <= md + tol)
    # For b = 0 the bound D(max|λ|) = ρ − max|λ| is attained (derived), so it
    # equals the type I closed form.
    assert np.all(np.abs(lb[300:] - md[300:]) <= tol[300:])
    # Random tensors: the dual is tight in a good share of cases (about two
    # thirds in development) and never above the margin.
    assert np.mean(np.abs(lb[:300] - md[:300]) <= tol[:300]) > 0.3


def test_zero_tensor_empty_batch_and_scaling():
    z = np.zeros((1, 4, 4))
    assert np.all(exact4(z) == 0.0)
    empty = all_margins(np.zeros((0, 4, 4)))
    assert empty.nec.shape == (0,) and empty.dec_pair.shape == (0, 2, 4)
    T = type_II(0.3, -0.2, 0.1, -0.4)[None]
    base = exact4(T)
    for unit in (1e-300, 1e300):
        # Kernels divide by max|T| first: exact scaling, no under/overflow.
        assert np.all(np.abs(exact4(T * unit) - base * unit) <= tol_of(T * unit))


@pytest.mark.parametrize("bad, match", [
    (np.zeros((4, 4)), r"`T` must have shape \(N, 4, 4\)"),
    (np.zeros((2, 3, 3)), r"`T` must have shape \(N, 4, 4\)"),
    (np.full((1, 4, 4), np.nan), r"`T` must be finite"),
])
def test_input_validation(bad, match):
    for fn in (nec_margin, wec_margin, sec_margin, dec_margin, dec_lower_bound, all_margins):
        with pytest.raises(ValueError, match=match):
            fn(bad)


def test_dec_option_validation():
    with pytest.raises(ValueError, match="`n_dirs` and `n_starts` must be positive"):
        dec_margin(np.zeros((1, 4, 4)), n_dirs=0)


# -- Lorentz covariance of the verdicts -------------------------------------------------

def test_verdicts_are_frame_independent(rng):
    """The sign of each margin (holds or not) does not depend on the frame, though
    the normalised values do (each condition is a statement about all observers).
    Random tensors whose margins are clearly non-zero (|m| > 1e-6 max|T|, so
    round-off cannot decide) are boosted with rapidity ≤ 2."""
    prm = rng.uniform(-1, 1, (60, 4))
    T0 = np.concatenate([random_symmetric(rng, 60),
                         np.array([type_I(*rng.uniform(-1, 1, 4)) for _ in range(60)]),
                         np.array([type_II(*p) for p in prm])])
    T1, tol1 = in_frames(T0, [rotation(rng) @ boost(rng.uniform(0, 2), rng.normal(size=3))
                              for _ in T0])
    m0, m1 = exact4(T0), exact4(T1)
    tol0 = tol_of(T0)
    clear = (np.abs(m0) > 1e-6 * np.abs(T0).max(axis=(1, 2)))
    assert clear.sum() > 300
    holds0 = m0 >= -tol0
    holds1 = m1 >= -tol1
    assert np.array_equal(holds0[clear], holds1[clear])
    # Type II conditions that hold (published-checks §9) are saturated
    # (T(k, k) = 0 for the null eigenvector k) in every frame.
    verdicts = type_II_verdicts(*prm.T)
    for j, cond in enumerate(["NEC", "WEC", "SEC", "DEC"]):
        ok = verdicts[cond]
        assert np.all(np.abs(m1[j, 120:][ok]) <= tol1[120:][ok]), cond
        assert np.all(m1[j, 120:][~ok] < -tol1[120:][~ok]), cond
