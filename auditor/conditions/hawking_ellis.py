"""Hawking–Ellis (Segre) type of orthonormal-frame stress-energy tensors.

Input convention (DEVELOPERS.md, "Conventions"; as in
:mod:`auditor.conditions.margins`): ``T`` has shape ``(N, 4, 4)``, the
LOWER-index components T_âb̂ in an orthonormal frame (e_0 = n the unit
timelike leg of the reference observer, e_1..e_3 orthonormal spatial legs),
η = diag(−1, 1, 1, 1), signature (−,+,+,+), G = c = 1; symmetrised before
use. ``tol`` (N,) is the caller's absolute estimate of the round-off in the
components of T.

Classification (Hawking & Ellis 1973 §4.3, from memory; Martín-Moruno &
Visser, Class. Quantum Grav. 35 (2018) 125003, text of the abstract)
--------------------------------------------------------------------------
From the mixed tensor M = T^â_b̂ = η^{âĉ} T_ĉb̂ (η-self-adjoint, ηM = T
symmetric):

* 0 vacuum — max|T_âb̂| ≤ tol;
* 1 type I — M diagonalisable with real spectrum (a timelike eigenvector);
* 2 type II — a Jordan block of size 2 (a double null eigenvector);
* 3 type III — a Jordan block of size 3 (a triple null eigenvector);
* 4 type IV — a complex pair of eigenvalues (no causal eigenvector).

A Lorentzian M has at most one non-trivial Jordan block, always of a real
eigenvalue.

Numerical decision and its thresholds
-------------------------------------
Work in units of s = max|T_âb̂|: M̂ = M/s, δ = max(tol/s, 4ε) the relative
round-off of the input. A Jordan block of size k with nilpotent part of norm
ν perturbed by δ splits its eigenvalue into k eigenvalues at distance
~ (δ ν^{k−1})^{1/k} (square root for k = 2, cube root for k = 3; Wilkinson,
The Algebraic Eigenvalue Problem, 1965, ch. 2 — from memory), possibly a
complex pair. So the spectrum of a round-off-perturbed type II or III tensor
is that of a type I or IV one, and the type must be read from the Jordan
structure near eigenvalue clusters rather than from the eigenvalues alone:

For every subset S of 2, 3 or 4 computed eigenvalues (11 subsets), with
centre c = Re mean(λ_S) and spread d = max_{i∈S} |λ_i − c|:

1. S must be a whole cluster: every other eigenvalue lies farther from S than
   twice S's diameter and than K_IV δ (else S shares eigen-directions with
   the rest). Subsets whose spread no test below could accept are skipped,
   so generic tensors cost one eigenvalue computation.
2. Q_S, an orthonormal basis of the invariant subspace of S, is the
   orthogonal complement of the left eigenvectors of the other eigenvalues,
   each the left null vector of M̂ − λ_j I alone (a tied pair of them: of
   the product of its two factors). Its accuracy is set by the distances
   from λ_j to the other eigenvalues, not by the Jordan structure inside S
   (inverse iteration or products Π(M̂ − λ_j I) mix the two and lose it).
3. ν1 = ‖(M̂ − cI) Q_S‖₂ and ν2 = ‖(M̂ − cI)² Q_S‖₂ measure the nilpotent
   part on that subspace (≥ d; ≈ d times the eigenvector condition for a
   diagonalisable cluster). Their round-off floor is
   noise = δ (1 + Σ_{j∉S} |λ_j − c| / sep_j), sep_j = σ_min(Q_Sᴴ(M̂ − λ_j I)Q_S):
   the tilt of Q_S towards the eigenvector of λ_j is ~δ/sep_j (the
   separation of the restricted operator from λ_j; Stewart & Sun, Matrix
   Perturbation Theory, 1990, ch. V — from memory), and M̂ − cI acts on that
   eigenvector with |λ_j − c|.
4. A block of size ≥ 2 is declared when the nilpotent part stands above
   round-off, ν1 > K_NIL·noise, and the spread is explained by a round-off
   perturbation of it, d² ≤ C_SPLIT δ ν1.
5. A block of size 3 (|S| ≥ 3) when ν1, ν2 > K_NIL·noise,
   ν2 > K_3 d ν1 (for a size-2 block (M̂ − cI)² is only O(d ν1), for a
   size-3 block it is ~ν1² ≫ d ν1) and d³ ≤ C_SPLIT δ ν2.

Type III if any subset shows a size-3 block, else II if any shows a size-2
block, else IV if some |Im λ| > K_IV δ, else I.

Calibration and limits. Measured over the canonical cases of the tests
(vacuum, ±Λ, dust, fluid, Reissner–Nordström, null dust with and without Λ,
type II and III forms with degenerate and nearly degenerate eigenvalues, the
published-checks §9 type I/IV case), boosted to rapidity 3 and perturbed at
the round-off level (δ ~ 4e−15): diagonalisable clusters give ν1 ≤ 10^1.9
noise and real spectra |Im λ| ≤ 10^0.9 δ, Jordan blocks ν1 ≥ 10^6 noise,
size-2 splits d² ≤ 10^2 δ ν1, size-3 splits d³ ≤ 10^1.4 δ ν2, and
ν2/(d ν1) ≥ 10^3.3 for size-3 blocks against ≤ 1 for size-2 blocks; type IV
pairs near the §9 boundary have |Im λ| ≥ 10^9 δ. Every constant keeps a
factor ≥ 10 (mostly ≥ 100) on both sides. The same cases are classified
correctly up to rapidity 4 at round-off tolerance and up to rapidity 3
with δ = 1e−10. Inherent limits: a tensor within ~C_SPLIT·δ (relative,
amplified by boosts) of a type II/III tensor may be reported as that type (e.g. a fluid with ρ + p ≲ 1e−9 ρ
boosted to γ ~ 10 is numerically null dust plus Λ); a null-dust part below
~K_NIL·δ of the total, or an imaginary part below K_IV·δ, is not resolved;
with δ ≳ 1e−8 and strong boosts III may read II and IV near the II
boundary may read II.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np

from .. import native

__all__ = ["TYPE_NAMES", "classify"]

TYPE_NAMES = {0: "vacuum", 1: "I", 2: "II", 3: "III", 4: "IV"}

_EPS = np.finfo(float).eps
_ETA = np.array([-1.0, 1.0, 1.0, 1.0])

# Thresholds (module docstring, "Calibration and limits", for the measured
# margins on both sides of each).
#: Nilpotent part must exceed K_NIL × its round-off floor to count
#: (eigenvector conditioning of boosted frames, ~e^{2φ} ≈ 400 at rapidity 3,
#: multiplies that floor; diagonalisable clusters measured ≤ 10^1.9).
K_NIL = 1.0e4
#: A cluster spread d counts as round-off splitting of a block of size k if
#: d^k ≤ C_SPLIT δ ν_{k−1}: the amplification by the Jordan basis is not
#: measured and must fit in C_SPLIT (measured ≤ 10^2).
C_SPLIT = 1.0e3
#: (M̂ − cI)² on a size-2 block is ≲ 2 d ν1; on a size-3 block ≈ ν1² ≫ d ν1.
K_3 = 30.0
#: Imaginary parts below K_IV·δ are round-off of a real spectrum (measured
#: ≤ 10^0.9 δ); also the least distance of a cluster from other eigenvalues.
K_IV = 1.0e4
# Relative floor of δ: forming M and its eigenvalues costs a few ulps.
_DELTA_FLOOR = 4.0 * _EPS


def _check(T, tol):
    T = np.asarray(T, dtype=float)
    if T.ndim != 3 or T.shape[1:] != (4, 4):
        raise ValueError(f"`T` must have shape (N, 4, 4), got {T.shape}.")
    if not np.all(np.isfinite(T)):
        raise ValueError("`T` must be finite.")
    try:
        tol = np.broadcast_to(np.asarray(tol, dtype=float), (T.shape[0],))
    except ValueError:
        raise ValueError(f"`tol` must be a scalar or have shape ({T.shape[0]},), "
                         f"got {np.shape(tol)}.") from None
    if np.any(~np.isfinite(tol)) or np.any(tol < 0):
        raise ValueError("`tol` must be finite and non-negative.")
    return 0.5 * (T + np.swapaxes(T, 1, 2)), tol


def _gap(a, b):
    """min |a_i − b_j| (n,)."""
    return np.abs(a[:, :, None] - b[:, None, :]).min(axis=(1, 2))


def _diameter(z):
    """max |z_i − z_j| over the last axis (0 for one element)."""
    return np.abs(z[:, :, None] - z[:, None, :]).max(axis=(1, 2))


def _left_null(X, r):
    """The r left singular vectors of the r smallest singular values of X (n, 4, r)."""
    return np.linalg.svd(X)[0][:, :, 4 - r:]


def _invariant_subspace(M, mu, c, m):
    """Orthonormal basis (n, 4, m) of the invariant subspace of the eigenvalues
    other than ``mu`` (n, 4 − m), as the orthogonal complement of the left
    eigenvectors of the eigenvalues ``mu``.

    Each left eigenvector is the left null vector of M − μ_j I alone, so its
    accuracy is set by the distance of μ_j to the other eigenvalues and not
    by the Jordan structure of the cluster (a product Π(M − μ_j I) would
    mix the two). Two eigenvalues of ``mu`` closer to each other than a
    quarter of their distance to the cluster centre c are one group: the
    two-dimensional left null space of (M − μ_j I)(M − μ_k I).
    """
    n = M.shape[0]
    eye = np.eye(4)
    r = mu.shape[1]
    W = np.empty((n, 4, r), dtype=complex)
    if r == 2:
        tied = np.abs(mu[:, 0] - mu[:, 1]) <= 0.25 * np.abs(mu - c[:, None]).min(axis=1)
    else:
        tied = np.zeros(n, dtype=bool)
    for j in range(r):
        W[:, :, j] = _left_null(M - mu[:, j][:, None, None] * eye, 1)[:, :, 0]
    if np.any(tied):
        t = np.flatnonzero(tied)
        P = np.matmul(M[t] - mu[t, 0][:, None, None] * eye, M[t] - mu[t, 1][:, None, None] * eye)
        W[t] = _left_null(P, 2)
    Qfull = np.linalg.qr(W, mode="complete")[0]
    return Qfull[:, :, r:]


def _cluster_metrics(Mh, lam, delta, subset):
    """Decision quantities of eigenvalue subset ``subset`` (module docstring).

    Returns (idx, d, nu1, nu2, noise): the candidate rows and, for them, the
    spread, ‖(M̂ − cI)Q‖₂, ‖(M̂ − cI)²Q‖₂ and the round-off floor of ν1.
    """
    sub = lam[:, list(subset)]
    c = sub.mean(axis=1).real
    d = np.abs(sub - c[:, None]).max(axis=1)
    m = len(subset)
    # ν1 ≤ ‖M̂ − cI‖₂ ≤ 8 and ν2 ≤ 64 (entries of M̂ are ≤ 1 in modulus, so
    # ‖M̂‖₂ ≤ 4 and |c| ≤ 4): subsets with a larger spread cannot pass.
    cand = (d * d <= C_SPLIT * delta * 8.0) | ((m >= 3) & (d**3 <= C_SPLIT * delta * 64.0))
    rest = [j for j in range(4) if j not in subset]
    # S must be a whole cluster: every other eigenvalue is farther from S
    # than twice S's diameter and than the round-off of a real spectrum
    # (K_IV δ); otherwise S would share eigen-directions with the rest and
    # its invariant subspace would be ill-defined. (S may contain several
    # sub-clusters; the tests below then decide on its spread d.)
    if rest:
        gap_out = _gap(lam[:, list(subset)], lam[:, rest])
        cand &= gap_out > np.maximum(2.0 * _diameter(sub), K_IV * delta)
    idx = np.flatnonzero(cand)
    if idx.size == 0:
        return idx, d[idx], d[idx], d[idx], d[idx]
    M = Mh[idx].astype(complex)
    eye = np.eye(4)
    cc = c[idx][:, None, None]
    if rest:
        Q = _invariant_subspace(M, lam[idx][:, rest], c[idx], m)
    else:
        Q = np.broadcast_to(eye, M.shape).astype(complex)
    B = M - cc * eye
    BQ = np.matmul(B, Q)
    nu1 = np.linalg.norm(BQ, ord=2, axis=(1, 2))
    nu2 = np.linalg.norm(np.matmul(B, BQ), ord=2, axis=(1, 2))
    # Round-off floor of ν1: δ from M̂ itself, plus, for each other
    # eigenvalue λ_j, the tilt of the subspace towards its eigenvector,
    # ~ δ / sep_j with sep_j = σ_min(Qᴴ(M̂ − λ_j I)Q) (the separation of the
    # restricted operator from λ_j; Stewart & Sun 1990, ch. V — from memory),
    # on which M̂ − cI acts with |λ_j − c|.
    noise = delta[idx].copy()
    QH = np.conj(np.swapaxes(Q, 1, 2))
    for j in rest:
        lj = lam[idx, j]
        Aj = np.matmul(QH, np.matmul(M - lj[:, None, None] * eye, Q))
        sep_j = np.linalg.svd(Aj, compute_uv=False)[:, -1]
        noise += delta[idx] * np.abs(lj - c[idx]) / np.maximum(sep_j, np.finfo(float).tiny)
    return idx, d[idx], nu1, nu2, noise


def _jordan_order(Mh, lam, delta, subset):
    """Largest Jordan block (1, 2 or 3) detected on eigenvalue subset ``subset``."""
    order = np.ones(Mh.shape[0], dtype=int)
    idx, d, nu1, nu2, noise = _cluster_metrics(Mh, lam, delta, subset)
    if idx.size == 0:
        return order
    de = delta[idx]
    nil = nu1 > K_NIL * noise
    j2 = nil & (d * d <= C_SPLIT * de * nu1)
    j3 = np.zeros_like(j2)
    if len(subset) >= 3:
        j3 = (nil & (nu2 > K_NIL * noise) & (nu2 > K_3 * d * nu1)
              & (d**3 <= C_SPLIT * de * nu2))
    order[idx] = np.where(j3, 3, np.where(j2, 2, 1))
    return order


def classify(T, tol) -> np.ndarray:
    """Hawking–Ellis type code of each tensor (module docstring), int array (N,).

    Parameters
    ----------
    T : array (N, 4, 4)
        Orthonormal-frame lower-index components T_âb̂.
    tol : array (N,) or float
        Absolute round-off estimate of the components of T (units of T).

    Returns
    -------
    array of int (N,)
        0 vacuum, 1..4 types I..IV; names in :data:`TYPE_NAMES`.
    """
    T, tol = _check(T, tol)
    return _classify_checked(T, tol)


def _classify_checked(T, tol):
    """:func:`classify` of a T already known to be finite and symmetric and a
    finite, non-negative tol (N,): no checks, no copies. For
    :func:`auditor.pointwise.analyse`, whose frame stress and tolerance are."""
    if native.available() and T.shape[0]:
        # Clear cases (vacuum; no subset of eigenvalues that could be a
        # candidate cluster; a clear complex pair, type IV whatever its two real
        # eigenvalues do, as they are diagonalisable) are decided by the
        # compiled screen; the rest go through the classification below.
        code = native.he_screen(T, tol, K_IV, C_SPLIT)
        rest = np.flatnonzero(code < 0)
        if rest.size:
            code[rest] = _classify(T[rest], tol[rest])
        return code
    return _classify(T, tol)


def _classify(T, tol):
    n = T.shape[0]
    s = np.abs(T).max(axis=(1, 2), initial=0.0)
    vac = s <= tol
    out = np.zeros(n, dtype=int)
    live = np.flatnonzero(~vac)
    if live.size == 0:
        return out
    Ts, ss, tl = T[live], s[live], tol[live]
    Mh = _ETA[None, :, None] * Ts / ss[:, None, None]       # M̂ = η T / s
    delta = np.maximum(tl / ss, _DELTA_FLOOR)
    lam = np.linalg.eigvals(Mh)
    order = np.ones(live.size, dtype=int)
    for m in (2, 3, 4):
        for subset in combinations(range(4), m):
            order = np.maximum(order, _jordan_order(Mh, lam, delta, subset))
    complex_pair = np.abs(lam.imag).max(axis=1) > K_IV * delta
    code = np.where(order == 3, 3, np.where(order == 2, 2, np.where(complex_pair, 4, 1)))
    out[live] = code
    return out
