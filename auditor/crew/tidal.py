"""Tidal tensor of an observer family and the accelerations it implies.

Geodesic deviation (MTW 1973 §11 — section number from memory):
D²ξ^a/dτ² = −R^a_bcd u^b ξ^c u^d. In an orthonormal frame with e_0 = u the
tidal tensor is E_ij = R_{î0̂ĵ0̂} = e_i^a e_0^b e_j^c e_0^d R_abcd, and
d²ξ^i/dτ² = −E_ij ξ^j: along an eigenvector with eigenvalue E_k two points a
distance ℓ apart accelerate apart at −E_k ℓ (negative E_k stretches).
"""

from __future__ import annotations

import numpy as np

from .. import units
from ..geometry.curvature import bivector_weights

__all__ = ["tidal_tensor", "tidal_from_bivectors", "tidal_eigen", "peak_accel_g"]


def tidal_tensor(riemann, E: np.ndarray) -> np.ndarray:
    """E_ij = R_{i0j0} in the frame E (N,3,3) from R_abcd (N,4,4,4,4), or from a
    :class:`~auditor.geometry.Curvature` (its independent components)."""
    if not isinstance(riemann, np.ndarray):
        return tidal_from_bivectors(riemann.riemann6(), E)
    u = E[:, 0, :]
    legs = E[:, 1:, :]
    ru = np.einsum("nabcd,nb,nd->nac", riemann, u, u)
    out = np.einsum("nia,nac,njc->nij", legs, ru, legs)
    return 0.5 * (out + np.swapaxes(out, 1, 2))


def tidal_from_bivectors(r6: np.ndarray, E: np.ndarray) -> np.ndarray:
    """E_ij (N,3,3) from Riemann as a symmetric bivector matrix R_AB (6,6,N).

    R_{i0j0} = R_{0i0j} = Σ_AB W[0i, A] R_AB W[0j, B] with the frame's bivector
    weights W (:func:`auditor.geometry.curvature.bivector_weights`); the frame
    pairs 0i are the first three bivectors.
    """
    w = bivector_weights(E)[:3]                          # (3,6,N)
    out = np.einsum("iAn,ABn,jBn->nij", w, r6, w, optimize=True)
    return 0.5 * (out + np.swapaxes(out, 1, 2))


def tidal_eigen(riemann, E: np.ndarray):
    """Ascending eigenvalues (N,3) and eigenvectors (N,3,3) (frame components)."""
    return np.linalg.eigh(tidal_tensor(riemann, E))


def peak_accel_g(eigenvalues: np.ndarray, length_m: float, body_length_m: float) -> np.ndarray:
    """Largest |E_k| across the body, in standard g (N,)."""
    peak = np.abs(eigenvalues).max(axis=-1)
    return units.accel_g(units.tidal_accel_m_s2(peak, length_m, body_length_m))
