"""Sampled energy-condition minima: the cross-check of the exact margins.

Input convention (DEVELOPERS.md, "Conventions"; same as
:mod:`auditor.conditions.margins`): ``T`` has shape ``(N, 4, 4)`` and holds,
for each of N points, the LOWER-index components T_âb̂ = T(e_â, e_b̂) in an
orthonormal frame whose leg e_0 = n is the unit timelike vector of the
reference observer and e_1..e_3 are orthonormal spatial legs;
η = diag(−1, 1, 1, 1), G = c = 1. It is symmetrised before use.
Notation: ρ = T_00, b_i = T_0i, A_ij = T_ij.

What is sampled
---------------
A quasi-uniform set of unit spatial directions s_k (Fibonacci lattice) and a
set of rapidities φ_j with speeds v_j = tanh φ_j. The timelike observer
u = γ (n + v s), γ = cosh φ, is rescaled to the normalisation of the
command-line contract ("Verdict semantics": u = n + w, |w| ≤ 1) by dividing by
γ², i.e. the sampled value is

    T(n + v s, n + v s) = ρ + 2 v b·s + v² sᵀ A s,                     (1)

and v = 1 gives the null observers k = n + s. Then

* NEC: min over s_k of (1) at v = 1;
* WEC: min over s_k and v ∈ {0, v_j, 1} of (1);
* SEC: the same with X = T − ½ (tr T) η in place of T;
* DEC: min over ordered pairs (s_k, s_l) of
  T(n + s_k, n + s_l) = ρ + b·(s_k + s_l) + s_kᵀ A s_l.

Every sampled value is the condition's quantity at a real observer, so the
exact margin can never lie above it (beyond round-off); the converse fails,
as sampling misses violations confined to observers boosted close to a null
direction (published-checks section 9 warns of a type II case with γ > 20).

References
----------
Fibonacci lattice: Á. González, "Measurement of areas on a sphere using
Fibonacci and latitude–longitude lattices", Math. Geosci. 42 (2010) 49
(from memory).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from .. import native

__all__ = [
    "DEFAULT_DIRECTIONS",
    "DEFAULT_RAPIDITIES",
    "SampledMargins",
    "fibonacci_directions",
    "sampled_margins",
]

#: Number of sampled spatial directions (a spacing of about 0.22 rad).
DEFAULT_DIRECTIONS = 256
#: Rapidities of the sampled timelike observers (γ up to cosh 3 ≈ 10).
DEFAULT_RAPIDITIES = tuple(np.linspace(0.0, 3.0, 13))

# Upper bound on the float64 elements held at once by the DEC pair sampling
# (the (chunk, n_dirs, n_dirs) array): 4e6 elements = 32 MB.
_PAIR_BUDGET = 4_000_000


@lru_cache(maxsize=16)
def _fibonacci_cached(n: int) -> np.ndarray:
    i = np.arange(n, dtype=float)
    z = 1.0 - (2.0 * i + 1.0) / n
    r = np.sqrt(np.maximum(0.0, 1.0 - z * z))
    phi = i * np.pi * (3.0 - np.sqrt(5.0))  # golden angle
    out = np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)
    out /= np.linalg.norm(out, axis=1, keepdims=True)
    out.setflags(write=False)
    return out


def fibonacci_directions(n: int) -> np.ndarray:
    """``n`` quasi-uniform unit vectors on the sphere (Fibonacci lattice), (n, 3).

    Point i has z = 1 − (2i + 1)/n and azimuth i·π(3 − √5) (the golden angle);
    González 2010 (from memory). The array is read-only and cached.
    """
    n = int(n)
    if n < 1:
        raise ValueError(f"`n` must be a positive integer, got {n}.")
    return _fibonacci_cached(n)


def _check_T(T) -> np.ndarray:
    T = np.asarray(T, dtype=float)
    if T.ndim != 3 or T.shape[1:] != (4, 4):
        raise ValueError(f"`T` must have shape (N, 4, 4), got {T.shape}.")
    if not np.all(np.isfinite(T)):
        raise ValueError("`T` must be finite.")
    return 0.5 * (T + np.swapaxes(T, 1, 2))


def _sec_tensor(T: np.ndarray) -> np.ndarray:
    """X_âb̂ = T_âb̂ − ½ (η^{cd} T_cd) η_âb̂."""
    eta = np.diag([-1.0, 1.0, 1.0, 1.0])
    tr = -T[:, 0, 0] + T[:, 1, 1] + T[:, 2, 2] + T[:, 3, 3]
    return T - 0.5 * tr[:, None, None] * eta


@dataclass(frozen=True)
class SampledMargins:
    """Sampled minima (N,) of the four conditions in the contract's normalisation."""

    nec: np.ndarray
    wec: np.ndarray
    sec: np.ndarray
    dec: np.ndarray


def _dot_dirs(v: np.ndarray, dirs: np.ndarray) -> np.ndarray:
    """v_n · s_k (N, K), summed term by term: unlike a matrix product (which
    switches between BLAS kernels with the batch's shape) each value is the same
    whatever the batch it is computed in."""
    return (v[:, None, 0] * dirs[None, :, 0] + v[:, None, 1] * dirs[None, :, 1]
            + v[:, None, 2] * dirs[None, :, 2])


def _ball_samples(X: np.ndarray, dirs: np.ndarray, speeds: np.ndarray) -> np.ndarray:
    """min over s in dirs, v in speeds of X_00 + 2 v X_0i s_i + v² X_ij s_i s_j."""
    rho = X[:, 0, 0]
    lin = _dot_dirs(X[:, 0, 1:], dirs)                           # (N, K)
    quad = (np.matmul(dirs[None], X[:, 1:, 1:]) * dirs[None]).sum(axis=-1)  # (N, K)
    vals = (rho[:, None, None] + 2.0 * speeds[None, :, None] * lin[:, None, :]
            + (speeds**2)[None, :, None] * quad[:, None, :])
    return vals.min(axis=(1, 2))


def sampled_margins(T, n_dirs: int = DEFAULT_DIRECTIONS,
                    rapidities=DEFAULT_RAPIDITIES, dec_dirs: int | None = None) -> SampledMargins:
    """Sampled minima of NEC, WEC, SEC and DEC over a finite observer set.

    Parameters
    ----------
    T : array (N, 4, 4)
        Orthonormal-frame lower-index components T_âb̂ (module docstring).
    n_dirs : int
        Number of Fibonacci directions s_k.
    rapidities : sequence of float
        Rapidities φ ≥ 0 of the timelike observers, v = tanh φ; v = 0 and the
        null observers (v = 1) are always included.
    dec_dirs : int, optional
        Number of Fibonacci directions whose ordered pairs are sampled for DEC
        (default ``n_dirs``; the cost grows as its square).

    Returns
    -------
    SampledMargins
        Minima of formula (1) (and of the pair form for DEC), in the units of T.
    """
    T = _check_T(T)
    dirs = fibonacci_directions(n_dirs)
    phis = np.asarray(rapidities, dtype=float).ravel()
    if np.any(~np.isfinite(phis)) or np.any(phis < 0):
        raise ValueError("`rapidities` must be finite and non-negative.")
    # sorted distinct speeds (a set: numpy.unique would import numpy.ma, ~30 ms)
    speeds = np.array(sorted({0.0, 1.0, *np.tanh(phis).tolist()}))

    if native.available():        # the same minima, event by event in compiled code
        ddirs = fibonacci_directions(n_dirs if dec_dirs is None else dec_dirs)
        o = native.sampled(T, dirs, speeds, ddirs)
        return SampledMargins(nec=o[:, 0], wec=o[:, 1], sec=o[:, 2], dec=o[:, 3])
    rho, b, A = T[:, 0, 0], T[:, 0, 1:], T[:, 1:, 1:]
    nec = _ball_samples(T, dirs, np.array([1.0]))
    wec = _ball_samples(T, dirs, speeds)
    sec = _ball_samples(_sec_tensor(T), dirs, speeds)

    # DEC over ordered pairs of sampled null directions, chunked over points
    # so that the (chunk, K, K) array stays within _PAIR_BUDGET elements.
    dirs = fibonacci_directions(n_dirs if dec_dirs is None else dec_dirs)
    n = T.shape[0]
    k = dirs.shape[0]
    step = max(1, _PAIR_BUDGET // (k * k))
    dec = np.empty(n)
    lin = _dot_dirs(b, dirs)                                     # (N, K)
    for lo in range(0, n, step):
        hi = min(n, lo + step)
        pair = np.matmul(np.matmul(dirs[None], A[lo:hi]), dirs.T)     # s_kᵀ A s_l
        pair += lin[lo:hi, :, None]
        pair += lin[lo:hi, None, :]
        dec[lo:hi] = rho[lo:hi] + pair.min(axis=(1, 2))
    return SampledMargins(nec=nec, wec=wec, sec=sec, dec=dec)
