"""Everything the audit decides at each event of a batch.

One function, :func:`analyse`, serves the single event of ``probe`` and the
chunks of a region audit, so both give the same numbers by construction.
Per auditable event it computes, in the auditing frame (Eulerian where the
t = const slice is spacelike, principal elsewhere; DEVELOPERS.md "Frames"):
T_âb̂ = G_âb̂/8π, its round-off, the exact NEC/WEC/SEC/DEC margins with their
worst observers (coordinate components, upper index), the Hawking–Ellis type,
the Eulerian energy density and the proper volume element sqrt(det γ_ij).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .conditions.hawking_ellis import _classify_checked
from .conditions.margins import _margins_of_checked
from . import native
from .conditions.stress import MARGIN_FACTOR, TOL_FACTOR, component_tolerance, frame_stress
from .crew.tidal import tidal_from_bivectors
from .frames import auditing_frame, principal, static
from .geometry.curvature import _NATIVE_TABLES
from .geometry.layout import DIDX
from .geometry.points import PointBatch

__all__ = ["CONDITIONS", "PointFields", "analyse", "margin_tolerances"]

CONDITIONS = ("NEC", "WEC", "SEC", "DEC")
_EPS = np.finfo(float).eps


def margin_tolerances(t_tol: np.ndarray) -> dict[str, np.ndarray]:
    """Round-off of each margin from the round-off of T's frame components.

    k = n + s and u = n + w weigh the 16 components of T by at most
    (1 + √3)² < 8 (MARGIN_FACTOR); SEC's X = T − ½ (tr T) η adds the trace,
    four more components weighted by ½|η|·|u|² ≤ 1 each, hence twice as much.
    """
    base = MARGIN_FACTOR * t_tol
    return {"NEC": base, "WEC": base, "SEC": 2.0 * base, "DEC": base}


@dataclass
class PointFields:
    """Per-event results of one batch; arrays hold the auditable events only."""

    batch: PointBatch
    stress: np.ndarray                 # (M,4,4) T_âb̂
    t_tol: np.ndarray                  # (M,) round-off of T's frame components
    frame_eulerian: np.ndarray         # (M,) bool
    tetrad: np.ndarray                 # (M,4,4)
    margins: dict = field(default_factory=dict)      # cond -> (M,)
    tolerances: dict = field(default_factory=dict)   # cond -> (M,)
    observers: dict = field(default_factory=dict)    # cond -> (M,4) coordinate comps
    dec_pair: np.ndarray | None = None               # (M,2,4)
    he_type: np.ndarray | None = None                # (M,) 0 vacuum, 1..4 types I..IV
    rho: np.ndarray | None = None                    # (M,) Eulerian; NaN off-slice
    sqrt_gamma: np.ndarray | None = None             # (M,) NaN off-slice
    tidal_eigenvalues: np.ndarray | None = None      # (M,3) ascending; NaN where undefined
    tidal_vectors: np.ndarray | None = None          # (M,3,3) frame components, columns
                                                     # (None if not asked for)
    tidal_tol: np.ndarray | None = None              # (M,) round-off of the eigenvalues
    station_accel: np.ndarray | None = None          # (M,) proper acceleration at fixed
                                                     # spatial coordinates (1/length)

    def holds(self, cond: str) -> np.ndarray:
        return self.margins[cond] >= -self.tolerances[cond]

    def saturated(self, cond: str) -> np.ndarray:
        return np.abs(self.margins[cond]) <= self.tolerances[cond]


def _to_coordinates(E: np.ndarray, spatial: np.ndarray) -> np.ndarray:
    """Coordinate components of n + v (v spatial, frame components): (M,4) for
    v (M,3), (M,K,4) for K vectors per event (M,K,3)."""
    if spatial.ndim == 2:
        return _to_coordinates(E, spatial[:, None, :])[:, 0]
    if native.available():
        return native.observers(E, spatial)
    out = np.matmul(spatial, E[:, 1:, :])      # Σ_i v^i e_i, event by event
    out += E[:, None, 0, :]
    return out


def _det3(m: np.ndarray) -> np.ndarray:
    """Determinants of symmetric 3×3 matrices (N,3,3), by cofactors along the first row."""
    a, b, c = m[:, 0, 0], m[:, 0, 1], m[:, 0, 2]
    d, e, f = m[:, 1, 1], m[:, 1, 2], m[:, 2, 2]
    return a * (d * f - e * e) - b * (b * f - e * c) + c * (b * e - d * c)


def analyse(batch: PointBatch, crew_frame: str = "eulerian", *,
            vectors: bool = True) -> PointFields | None:
    """Frame, stress-energy, margins, type, Eulerian density and tides of a batch.

    ``crew_frame`` picks the observer family of the tidal map: ``eulerian``
    (defined where the slice is spacelike) or ``static`` (where ∂_t is timelike).
    ``vectors=False`` leaves out the principal directions of the tides
    (``tidal_vectors`` is then None), which a region audit does not use.
    """
    curv = batch.curvature
    if curv is None:
        return None
    fast = native.available()
    if fast:
        E, eul = native.eulerian(curv.g, curv.ginv)
        if not eul.all():
            E[~eul] = principal(curv.g[~eul])
        parts = native.frame(E, curv.einstein, curv.r21, curv.scale21, _NATIVE_TABLES,
                             tidal=crew_frame != "static", vectors=vectors)
        T = parts["T"]
        t_tol = TOL_FACTOR * _EPS * parts["scale"]
    else:
        E, eul = auditing_frame(curv.g, curv.ginv)
        T = frame_stress(curv.einstein, E)
        t_tol = component_tolerance(curv, E)
    out = PointFields(batch=batch, stress=T, t_tol=t_tol, frame_eulerian=eul, tetrad=E)
    out.tolerances = margin_tolerances(t_tol)

    # Where every component of T is within its round-off the margins cannot leave
    # their tolerance (margins.margins_with_observers): the DEC search is skipped.
    # T is symmetric by construction (both paths symmetrise it) and finite
    # wherever the batch is auditable (geometry.points excludes events whose
    # curvature is not); checked once here instead of by each routine below.
    if not (np.isfinite(T).all() and np.isfinite(t_tol).all()):
        raise ValueError("the frame stress of an auditable event is not finite")
    r = _margins_of_checked(T, settle_tol=t_tol)
    m, s1, s2 = r["DEC"]
    # the five worst observers, frame to coordinates in one product
    k = _to_coordinates(E, np.stack([r["NEC"][1], r["WEC"][1], r["SEC"][1], s1, s2], axis=1))
    for i, c in enumerate(("NEC", "WEC", "SEC")):
        out.margins[c], out.observers[c] = r[c][0], k[:, i]
    out.margins["DEC"] = m
    out.observers["DEC"] = k[:, 3]
    out.dec_pair = k[:, 3:5].copy()
    out.he_type = _classify_checked(T, t_tol)

    out.rho = np.where(eul, T[:, 0, 0], np.nan)
    with np.errstate(invalid="ignore"):
        det = _det3(curv.g[:, 1:, 1:])
        out.sqrt_gamma = np.where(eul & (det > 0), np.sqrt(np.abs(det)), np.nan)

    if crew_frame == "static":
        Ec, cok = static(curv.g)
    else:
        Ec, cok = E, eul
    lam = np.full((len(T), 3), np.nan)
    vec = np.full((len(T), 3, 3), np.nan) if vectors else None
    # Round-off of E_ij = R_{i0j0}: frame components of Riemann carry the same
    # bound as T's (conditions/stress.py), in the crew's own frame.
    if fast:
        if crew_frame == "static":
            parts = native.frame(np.where(cok[:, None, None], Ec, 0.0), curv.einstein,
                                 curv.r21, curv.scale21, _NATIVE_TABLES, vectors=vectors)
            crew_tol = TOL_FACTOR * _EPS * parts["scale"]
        else:
            crew_tol = t_tol
        lam[cok] = parts["eigenvalues"][cok]
        if vectors:
            vec[cok] = parts["vectors"][cok]
        out.tidal_tol = np.where(cok, crew_tol, np.nan)
    else:
        if cok.any():
            tides = tidal_from_bivectors(curv.riemann6()[:, :, cok], Ec[cok])
            if vectors:
                lam[cok], vec[cok] = np.linalg.eigh(tides)
            else:
                lam[cok] = np.linalg.eigvalsh(tides)
        out.tidal_tol = np.where(cok, component_tolerance(curv, np.where(
            cok[:, None, None], Ec, 0.0)), np.nan)
    out.tidal_eigenvalues, out.tidal_vectors = lam, vec
    out.station_accel = station_acceleration(curv)
    return out


def station_acceleration(curv) -> np.ndarray:
    """Proper acceleration of an observer held at fixed spatial coordinates.

    u = ∂_t / sqrt(−g_tt); a^μ = u^ν ∇_ν u^μ = δ^μ_t u^t ∂_t u^t + (u^t)² Γ^μ_tt with
    ∂_t u^t = ½ (−g_tt)^(−3/2) ∂_t g_tt; returns sqrt(g_μν a^μ a^ν), NaN where ∂_t
    is not timelike (common practice; for a static metric this is the familiar
    a = ∂_r ln sqrt(−g_tt) / sqrt(g_rr)).
    """
    gtt = curv.g[:, 0, 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        ut = 1.0 / np.sqrt(-gtt)
        dut = 0.5 * (-gtt) ** -1.5 * curv.rows[DIDX[0, 0, 0]]
        a = ut[:, None] ** 2 * curv.christoffel10[:, 0, :].T     # Γ^μ_tt: pair (t, t) is 0
        a[:, 0] += ut * dut
        mag2 = np.einsum("na,nab,nb->n", a, curv.g, a)
        return np.where(gtt < 0, np.sqrt(np.maximum(mag2, 0.0)), np.nan)
