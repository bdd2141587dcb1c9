"""The optional compiled accelerator, ``auditor._native``.

The C loops in ``auditor/_native.c`` compute, event by event, what NumPy (or
SciPy) routines compute for whole batches: curvature assembly
(:mod:`auditor.geometry.curvature`), the finiteness and signature check of g
(:mod:`auditor.geometry.points`), Eulerian tetrads (:mod:`auditor.frames`),
frame stress, its round-off and the tidal tensor (:mod:`auditor.pointwise`),
the margins and the DEC search (:mod:`auditor.conditions.margins`), a screen
of the clear Hawking–Ellis cases (:mod:`auditor.conditions.hawking_ellis`),
the sampled cross-check (:mod:`auditor.conditions.sampled`) and region labels
(:func:`scipy.ndimage.label`). Those routines stay the reference, and the
fallback where the extension was not built (no C compiler at install time).
Setting ``AUDITOR_NO_NATIVE=1`` forces them. Results agree to round-off (the
tests compare both), and each event is computed on its own, so nothing
depends on how events are batched.
"""

from __future__ import annotations

import os

import numpy as np

__all__ = ["available", "curvature", "dec", "eigvals4", "eulerian", "exact_bins", "frame",
           "gscreen", "he_screen", "label", "margins", "observers", "sampled",
           "MAX_DEC_STARTS"]

#: Most scan directions kept per event by the compiled DEC search (its fixed
#: table holds 64 starts, seven of them special).
MAX_DEC_STARTS = 57

_NO_CONSTANT = np.full(150, np.nan)      # every kernel row is read

try:  # pragma: no branch - depends on the build
    from . import _native as _lib
except ImportError:   # built without a C compiler
    _lib = None


def available() -> bool:
    """True where the compiled loops are built and not switched off."""
    return _lib is not None and not os.environ.get("AUDITOR_NO_NATIVE")


def _f(a, shape) -> np.ndarray:
    a = np.ascontiguousarray(a, dtype=np.float64)
    if a.shape != shape:
        raise ValueError(f"expected shape {shape}, got {a.shape}")
    return a


def _i(a) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.int64)


def curvature(rows: np.ndarray, extra: np.ndarray, tables: dict,
              constant: np.ndarray | None = None) -> dict:
    """Curvature from kernel rows (150, N): the arrays of
    :func:`auditor.geometry.curvature.curvature_from_rows`. ``constant`` (150,)
    gives the value of rows that hold one number at every event (NaN for the
    others): those are not read."""
    n = rows.shape[1]
    rows = _f(rows, (150, n))
    extra = _f(extra, (n,))
    out = {"g": np.empty((n, 4, 4)), "ginv": np.empty((n, 4, 4)),
           "ricci": np.empty((n, 4, 4)), "einstein": np.empty((n, 4, 4)),
           "up": np.empty((4, 10, n)), "r21": np.empty((21, n)), "scale21": np.empty((21, n)),
           "rscalar": np.empty(n)}
    t = tables
    _lib.curvature(n, rows, extra, _i(t["gidx"]), _i(t["g1"]), _i(t["g2"]), _i(t["g3"]),
                   _i(t["trows"]), _i(t["q1"]), _i(t["q2"]), _i(t["ric_rows"]),
                   _i(t["ric_ginv"]), _f(t["ric_sign"], (10, 16)), _i(t["pidx"]),
                   out["g"], out["ginv"], out["ricci"], out["einstein"], out["up"],
                   out["r21"], out["scale21"], out["rscalar"], _constant(constant))
    return out


def _constant(constant) -> np.ndarray:
    return _NO_CONSTANT if constant is None else _f(constant, (150,))


def margins(T: np.ndarray, settled: np.ndarray):
    """NEC sphere, WEC and SEC balls of symmetrised frame tensors T (N, 4, 4).

    Returns (out (N, 20), Q (N, 3, 3)); columns of ``out``: scale, NEC value,
    s (3), WEC value, w (3), SEC value, w (3), DEC search needed, secular root
    t, eigenvalues λ (3), hard case, max |T_âb̂|. Values are in units of T / scale
    (scale = max |T_âb̂|, or 1 where T = 0).
    """
    n = T.shape[0]
    T = _f(T, (n, 4, 4))
    out = np.empty((n, 20))
    Q = np.empty((n, 3, 3))
    _lib.margins(n, T, _f(settled, (n,)), out, Q)
    return out, Q


def dec(rho, b, A, sN, Q, dirs, n_starts, alternations, newton, polished, backtrack):
    """The DEC search of :func:`auditor.conditions.margins._dec_block`, per
    event; returns (value, s1, s2) in scaled units."""
    n = rho.shape[0]
    dirs = np.ascontiguousarray(np.asarray(dirs, dtype=np.float64).T)     # (3, K)
    out = np.empty((n, 7))
    _lib.dec(n, _f(rho, (n,)), _f(b, (n, 3)), _f(A, (n, 3, 3)), _f(sN, (n, 3)),
             _f(Q, (n, 3, 3)), dirs, dirs.shape[1], min(int(n_starts), dirs.shape[1]),
             int(alternations), int(newton), int(polished), int(backtrack), out)
    return out[:, 0], out[:, 1:4], out[:, 4:7]


def eulerian(g: np.ndarray, ginv: np.ndarray):
    """Eulerian tetrads (N, 4, 4) and the mask where they are defined
    (:func:`auditor.frames.tetrads.eulerian`, event by event)."""
    n = g.shape[0]
    E = np.empty((n, 4, 4))
    ok = np.empty(n)
    _lib.eulerian(n, _f(g, (n, 4, 4)), _f(ginv, (n, 4, 4)), E, ok)
    return E, ok != 0


def frame(E: np.ndarray, einstein: np.ndarray, r21: np.ndarray, scale21: np.ndarray,
          tables: dict, tidal: bool = True, vectors: bool = True) -> dict:
    """Frame stress T = E G Eᵀ/8π (symmetrised), the round-off scale of the
    frame components (max |W| S |W|ᵀ) and, if asked, the tidal tensor
    E_ij = R_{i0j0} with its ascending eigenvalues and, if asked, its
    eigenvectors (columns; NaN when not asked for)."""
    n = E.shape[0]
    out = {"T": np.empty((n, 4, 4)), "scale": np.empty(n), "tidal": np.empty((n, 3, 3)),
           "eigenvalues": np.empty((n, 3)), "vectors": np.empty((n, 3, 3))}
    _lib.frame(n, _f(E, (n, 4, 4)), _f(einstein, (n, 4, 4)), _f(r21, (21, n)),
               _f(scale21, (21, n)), _i(tables["r21"]), _i(tables["bi"]), _i(tables["bj"]),
               out["T"], out["scale"], out["tidal"], out["eigenvalues"], out["vectors"],
               (2 if vectors else 1) if tidal else 0)
    return out


def observers(E: np.ndarray, V: np.ndarray) -> np.ndarray:
    """Coordinate components (N, K, 4) of n + v for K frame vectors v (N, K, 3)
    per event, in the tetrads E (N, 4, 4) (:func:`auditor.pointwise._to_coordinates`)."""
    n, k = V.shape[0], V.shape[1]
    out = np.empty((n, k, 4))
    _lib.observers(n, k, _f(E, (n, 4, 4)), _f(V, (n, k, 3)), out)
    return out


def he_screen(T: np.ndarray, tol: np.ndarray, k_iv: float, c_split: float) -> np.ndarray:
    """Hawking–Ellis code of the clear cases (0, 1 or 4) and −1 where the full
    classification of :mod:`auditor.conditions.hawking_ellis` must decide."""
    n = T.shape[0]
    code = np.empty(n)
    _lib.he_screen(n, _f(T, (n, 4, 4)), _f(tol, (n,)), code, float(k_iv), float(c_split))
    return code.astype(np.int64)


def eigvals4(M: np.ndarray):
    """Eigenvalues (N, 4) complex of real 4×4 matrices by the QR iteration of the
    Hawking–Ellis screen, and whether it converged (N,) bool. For the tests."""
    n = M.shape[0]
    out = np.empty((n, 8))
    ok = np.empty(n)
    _lib.eigvals4(n, _f(M, (n, 4, 4)), out, ok)
    return out[:, :4] + 1j * out[:, 4:], ok != 0


def exact_bins(values: np.ndarray, groups, hi: np.ndarray, lo: np.ndarray, offset: int,
               span: int) -> int:
    """Add finite ``values`` (N,) into the exponent bins ``hi``, ``lo`` of
    :class:`auditor.sums.ExactSum` (in place, total ``groups[i]`` or 0);
    returns the number of nonzero values binned."""
    v = np.ascontiguousarray(values, dtype=np.float64)
    g = None if groups is None else np.ascontiguousarray(groups, dtype=np.int64)
    if g is not None and g.shape != v.shape:
        raise ValueError("values and groups differ in size")
    if hi.dtype != np.float64 or lo.dtype != np.float64 or not (
            hi.flags.c_contiguous and lo.flags.c_contiguous) or hi.size != lo.size:
        raise ValueError("bins must be C-contiguous float64 arrays of one size")
    return _lib.exact_bins(v.size, v, g, hi, lo, hi.size // span, offset, span)


def gscreen(rows: np.ndarray, gidx: np.ndarray, rtol: float,
            constant: np.ndarray | None = None) -> np.ndarray:
    """Per event: 1 g not finite; otherwise 2 if a derivative is not finite,
    plus 4 if g is degenerate (smallest |eigenvalue| ≤ rtol × largest) or 8 if
    its signature is not Lorentzian; 0 when all is well. ``constant`` as for
    :func:`curvature`: rows the kernel fills with one number are finite."""
    n = rows.shape[1]
    flags = np.empty(n)
    _lib.gscreen(n, _f(rows, (150, n)), _i(gidx.ravel()), float(rtol), flags,
                 _constant(constant))
    return flags.astype(np.int64)


def label(mask: np.ndarray):
    """Connected regions of the true cells of ``mask`` (face connectivity),
    numbered in order of first appearance: (labels int32 array, count), as
    :func:`scipy.ndimage.label` with its default structure returns them."""
    m = np.ascontiguousarray(mask, dtype=np.uint8)
    labels = np.empty(m.shape, dtype=np.int32)
    count = _lib.label(m, np.array(m.shape if m.ndim else (1,), dtype=np.int64), labels)
    return labels, count


def sampled(T: np.ndarray, dirs: np.ndarray, speeds: np.ndarray, dec_dirs: np.ndarray):
    """Sampled NEC, WEC, SEC and DEC minima (N, 4) of symmetrised frame tensors, as
    :func:`auditor.conditions.sampled.sampled_margins` computes them."""
    n = T.shape[0]
    soa = lambda d: np.ascontiguousarray(np.asarray(d, dtype=np.float64).T)
    speeds = np.ascontiguousarray(speeds, dtype=np.float64)
    out = np.empty((n, 4))
    _lib.sampled(n, _f(T, (n, 4, 4)), dirs.shape[0], soa(dirs), speeds.size, speeds,
                 dec_dirs.shape[0], soa(dec_dirs), out)
    return out
