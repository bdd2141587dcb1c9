"""Exact energy-condition margins of orthonormal-frame stress-energy tensors.

Input convention (DEVELOPERS.md, "Conventions")
-----------------------------------------------
``T`` has shape ``(N, 4, 4)``: for each of N points, the LOWER-index
components T_âb̂ = T(e_â, e_b̂) in an orthonormal frame whose leg e_0 = n is
the unit future timelike vector of the reference observer and e_1, e_2, e_3
are orthonormal spatial legs; η = diag(−1, 1, 1, 1), signature (−,+,+,+),
G = c = 1. T is symmetrised, (T + Tᵀ)/2, before use. Notation:
ρ = T_00, b_i = T_0i, A_ij = T_ij.

Normalisation (cli-contract, "Verdict semantics")
-------------------------------------------------
Observers are normalised against n, not to unit length: null k = n + s with
|s| = 1, causal u = n + w with |w| ≤ 1. With k^â = (1, s),

    T(n + s, n + s) = ρ + 2 b·s + sᵀ A s.                                  (1)

* NEC  m_N = min_{|s|=1} (1).
* WEC  m_W = min_{|w|≤1} ρ + 2 b·w + wᵀ A w.
* SEC  m_S = the WEC formula applied to X = T − ½ (tr T) η with
  tr T = η^{ab} T_ab = −ρ + tr A, i.e. X_00 = ½(ρ + tr A), X_0i = b_i,
  X_ij = A_ij − ½(tr A − ρ) δ_ij.
* DEC  m_D = min_{|s1|=|s2|=1} T(n + s1, n + s2)
  = ρ + b·(s1 + s2) + s1ᵀ A s2  (DEC holds iff T(k1, k2) ≥ 0 for every pair
  of future null vectors).

A negative margin means the condition is violated. The worst observers are
returned as spatial parts (s, w, or the pair s1, s2); the 4-vectors in the
frame are (1, s) etc. (:class:`Margins` carries them) and the caller maps them
to coordinates. Margins are in the units of T (1/length², geometric).

Methods and accuracy
--------------------
Every tensor is divided by its largest component before the work and the
margin multiplied back, so no under- or overflow occurs for any finite T.

*Sphere (NEC, and the boundary of the WEC/SEC ball).* min sᵀAs + 2bᵀs on
|s| = 1 is the equality-constrained trust-region subproblem. s is a global
minimiser iff (A − μI) s = −b with A − μI positive semidefinite (Moré &
Sorensen 1983, stated there for the ball, lemma numbers from memory; the
equality case: Gander, Golub & von Matt 1989 — from memory). With the
eigen-decomposition A = Q diag(λ1 ≤ λ2 ≤ λ3) Qᵀ, β = Qᵀb, d_i = λ_i − λ1 and
t = λ1 − μ ≥ 0, the multiplier solves the secular equation

    φ(t) = Σ_i β_i² / (d_i + t)² = 1,                                      (2)

solved by safeguarded Newton iteration on the nearly linear function
1/√φ(t) − 1 (Moré & Sorensen 1983; Reinsch 1971 — from memory) inside
the bracket max_i(|β_i| − d_i, 0) ≤ t ≤ |β|, with bisection (geometric when
the bracket spans decades) whenever a Newton step leaves it. The "hard
case" (β = 0 on the lowest eigenspace and φ(0) ≤ 1) takes t = 0 and adds the
missing length along q1. The minimiser s = −Σ β_i/(d_i + t) q_i is
normalised and (1) evaluated directly at it; since (1) is stationary on the
sphere there, an O(ε) error in s changes the value by O(ε²|A|): the margin is
exact to the round-off of evaluating (1), a few ε·max|T_âb̂|.

*Ball (WEC, SEC).* The minimum over |w| ≤ 1 is the smaller of the sphere
minimum and, when A is positive definite and w* = −A⁻¹b has |w*| < 1, the
interior value at w* (Moré & Sorensen 1983). Same accuracy.

*DEC.* For fixed s1 the minimum over s2 is ρ + b·s1 − |b + A s1|, attained
at s2 = −(b + A s1)/|b + A s1| (any s2 if that vector vanishes). The
resulting function of s1 is minimised globally by: (i) evaluating it on a
Fibonacci set of ``n_dirs`` directions for all points at once and keeping
the ``n_starts`` best; (ii) adding special starts: the NEC minimiser (s1 = s2
= s_N), ±q1, ±q3 and ±b/|b|; (iii) alternating exact block minimisation
s2 ← −(b + A s1)/|…|, s1 ← −(b + A s2)/|…| (never increases the objective),
four steps per start: they only rank the starts;
(iv) a safeguarded Riemannian Newton iteration on S² × S² for the three
best starts (saddle-free: Hessian eigenvalues replaced by their moduli;
a refused step is shortened and tried again, unless its model decrease
|G||step| is already ≤ 1e−17, when a shorter one could gain round-off only;
where the Hessian has negative curvature, trial steps of several lengths
along its most negative eigenvector too, so that stationary saddles are
left; a step is accepted only if it lowers the objective; a row stops when a
step is refused, its gradient is at round-off, or the step's model decrease
|G||step| ≤ 1e−17 and the decrease obtained ≤ 1e−16 (scaled units: the point
is then within ~1e−9 of a stationary point that is no saddle, where the
objective is exact to round-off); Absil, Mahony & Sepulchre 2008, ch. 6 —
from memory);
(v) the minimum with the NEC pair. The value is the objective at real unit
vectors, so it is never below the true minimum by more than evaluation
round-off. It equals the true minimum unless every start misses the global
basin; :func:`dec_lower_bound` (the Lagrangian dual, below) certifies it
where the two agree. Points where the dual is attained by the NEC pair (about
two thirds of random tensors) are certified before the search and skip it.
Measured during development: on 3000 random tensors (Gaussian, large
stresses, boosts to rapidity 4, nearly degenerate A, boosted type II) the
margin was never above a dense scan of 40 000 directions (with the exact
inner minimum), and on 160 it was never above a 40-start BFGS optimiser by
more than 1.1e−15 relative (and below it by up to 2 % where BFGS missed);
on 20 000 rotated type II tensors, half within 1e−3 of the DEC boundary
μ = |p2|, its sign agreed with published-checks §9 every time (the saddle
steps of (iv) were added after a violation of 1e−7, at small angles from the
NEC pair, had been missed). A later check on nearly isotropic stresses
(A = cI + 10⁻⁴ noise, large b; the minima then form a shallow ring) found
52 of 750 above the dense scan, by up to 4e−5 max|T_âb̂|: Newton steps that
overshot the curved valley were refused and the row stopped. With the
backtracking of (iv) (a refused step shortened by 4, up to six times, until
it lowers the objective) none of 4 × 750 such tensors was above the scan.
Those measurements ran 30 alternation steps per start; with four (and the
stopping rule of (iv)) the tests that keep them (tests/conditions/
test_margins.py: brute-force scans of type I and II tensors, the nearly
isotropic stresses, the naive optimiser, the published type II verdicts in
boosted frames) pass unchanged. Against the 30-step search on the 24 020
searched events of a 41³ tanh-wall bubble it agreed within 1e−15 (scaled
units); on the 4 207 searched of 20 000 random tensors (Gaussian, nearly
isotropic, large flux) it was above it on one tensor, by 1.1e−10, and below it
on one, by 3.5e−8.
Not shortening refused steps whose model decrease is at round-off raised
the margin by at most 8.9e−16 (scaled units; never lowered it: those shorter
steps had found evaluation round-off, not descent) on the 95 232 searched
events of a 65³ tanh-wall bubble and the 27 398 of 80 000 random tensors
(Gaussian, nearly isotropic, large flux, boosted null dust), and took 14 %
off the search.
Cost: ~0.1 ms per uncertified point in NumPy, ~8 µs in the compiled loop of
:mod:`auditor.native` (the same steps, event by event; the Hessian's
eigen-decomposition there in closed form from its 2×2 off-diagonal block).

*DEC lower bound.* For α, β with [[αI, A], [A, βI]] ⪰ 0 the Lagrangian gives
m_D ≥ ρ − (α+β)/2 − ½ cᵀ H⁻¹ c (c = (b, b)); by the swap symmetry of the
problem the best bound has α = β = a ≥ max|λ_i| and reads
D(a) = ρ − a − Σ β_i²/(a + λ_i), concave in a; its stationarity equation is
(2) with t = a + λ1. So D = m_N (and m_D = m_N, the NEC pair attains it) when
the NEC multiplier has t ≥ λ1 + max|λ_i|; otherwise D = D(max|λ_i|), which
may lie below m_D (duality gap).

References
----------
J. J. Moré and D. C. Sorensen, "Computing a trust region step",
SIAM J. Sci. Stat. Comput. 4 (1983) 553.
W. Gander, G. H. Golub and U. von Matt, "A constrained eigenvalue problem",
Linear Algebra Appl. 114/115 (1989) 815 (from memory).
C. H. Reinsch, "Smoothing by spline functions. II", Numer. Math. 16 (1971)
451 (from memory).
P.-A. Absil, R. Mahony and R. Sepulchre, Optimization Algorithms on Matrix
Manifolds, Princeton University Press (2008) (from memory).
S. W. Hawking and G. F. R. Ellis, The Large Scale Structure of Space-Time
(1973) §4.3 (the conditions; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import native
from .sampled import fibonacci_directions

__all__ = [
    "Margins",
    "all_margins",
    "dec_lower_bound",
    "dec_margin",
    "margins_with_observers",
    "nec_margin",
    "sec_margin",
    "wec_margin",
]

_EPS = np.finfo(float).eps
# Newton/bisection on (2): at most 200 steps. Newton converges in a handful;
# the bound only matters for bisection, which halves the bracket (or its
# logarithm) each step and so reaches relative width ε from any bracket
# within ~60 + 11 steps.
_SECULAR_MAX_ITER = 200

# DEC search defaults.
DEC_DIRECTIONS = 300   # Fibonacci starts: spacing ~ sqrt(4π/300) ≈ 0.2 rad
DEC_STARTS = 6         # best Fibonacci starts kept per point
_DEC_ALTERNATIONS = 4 
_DEC_NEWTON = 20      # Newton steps at most (rows stop when converged)
_DEC_POLISHED = 3     # starts per point polished by Newton
_DEC_BACKTRACK = 6    # step shortenings (by 4 each) tried where a Newton step fails
_DEC_STOP = 1e-17     # Newton rows stop once model and obtained decrease are at round-off
# Lengths (radians) of the trial steps along negative curvature.
_DEC_CURVATURE_STEPS = (0.5, 0.2, 0.08, 0.03, 0.01, 0.003)
_DEC_CHUNK = 2048      # points per block in the DEC search (memory ~ chunk × n_dirs × 3)


# ---------------------------------------------------------------- helpers
def _check_T(T) -> np.ndarray:
    T = np.asarray(T, dtype=float)
    if T.ndim != 3 or T.shape[1:] != (4, 4):
        raise ValueError(f"`T` must have shape (N, 4, 4), got {T.shape}.")
    if not np.all(np.isfinite(T)):
        raise ValueError("`T` must be finite.")
    return 0.5 * (T + np.swapaxes(T, 1, 2))


def _scaled(T: np.ndarray):
    """(ρ, b, A, scale) of T / max|T_âb̂|; scale = 1 where T = 0."""
    scale = np.abs(T).max(axis=(1, 2), initial=0.0)
    scale = np.where(scale > 0, scale, 1.0)
    Ts = T / scale[:, None, None]
    return Ts[:, 0, 0], Ts[:, 0, 1:].copy(), Ts[:, 1:, 1:].copy(), scale


def _sec_parts(rho, b, A):
    """(X_00, X_0i, X_ij) of X = T − ½ (tr T) η; tr T = −ρ + tr A."""
    trT = -rho + np.trace(A, axis1=1, axis2=2)
    return rho + 0.5 * trT, b, A - 0.5 * trT[:, None, None] * np.eye(3)


def _quad(rho, b, A, s):
    """ρ + 2 b·s + sᵀ A s for s (N, 3)."""
    return rho + 2.0 * np.einsum("ni,ni->n", b, s) + np.einsum("ni,nij,nj->n", s, A, s)


def _secular_t(beta2: np.ndarray, d: np.ndarray):
    """Root t ≥ 0 of φ(t) = Σ β_i²/(d_i + t)² = 1, and the hard-case mask.

    beta2, d: (N, 3), d ≥ 0 with d[:, 0] = 0. Hard case: no root with
    t > 0 (β vanishes where d = 0 and φ(0) ≤ 1); t = 0 is returned there.
    """
    babs = np.sqrt(beta2)
    hi = np.sqrt(beta2.sum(axis=1))
    lo = np.maximum((babs - d).max(axis=1), 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        phi0 = np.where(d > 0, beta2 / np.where(d > 0, d, 1.0) ** 2, 0.0).sum(axis=1)
    hard = (lo <= 0.0) & (phi0 <= 1.0)
    t = hi.copy()
    done = hard | (hi <= lo)
    for _ in range(_SECULAR_MAX_ITER):
        if np.all(done):
            break
        den = d + t[:, None]
        pos = den > 0
        dsafe = np.where(pos, den, 1.0)
        phi = np.where(pos, beta2 / dsafe**2, 0.0).sum(axis=1)
        dsum = np.where(pos, beta2 / dsafe**3, 0.0).sum(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            h = 1.0 / np.sqrt(phi) - 1.0          # increasing in t, zero at the root
            hp = dsum / (phi * np.sqrt(phi))     # h' (only steers the step)
        h = np.where(np.isfinite(h), h, np.inf)
        lo = np.where(h < 0, t, lo)
        hi = np.where(h > 0, t, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            tn = t - h / hp
        inside = np.isfinite(tn) & (tn > lo) & (tn < hi)
        geo = (lo > 0) & (hi > 4.0 * lo)
        mid = np.where(geo, np.sqrt(lo * np.where(geo, hi, 1.0)), 0.5 * (lo + hi))
        tn = np.where(inside, tn, mid)
        # Converged: h at round-off level (its value is O(1)), or bracket of
        # relative width 4ε.
        conv = (np.abs(h) <= 4.0 * _EPS) | (hi - lo <= 4.0 * _EPS * hi)
        t = np.where(done | conv, t, tn)
        done = done | conv
    t = np.where(hard, 0.0, t)
    return t, hard


def _sphere_min(rho, b, A):
    """Exact min over |s| = 1 of ρ + 2 b·s + sᵀ A s, batched (scaled units).

    Returns value (N,), s (N, 3), eigenvalues λ (N, 3) ascending, Q, β = Qᵀb,
    and the secular root t.
    """
    lam, Q = np.linalg.eigh(A)
    beta = np.einsum("nji,nj->ni", Q, b)
    d = np.maximum(lam - lam[:, :1], 0.0)
    d[:, 0] = 0.0
    beta2 = beta * beta
    t, _ = _secular_t(beta2, d)
    den = d + t[:, None]
    pos = den > 0
    c = np.where(pos, -beta / np.where(pos, den, 1.0), 0.0)
    # Length missing in the hard case (and O(ε) elsewhere): along q1, with
    # the sign of −β1 (any sign when β1 = 0).
    deficit = 1.0 - (c * c).sum(axis=1)
    sgn = np.where(c[:, 0] < 0, -1.0, 1.0)
    c[:, 0] = np.where(deficit > 0, sgn * np.sqrt(c[:, 0] ** 2 + np.maximum(deficit, 0.0)),
                       c[:, 0])
    s = np.einsum("nij,nj->ni", Q, c)
    s /= np.linalg.norm(s, axis=1, keepdims=True)
    return _quad(rho, b, A, s), s, lam, Q, beta, t


def _ball_min(rho, b, A, sphere=None):
    """Exact min over |w| ≤ 1 of ρ + 2 b·w + wᵀ A w (scaled units).

    ``sphere`` is the result of :func:`_sphere_min` for the same (ρ, b, A), if
    already known.
    """
    val, w, lam, Q, beta, _ = _sphere_min(rho, b, A) if sphere is None else sphere
    pd = lam[:, 0] > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        c = np.where(pd[:, None], -beta / np.where(pd[:, None], lam, 1.0), 0.0)
    inside = pd & ((c * c).sum(axis=1) < 1.0)
    if np.any(inside):
        wi = np.einsum("nij,nj->ni", Q, c)
        vi = _quad(rho, b, A, wi)
        better = inside & (vi < val)
        val = np.where(better, vi, val)
        w = np.where(better[:, None], wi, w)
    return val, w


# ---------------------------------------------------------------- NEC / WEC / SEC
def nec_margin(T):
    """NEC margin min_{|s|=1} T(n+s, n+s) and its minimiser s.

    Parameters
    ----------
    T : array (N, 4, 4)
        Orthonormal-frame lower-index components T_âb̂ (module docstring).

    Returns
    -------
    margin : array (N,)
        ρ + 2 b·s + sᵀ A s at the exact minimiser (formula (1)), units of T.
    s : array (N, 3)
        Unit spatial vector; the worst null observer is k^â = (1, s).
    """
    T = _check_T(T)
    rho, b, A, scale = _scaled(T)
    val, s, *_ = _sphere_min(rho, b, A)
    return val * scale, s


def wec_margin(T):
    """WEC margin min_{|w|≤1} T(n+w, n+w) and its minimiser w (N, 3).

    The worst observer is u^â = (1, w) (null when |w| = 1).
    """
    T = _check_T(T)
    rho, b, A, scale = _scaled(T)
    val, w = _ball_min(rho, b, A)
    return val * scale, w


def sec_margin(T):
    """SEC margin min_{|w|≤1} (T − ½ tr T η)(n+w, n+w) and its minimiser w (N, 3)."""
    T = _check_T(T)
    rho, b, A, scale = _scaled(T)
    val, w = _ball_min(*_sec_parts(rho, b, A))
    return val * scale, w


# ---------------------------------------------------------------- DEC
# In the DEC search every (point, start) pair is one row: rho (M,), b (M, 3),
# A (M, 3, 3), s1, s2 (M, 3).
def _matvec(A, s):
    return np.matmul(A, s[:, :, None])[:, :, 0]


def _dec_value(rho, b, A, s1, s2):
    """ρ + b·(s1 + s2) + s1ᵀ A s2, row by row."""
    return rho + ((s1 + s2) * b).sum(axis=1) + (s1 * _matvec(A, s2)).sum(axis=1)


def _unit(v):
    return v / np.sqrt((v * v).sum(axis=-1))[..., None]


def _tangent_basis(s):
    """Two orthonormal vectors spanning the tangent plane of the sphere at s, (M, 3, 2)."""
    idx = np.argmin(np.abs(s), axis=-1)
    e = np.zeros_like(s)
    e[np.arange(s.shape[0]), idx] = 1.0
    u = _unit(np.cross(s, e))
    v = np.cross(s, u)
    return np.stack([u, v], axis=-1)


def _dec_try(rho, b, A, p1, p2, E1, E2, step):
    """Objective at the retraction of (p1, p2) along the tangent step (M, 4)."""
    t1 = _unit(p1 + np.matmul(E1, step[:, :2, None])[:, :, 0])
    t2 = _unit(p2 + np.matmul(E2, step[:, 2:, None])[:, :, 0])
    return _dec_value(rho, b, A, t1, t2), t1, t2


def _dec_newton(rho, b, A, s1, s2, F, iters):
    """Safeguarded saddle-free Riemannian Newton on S² × S², rows still moving only."""
    active = np.ones(F.shape[0], dtype=bool)
    for _ in range(iters):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        r, bb, AA, p1, p2, f0 = rho[idx], b[idx], A[idx], s1[idx], s2[idx], F[idx]
        g1 = bb + _matvec(AA, p2)                 # ∂F/∂s1
        g2 = bb + _matvec(AA, p1)                 # ∂F/∂s2
        a1 = (p1 * g1).sum(axis=1)
        a2 = (p2 * g2).sum(axis=1)
        E1 = _tangent_basis(p1)
        E2 = _tangent_basis(p2)
        G = np.concatenate([np.matmul(g1[:, None, :], E1)[:, 0],
                            np.matmul(g2[:, None, :], E2)[:, 0]], axis=1)
        C = np.matmul(np.swapaxes(E1, 1, 2), np.matmul(AA, E2))
        H = np.zeros((idx.size, 4, 4))
        H[:, 0, 0] = H[:, 1, 1] = -a1
        H[:, 2, 2] = H[:, 3, 3] = -a2
        H[:, :2, 2:] = C
        H[:, 2:, :2] = np.swapaxes(C, 1, 2)
        w, V = np.linalg.eigh(H)
        # Saddle-free Newton: |eigenvalues|, floored at 1e-10 (scaled units,
        # |A| ≤ 3) so that flat directions give bounded steps; step ≤ 0.5.
        wa = np.maximum(np.abs(w), 1e-10)
        coef = np.matmul(G[:, None, :], V)[:, 0] / wa
        step = -np.matmul(V, coef[:, :, None])[:, :, 0]
        nrm = np.sqrt((step * step).sum(axis=1))
        step *= np.minimum(1.0, 0.5 / np.where(nrm > 0, nrm, 1.0))[:, None]
        best_f, t1, t2 = _dec_try(r, bb, AA, p1, p2, E1, E2, step)
        gn = np.sqrt((G * G).sum(axis=1))
        # Backtracking where the full step does not lower the objective: in a
        # shallow curved valley (nearly isotropic A, whose minima form a ring)
        # the quadratic model overshoots and the row would stop short of the
        # minimum. Not where the step's model decrease |G||step| is already at
        # round-off: a shorter step could lower F by round-off only.
        short = np.flatnonzero((best_f >= f0) & (gn * nrm > _DEC_STOP))
        frac = 1.0
        for _ in range(_DEC_BACKTRACK):
            if short.size == 0:
                break
            frac *= 0.25
            fn, u1, u2 = _dec_try(r[short], bb[short], AA[short], p1[short], p2[short],
                                  E1[short], E2[short], frac * step[short])
            take = fn < best_f[short]
            sel = short[take]
            best_f[sel], t1[sel], t2[sel] = fn[take], u1[take], u2[take]
            # A row is done once a shortened step beats the starting value.
            short = short[~(fn < f0[short])]
        # Where the Hessian has negative curvature, also try steps of several
        # lengths along its most negative eigenvector, signed downhill: this
        # leaves saddles with zero gradient (e.g. the NEC pair of a type II
        # tensor whose DEC violation lies at small angles from it), which the
        # Newton step alone cannot.
        neg = np.flatnonzero(w[:, 0] < 0)
        if neg.size:
            v = V[neg, :, 0]
            v *= np.where((G[neg] * v).sum(axis=1) > 0, -1.0, 1.0)[:, None]
            for length in _DEC_CURVATURE_STEPS:
                fn, u1, u2 = _dec_try(r[neg], bb[neg], AA[neg], p1[neg], p2[neg],
                                      E1[neg], E2[neg], length * v)
                take = fn < best_f[neg]
                sel = neg[take]
                best_f[sel], t1[sel], t2[sel] = fn[take], u1[take], u2[take]
        better = best_f < f0
        s1[idx[better]] = t1[better]
        s2[idx[better]] = t2[better]
        F[idx[better]] = best_f[better]
        # A row stops when its step is refused, its gradient is at the
        # round-off floor (|G| ≤ 4ε in scaled units, where |b|, |A| ≤ 1), or
        # the model decrease of its Newton step and the decrease obtained are
        # both at round-off (module docstring, (iv)).
        converged = (gn * nrm <= _DEC_STOP) & (f0 - best_f <= 10.0 * _DEC_STOP)
        active[idx] = better & (gn > 4.0 * _EPS) & ~converged
    return s1, s2, F


def _cf_partner(b, A, s, prev):
    """argmin over unit s2 of b·s2 + sᵀ A s2: −(b + A s)/|b + A s|, ``prev`` where
    that vanishes; component-first: b, s, prev (3, M), A (3, 3, M)."""
    r = A[:, 0] * s[0]
    r += A[:, 1] * s[1]
    r += A[:, 2] * s[2]
    r += b
    nr = np.sqrt(r[0] * r[0] + r[1] * r[1] + r[2] * r[2])
    if nr.all():
        r /= nr
        np.negative(r, out=r)
        return r
    ok = nr > 0
    return np.where(ok, -r / np.where(ok, nr, 1.0), prev)


def _cf_alternate(b, A, s1, s2, iters, every=5):
    """(iii) of the DEC search, component-first (b, s1, s2 (3, M), A (3, 3, M)).

    Each step s2 ← −(b + A s1)/|…|, s1 ← −(b + A s2)/|…| never increases the
    objective. Rows are checked every ``every`` steps: a row whose last step
    moved neither vector by more than 1e-10 stops (it only ranks the starts;
    the best are polished by Newton's method afterwards); the others go on for
    ``iters`` steps in all.
    """
    idx = np.arange(s1.shape[1])
    done = 0
    while done < iters and idx.size:
        bb, AA, p1, p2 = b[:, idx], A[:, :, idx], s1[:, idx], s2[:, idx]
        for _ in range(min(every, iters - done)):
            q1, q2 = p1, p2
            p1 = _cf_partner(bb, AA, q2, q1)
            p2 = _cf_partner(bb, AA, p1, q2)
        done += every
        s1[:, idx], s2[:, idx] = p1, p2
        d1, d2 = np.abs(p1 - q1), np.abs(p2 - q2)
        moved = np.maximum(np.maximum(np.maximum(d1[0], d1[1]), np.maximum(d1[2], d2[0])),
                           np.maximum(d2[1], d2[2]))
        idx = idx[moved > 1e-10]
    return s1, s2


def _dec_block(rho, b, A, n_dirs, n_starts, sN, Q):
    """DEC search on one block of points (scaled units); sN, Q: the NEC
    minimiser and the eigenvectors of A at these points."""
    n = rho.shape[0]
    dirs = fibonacci_directions(n_dirs)
    # (i) global scan of g(s1) = ρ + b·s1 − |b + A s1|, component by component
    r2 = np.zeros((n, dirs.shape[0]))
    for i in range(3):
        ri = b[:, i, None] + A[:, i, 0, None] * dirs[:, 0] + A[:, i, 1, None] * dirs[:, 1] \
            + A[:, i, 2, None] * dirs[:, 2]
        r2 += ri * ri
    # b·s1 term by term (a matrix product could round differently with the
    # batch size, and the scan must not depend on how events are batched)
    g = rho[:, None] + b[:, 0, None] * dirs[:, 0] + b[:, 1, None] * dirs[:, 1] \
        + b[:, 2, None] * dirs[:, 2] - np.sqrt(r2)
    m = min(n_starts, n_dirs)
    best = np.argpartition(g, m - 1, axis=1)[:, :m]
    # (ii) special starts: the NEC pair, extreme eigenvectors, ±b̂
    bn = np.linalg.norm(b, axis=1, keepdims=True)
    bhat = np.where(bn > 0, b / np.where(bn > 0, bn, 1.0), Q[:, :, 1])
    first = np.concatenate([dirs[best], np.stack(
        [sN, Q[:, :, 0], -Q[:, :, 0], Q[:, :, 2], -Q[:, :, 2], bhat, -bhat], axis=1)], axis=1)
    k = first.shape[1]
    rows = np.repeat(np.arange(n), k)
    rr = rho[rows]
    bc = np.ascontiguousarray(b.T)[:, rows]                    # (3, n·k)
    Ac = np.ascontiguousarray(np.moveaxis(A, 0, -1))[:, :, rows]  # (3, 3, n·k)
    s1 = np.ascontiguousarray(first.reshape(-1, 3).T)
    s2 = _cf_partner(bc, Ac, s1, s1)
    nec_row = np.arange(n) * k + m
    s2[:, nec_row] = sN.T          # the NEC pair itself, s1 = s2 = s_N
    # (iii) alternating exact block minimisation (monotone)
    s1, s2 = _cf_alternate(bc, Ac, s1, s2, _DEC_ALTERNATIONS)
    F = rr + ((s1 + s2) * bc).sum(axis=0) + (s1 * (Ac[:, 0] * s2[0] + Ac[:, 1] * s2[1]
                                                 + Ac[:, 2] * s2[2])).sum(axis=0)
    # (iv) Newton polish of the best _DEC_POLISHED starts of each point
    order = np.argsort(F.reshape(n, k), axis=1)[:, :_DEC_POLISHED]
    sel = (np.arange(n)[:, None] * k + order).ravel()
    s1, s2 = s1.T, s2.T
    p1, p2, pf = _dec_newton(rr[sel], b[rows[sel]], A[rows[sel]], s1[sel].copy(),
                             s2[sel].copy(), F[sel], _DEC_NEWTON)
    pf = pf.reshape(n, -1)
    j = np.argmin(pf, axis=1)
    pick = np.arange(n) * pf.shape[1] + j
    val, b1, b2 = pf[np.arange(n), j], p1[pick], p2[pick]
    # (v) compared with the NEC pair
    vN = _dec_value(rho, b, A, sN, sN)
    use_n = vN < val
    val = np.where(use_n, vN, val)
    b1 = np.where(use_n[:, None], sN, b1)
    b2 = np.where(use_n[:, None], sN, b2)
    return val, b1, b2


def dec_margin(T, *, n_dirs: int = DEC_DIRECTIONS, n_starts: int = DEC_STARTS):
    """DEC margin min_{|s1|=|s2|=1} T(n+s1, n+s2) and the worst pair (s1, s2).

    Parameters
    ----------
    T : array (N, 4, 4)
        Orthonormal-frame lower-index components T_âb̂ (module docstring).
    n_dirs : int
        Size of the Fibonacci set of the global scan.
    n_starts : int
        Number of best scan directions refined per point.

    Returns
    -------
    margin : array (N,)
        ρ + b·(s1 + s2) + s1ᵀ A s2 at the pair found (never below the true
        minimum beyond round-off; see the module docstring for accuracy).
    s1, s2 : arrays (N, 3)
        The worst pair of null observers is k1 = (1, s1), k2 = (1, s2).
    """
    T = _check_T(T)
    if int(n_dirs) < 1 or int(n_starts) < 1:
        raise ValueError("`n_dirs` and `n_starts` must be positive integers.")
    if native.available() and int(n_starts) <= native.MAX_DEC_STARTS:
        return _margins_native(T, None, int(n_dirs), int(n_starts))["DEC"]
    rho, b, A, scale = _scaled(T)
    val, s1, s2 = _dec_search(rho, b, A, _sphere_min(rho, b, A), int(n_dirs), int(n_starts))
    return val * scale, s1, s2


def _dec_search(rho, b, A, sphere, n_dirs=DEC_DIRECTIONS, n_starts=DEC_STARTS, skip=None):
    """DEC margin in scaled units from the NEC sphere solution of the same points.

    Rows where ``skip`` is True keep the NEC pair's value (an upper bound)."""
    valN, sN, lam, Q, _, t = sphere
    # Where the dual bound is attained by the NEC pair (t ≥ λ1 + max|λ_i|,
    # module docstring) the NEC pair is DEC-optimal: no search needed.
    val = valN.copy()
    s1 = sN.copy()
    s2 = sN.copy()
    need = t - lam[:, 0] < np.abs(lam).max(axis=1)
    if skip is not None:
        need &= ~skip
    todo = np.flatnonzero(need)
    for lo in range(0, todo.size, _DEC_CHUNK):     # blocks of points, not points
        rows = todo[lo:lo + _DEC_CHUNK]
        val[rows], s1[rows], s2[rows] = _dec_block(rho[rows], b[rows], A[rows], n_dirs,
                                                   n_starts, sN[rows], Q[rows])
    return val, s1, s2


def dec_lower_bound(T):
    """Lagrangian-dual lower bound on the DEC margin (module docstring), (N,).

    Equal to the DEC margin when the NEC multiplier satisfies
    t ≥ λ1 + max|λ_i| (then the NEC pair is DEC-optimal); otherwise
    D(max|λ_i|) = ρ − σ − Σ β_i²/(σ + λ_i), σ = max|λ_i|, which may lie
    below the margin. Computed from the eigen-decomposition, so it carries a
    round-off of a few ε·max|T_âb̂| like the margins.
    """
    T = _check_T(T)
    rho, b, A, scale = _scaled(T)
    valN, _, lam, _, beta, t = _sphere_min(rho, b, A)
    sigma = np.abs(lam).max(axis=1)
    a_star = t - lam[:, 0]
    den = sigma[:, None] + lam
    pos = den > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(pos, beta**2 / np.where(pos, den, 1.0), np.where(beta != 0, np.inf, 0.0))
    d_sigma = rho - sigma - terms.sum(axis=1)
    out = np.where(a_star >= sigma, valN, d_sigma)
    return out * scale


# ---------------------------------------------------------------- all four
@dataclass(frozen=True)
class Margins:
    """Margins (N,) of the four conditions and their worst observers.

    Observers are frame 4-vectors (upper index, orthonormal components) in
    the contract normalisation: ``nec_observer`` (N, 4) = (1, s);
    ``wec_observer``/``sec_observer`` (N, 4) = (1, w); ``dec_pair`` (N, 2, 4)
    = ((1, s1), (1, s2)).
    """

    nec: np.ndarray
    wec: np.ndarray
    sec: np.ndarray
    dec: np.ndarray
    nec_observer: np.ndarray
    wec_observer: np.ndarray
    sec_observer: np.ndarray
    dec_pair: np.ndarray


def _four(v):
    return np.concatenate([np.ones(v.shape[:-1] + (1,)), v], axis=-1)


def margins_with_observers(T, *, settled=None, **dec_options):
    """All four margins with their worst observers' spatial parts, sharing work.

    Returns {"NEC": (m, s), "WEC": (m, w), "SEC": (m, w), "DEC": (m, s1, s2)}.
    ``settled`` (N,) bool marks points where the caller has no use for the DEC
    search (T below its round-off, say: if every |T_âb̂| ≤ τ, the NEC, WEC and
    DEC quantities are at most |ρ| + 2|b| + ‖A‖₂ ≤ (1 + 2√3 + 3)τ in size and
    the SEC one, T(u,u) + ½ tr T (1 − |w|²), at most (3 + 2√3 + 1)τ, all below
    8τ, so the verdict is "saturated" whatever the exact value); there the DEC
    margin and its worst pair are the NEC pair's, an upper bound within that
    same range.
    One eigen-decomposition of A and one secular solve serve all four: the
    WEC ball starts from the NEC sphere, DEC is certified by (or starts from)
    the NEC pair, and SEC's X = T − ½ (tr T) η has X_ij = A_ij − c δ_ij
    (c = ½ (tr A − ρ)), the same eigenvectors and eigenvalue gaps, hence the
    same secular root and sphere minimiser (its value shifts by a constant).
    """
    T = _check_T(T)
    n_dirs = int(dec_options.get("n_dirs", DEC_DIRECTIONS))
    n_starts = int(dec_options.get("n_starts", DEC_STARTS))
    if n_dirs < 1 or n_starts < 1:
        raise ValueError("`n_dirs` and `n_starts` must be positive integers.")
    return _margins_of_checked(T, settled, n_dirs, n_starts)


def _margins_of_checked(T, settled=None, n_dirs=DEC_DIRECTIONS, n_starts=DEC_STARTS,
                        settle_tol=None):
    """:func:`margins_with_observers` of a T already known to be finite and
    symmetric (float64 (N, 4, 4)): no checks, no copies. For
    :func:`auditor.pointwise.analyse`, whose frame stress is both.
    ``settle_tol`` (N,), instead of ``settled``: the events where every |T_âb̂|
    is at most it are settled (the compiled loop finds max |T_âb̂| anyway)."""
    if native.available() and n_starts <= native.MAX_DEC_STARTS:
        return _margins_native(T, settled, n_dirs, n_starts, settle_tol)
    if settle_tol is not None:
        settled = np.abs(T).max(axis=(1, 2)) <= settle_tol
    rho, b, A, scale = _scaled(T)
    sphere = _sphere_min(rho, b, A)
    valN, sN, lam, Q, beta, t = sphere
    out = {"NEC": (valN * scale, sN)}
    vw, w = _ball_min(rho, b, A, sphere)
    out["WEC"] = (vw * scale, w)
    x00, xb, xA = _sec_parts(rho, b, A)
    c = 0.5 * (np.trace(A, axis1=1, axis2=2) - rho)
    sphere_x = (_quad(x00, xb, xA, sN), sN, lam - c[:, None], Q, beta, t)
    vs, ws = _ball_min(x00, xb, xA, sphere_x)
    out["SEC"] = (vs * scale, ws)
    vd, s1, s2 = _dec_search(rho, b, A, sphere, n_dirs, n_starts, settled)
    out["DEC"] = (vd * scale, s1, s2)
    return out


def _margins_native(T, settled, n_dirs, n_starts, settle_tol=None):
    """:func:`margins_with_observers` through the compiled loops (auditor.native):
    the same steps, event by event."""
    n = T.shape[0]
    skip = np.zeros(n) if settled is None else np.asarray(settled, dtype=float)
    o, Q = native.margins(T, skip)
    if settle_tol is not None:                    # column 19: max |T_âb̂|
        o[:, 13] *= ~(o[:, 19] <= settle_tol)
    scale = o[:, 0]
    out = {"NEC": (o[:, 1] * scale, o[:, 2:5]), "WEC": (o[:, 5] * scale, o[:, 6:9]),
           "SEC": (o[:, 9] * scale, o[:, 10:13])}
    val, s1, s2 = o[:, 1].copy(), o[:, 2:5].copy(), o[:, 2:5].copy()
    todo = np.flatnonzero(o[:, 13] != 0)
    if todo.size:
        Ts = T[todo] / scale[todo, None, None]
        v, a, c = native.dec(Ts[:, 0, 0], Ts[:, 0, 1:], Ts[:, 1:, 1:], o[todo, 2:5], Q[todo],
                             fibonacci_directions(n_dirs), n_starts, _DEC_ALTERNATIONS,
                             _DEC_NEWTON, _DEC_POLISHED, _DEC_BACKTRACK)
        val[todo], s1[todo], s2[todo] = v, a, c
    out["DEC"] = (val * scale, s1, s2)
    return out


def all_margins(T, **dec_options) -> Margins:
    """NEC, WEC, SEC and DEC margins with their worst observers (:class:`Margins`).

    ``dec_options`` are passed to :func:`dec_margin`.
    """
    r = margins_with_observers(T, **dec_options)
    (mn, s), (mw, w), (ms, ws), (md, s1, s2) = r["NEC"], r["WEC"], r["SEC"], r["DEC"]
    return Margins(nec=mn, wec=mw, sec=ms, dec=md,
                   nec_observer=_four(s), wec_observer=_four(w), sec_observer=_four(ws),
                   dec_pair=np.stack([_four(s1), _four(s2)], axis=1))
