"""Stress-energy T = G/8π in an orthonormal frame, with its round-off estimate.

T_ab = G_ab / (8π) (G = c = 1; a cosmological constant, if any, is part of T).
Frame components T_âb̂ = e_â^μ e_b̂^ν T_μν (see :mod:`auditor.frames`).

Round-off (cli-contract "Verdict semantics"): the error of a coordinate
component of the Riemann tensor is a few ulps of the size of the terms that
cancel in forming it, ``Curvature.scale_terms`` (S_μνρσ). A frame component
R_âb̂ĉd̂ = e_â^μ e_b̂^ν e_ĉ^ρ e_d̂^σ R_μνρσ is then uncertain by at most
ε Ŝ_âb̂ĉd̂ with Ŝ = |e|⊗|e|⊗|e|⊗|e| · S, and the largest Ŝ bounds them all.
Ricci and Einstein sum at most 12 such components, and 1/8π brings that back
near 0.5, so a component of T is uncertain by about ``TOL_FACTOR`` ε max Ŝ
with ``TOL_FACTOR`` = 16 (a factor ~30 of headroom for the ulps of each
product). A margin T(k, k) with
k = n + s sums 16 components weighted by |k_â k_b̂| ≤ (1 + √3)² < 8, hence
``MARGIN_FACTOR`` = 8.
"""

from __future__ import annotations

import numpy as np

from ..frames import to_frame

__all__ = ["TOL_FACTOR", "MARGIN_FACTOR", "frame_stress", "frame_scale", "component_tolerance"]

TOL_FACTOR = 16.0
MARGIN_FACTOR = 8.0
_EPS = np.finfo(float).eps


def frame_scale(scale_terms: np.ndarray, E: np.ndarray) -> np.ndarray:
    """max over â,b̂,ĉ,d̂ of Ŝ = |e_â^μ||e_b̂^ν||e_ĉ^ρ||e_d̂^σ| S_μνρσ (N,)."""
    n = len(E)
    At = np.swapaxes(np.abs(E), 1, 2)
    s = scale_terms
    # Contract the last index with |e| and rotate it to the front, four times
    # (only the maximum is kept, so the final index order does not matter).
    for _ in range(4):
        s = (np.ascontiguousarray(s).reshape(n, 64, 4) @ At).reshape(n, 4, 4, 4, 4)
        s = s.transpose(0, 4, 1, 2, 3)
    return s.reshape(n, -1).max(axis=1)


def component_tolerance(scale_terms: np.ndarray, E: np.ndarray) -> np.ndarray:
    """Absolute round-off estimate of the frame components of T (N,)."""
    return TOL_FACTOR * _EPS * frame_scale(scale_terms, E)


def frame_stress(einstein: np.ndarray, E: np.ndarray) -> np.ndarray:
    """T_âb̂ = e_â^μ e_b̂^ν G_μν / 8π, symmetrised (N,4,4)."""
    T = to_frame(E, einstein) / (8.0 * np.pi)
    return 0.5 * (T + np.swapaxes(T, 1, 2))
