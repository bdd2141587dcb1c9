"""Orthonormal tetrads of observer families on point batches.

A tetrad is an array E (N,4,4) with ``E[n, â, μ] = e_â^μ``: row 0 is the unit
future timelike leg, rows 1..3 orthonormal spatial legs, so that
``E g Eᵀ = η = diag(-1, 1, 1, 1)``. Frame components of a covariant tensor are
X_âb̂ = e_â^μ e_b̂^ν X_μν (:func:`to_frame`). Conventions: DEVELOPERS.md.

* Eulerian: n^μ = −N g^{tμ} with lapse N = (−g^{tt})^{-1/2}, defined where the
  t = const slice is spacelike (g^{tt} < 0); spatial legs by Gram–Schmidt of
  ∂_1, ∂_2, ∂_3 (tangent to the slice) under g (Gourgoulhon 2012, 3+1
  Formalism in General Relativity, ch. 3 — from memory).
* Static: u = ∂_t / sqrt(−g_tt) where g_tt < 0; spatial legs by Gram–Schmidt of
  ∂_i projected orthogonally to u.
* Principal (fallback where the slice is not spacelike): the eigenvectors of
  the coordinate matrix g_μν are g-orthogonal (v_iᵀ g v_j = λ_j v_i·v_j = 0), so
  normalised by sqrt|λ| they form an orthonormal tetrad; the leg with λ < 0 is
  e_0, oriented so that its first non-negligible coordinate component is
  positive. Energy-condition margins do not depend on the time orientation
  (u → −u leaves T(u,u) unchanged, and flips both members of a null pair).
"""

from __future__ import annotations

import numpy as np

__all__ = ["eulerian", "static", "principal", "auditing_frame", "to_frame", "FRAME_NAMES"]

FRAME_NAMES = ("eulerian", "static", "principal")


def _gram_schmidt(g: np.ndarray, legs: list[np.ndarray], vectors: list[np.ndarray]):
    """Append g-orthonormalised ``vectors`` to ``legs`` (each (N,4)); sign η per leg."""
    for v in vectors:
        w = v.copy()
        for k, e in enumerate(legs):
            eta = -1.0 if k == 0 else 1.0
            w -= eta * np.einsum("na,nab,nb->n", w, g, e)[:, None] * e
        norm2 = np.einsum("na,nab,nb->n", w, g, w)
        with np.errstate(invalid="ignore", divide="ignore"):
            w = w / np.sqrt(norm2)[:, None]
        legs.append(w)
    return legs


def eulerian(g: np.ndarray, ginv: np.ndarray):
    """Eulerian tetrad and mask of points where the slice is spacelike."""
    n_pts = g.shape[0]
    gtt = ginv[:, 0, 0]
    ok = gtt < 0
    with np.errstate(invalid="ignore", divide="ignore"):
        lapse = 1.0 / np.sqrt(-gtt)
        e0 = -lapse[:, None] * ginv[:, 0, :]
    axes = [np.tile(np.eye(4)[i], (n_pts, 1)) for i in (1, 2, 3)]
    legs = _gram_schmidt(g, [e0], axes)
    E = np.stack(legs, axis=1)
    ok &= np.isfinite(E).reshape(n_pts, -1).all(axis=1)
    return E, ok


def static(g: np.ndarray):
    """Static tetrad (along ∂_t) and mask of points where ∂_t is timelike."""
    n_pts = g.shape[0]
    ok = g[:, 0, 0] < 0
    with np.errstate(invalid="ignore", divide="ignore"):
        u = np.zeros((n_pts, 4))
        u[:, 0] = 1.0 / np.sqrt(-g[:, 0, 0])
    axes = [np.tile(np.eye(4)[i], (n_pts, 1)) for i in (1, 2, 3)]
    legs = _gram_schmidt(g, [u], axes)
    E = np.stack(legs, axis=1)
    ok &= np.isfinite(E).reshape(n_pts, -1).all(axis=1)
    return E, ok


def principal(g: np.ndarray):
    """Principal tetrad from the eigenvectors of g_μν (always defined if Lorentzian)."""
    lam, vec = np.linalg.eigh(g)          # ascending: lam[:, 0] < 0 for Lorentzian g
    legs = vec / np.sqrt(np.abs(lam))[:, None, :]
    E = np.swapaxes(legs, 1, 2).copy()     # rows are legs
    e0 = E[:, 0, :]
    big = np.abs(e0) > 1e-12 * np.abs(e0).max(axis=1, keepdims=True)
    first = np.argmax(big, axis=1)
    sign = np.sign(e0[np.arange(len(e0)), first])
    E[:, 0, :] *= sign[:, None]
    return E


def auditing_frame(g: np.ndarray, ginv: np.ndarray):
    """The frame in which conditions are normalised: Eulerian where the slice is
    spacelike, principal elsewhere. Returns (E, is_eulerian)."""
    E, ok = eulerian(g, ginv)
    if not ok.all():
        bad = ~ok
        E[bad] = principal(g[bad])
    return E, ok


def to_frame(E: np.ndarray, X: np.ndarray) -> np.ndarray:
    """Frame components X_âb̂ = e_â^μ e_b̂^ν X_μν of a covariant 2-tensor."""
    return np.einsum("nam,nbv,nmv->nab", E, E, X)
