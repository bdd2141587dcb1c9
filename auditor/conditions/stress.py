"""Stress-energy T = G/8π in an orthonormal frame, with its round-off estimate.

T_ab = G_ab / (8π) (G = c = 1; a cosmological constant, if any, is part of T).
Frame components T_âb̂ = e_â^μ e_b̂^ν T_μν (see :mod:`auditor.frames`).

Round-off (cli-contract "Verdict semantics"): the error of a frame component
of the Riemann tensor is bounded by machine epsilon times the size of the
cancelling terms in coordinates, ``Curvature.scale`` (S), times (Σ_μ |e_â^μ|)⁴
for the four legs contracted with it. Ricci and Einstein sum at most 12 such
components, and 1/8π brings that back near 0.5, so a component of T is
uncertain by about ``TOL_FACTOR`` ε S r_e⁴ with ``TOL_FACTOR`` = 16 (a
factor ~30 of headroom for the ulps of each product). A margin T(k, k) with
k = n + s sums 16 components weighted by |k_â k_b̂| ≤ (1 + √3)² < 8, hence
``MARGIN_FACTOR`` = 8.
"""

from __future__ import annotations

import numpy as np

from ..frames import to_frame

__all__ = ["TOL_FACTOR", "MARGIN_FACTOR", "frame_stress", "component_tolerance"]

TOL_FACTOR = 16.0
MARGIN_FACTOR = 8.0
_EPS = np.finfo(float).eps


def component_tolerance(scale: np.ndarray, E: np.ndarray) -> np.ndarray:
    """Absolute round-off estimate of the frame components of T (N,)."""
    r_e = np.abs(E).sum(axis=2).max(axis=1)
    return TOL_FACTOR * _EPS * scale * r_e**4


def frame_stress(einstein: np.ndarray, E: np.ndarray) -> np.ndarray:
    """T_âb̂ = e_â^μ e_b̂^ν G_μν / 8π, symmetrised (N,4,4)."""
    T = to_frame(E, einstein) / (8.0 * np.pi)
    return 0.5 * (T + np.swapaxes(T, 1, 2))
