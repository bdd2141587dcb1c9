"""Curvature on a batch of points from the exact raw derivatives of g.

Conventions: DEVELOPERS.md, "Conventions" (MTW signs). With
∂_c g_ab and ∂_c ∂_d g_ab from the compiled kernel:

* Christoffel symbols of the first kind
  Γ_abc = ½ (∂_b g_ac + ∂_c g_ab − ∂_a g_bc),  Γ^a_bc = g^ad Γ_dbc;
* the Riemann tensor, all indices down (MTW 1973 eq. 8.44 expanded; any GR
  text, e.g. Wald 1984 §3.4 — section number from memory):
  R_abcd = ½ (∂_b∂_c g_ad + ∂_a∂_d g_bc − ∂_a∂_c g_bd − ∂_b∂_d g_ac)
           + Γ^e_bc Γ_ead − Γ^e_bd Γ_eac;
* Ricci R_bd = g^ac R_abcd, scalar R = g^bd R_bd, Einstein
  G_ab = R_ab − ½ R g_ab, Kretschmann K = R_abcd R^abcd.

How it is computed
------------------
The work is done component-first, on rows of length N (the kernel's own
layout), so every NumPy operation runs over all points of the batch at once.
Only the independent components are formed: the 10 symmetric pairs of
Γ_a(bc) and Γ^a_(bc), and the 21 components R_AB (A ≤ B) of Riemann as a
symmetric 6×6 matrix over the bivector pairs A, B ∈ {01, 02, 03, 12, 13, 23}
(R_abcd = −R_bacd = −R_abdc = R_cdab). Every other component is a signed
copy of one of these; components with a = b or c = d are exactly zero.
Kretschmann uses the same bivector form: with the bivector metric
𝒢^{AB} = g^ac g^bd − g^ad g^bc, R^{AB} = (𝒢 R 𝒢)^{AB} and
K = 4 tr(R 𝒢 R 𝒢) (each bivector pair counted once instead of twice on each
side).

Point-first arrays (``riemann`` (N,4,4,4,4), ``christoffel`` (N,4,4,4) with
Γ[n,a,b,c] = Γ^a_bc) are built on first use only.

Round-off: ``scale21`` is, per independent component, the size of the terms
that cancel in forming R_AB (the sum of their absolute values); the error of
the component is a modest multiple of machine epsilon times it. ``scale`` is
its largest entry per point. It is not the size of the result, which
vanishes in vacuum or flat space.
"""

from __future__ import annotations

from functools import cached_property
from itertools import combinations_with_replacement

import numpy as np

from .. import native
from .layout import D2IDX, DIDX, GIDX

__all__ = ["Curvature", "curvature_from_raw", "curvature_from_rows", "curvature_from_rows_numpy",
           "BIVECTORS", "R21", "bivector_weights"]

_PAIRS = list(combinations_with_replacement(range(4), 2))         # 10 symmetric pairs
_PIDX = np.zeros((4, 4), dtype=np.intp)
for _k, (_a, _b) in enumerate(_PAIRS):
    _PIDX[_a, _b] = _PIDX[_b, _a] = _k

#: Bivector pairs (a < b), the index A of the 6×6 form.
BIVECTORS = [(0, 1), (0, 2), (0, 3), (1, 2), (1, 3), (2, 3)]
_R21_PAIRS = list(combinations_with_replacement(range(6), 2))     # 21 (A <= B)
#: R21[A, B] = row of the independent component R_AB (symmetric).
R21 = np.zeros((6, 6), dtype=np.intp)
for _k, (_A, _B) in enumerate(_R21_PAIRS):
    R21[_A, _B] = R21[_B, _A] = _k


def _full_index():
    """Row (into the 21 components, or 21 for an exact zero) and sign of R_abcd."""
    biv = {p: i for i, p in enumerate(BIVECTORS)}
    rows = np.full(256, 21, dtype=np.intp)
    sign = np.zeros(256)
    for a in range(4):
        for b in range(4):
            for c in range(4):
                for d in range(4):
                    if a == b or c == d:
                        continue
                    s = (1.0 if a < b else -1.0) * (1.0 if c < d else -1.0)
                    A, B = biv[(min(a, b), max(a, b))], biv[(min(c, d), max(c, d))]
                    k = 64 * a + 16 * b + 4 * c + d
                    rows[k], sign[k] = R21[A, B], s
    return rows, sign


_FULL_ROWS, _FULL_SIGN = _full_index()

# Γ_a(bc) from first-derivative rows: ½(∂_b g_ac + ∂_c g_ab − ∂_a g_bc), (4, 10).
_G1 = np.array([[DIDX[b, a, c] for (b, c) in _PAIRS] for a in range(4)])
_G2 = np.array([[DIDX[c, a, b] for (b, c) in _PAIRS] for a in range(4)])
_G3 = np.array([[DIDX[a, b, c] for (b, c) in _PAIRS] for a in range(4)])

# The 21 independent Riemann components: second-derivative rows and the rows of
# P[(bc),(ad)] = Σ_e Γ^e_bc Γ_ead (flattened 10 × 10) in each term.
_T = {k: [] for k in ("t1", "t2", "t3", "t4", "q1", "q2")}
for _A, _B in _R21_PAIRS:
    (_a, _b), (_c, _d) = BIVECTORS[_A], BIVECTORS[_B]
    _T["t1"].append(D2IDX[_b, _c, _a, _d])
    _T["t2"].append(D2IDX[_a, _d, _b, _c])
    _T["t3"].append(D2IDX[_a, _c, _b, _d])
    _T["t4"].append(D2IDX[_b, _d, _a, _c])
    _T["q1"].append(10 * _PIDX[_b, _c] + _PIDX[_a, _d])
    _T["q2"].append(10 * _PIDX[_b, _d] + _PIDX[_a, _c])
_T = {k: np.array(v) for k, v in _T.items()}
_T_ROWS = np.stack([_T["t1"], _T["t2"], _T["t3"], _T["t4"]])          # (4, 21)

# Ricci R_bd = Σ_ac g^ac R_abcd for b <= d: (10, 16) rows into the 21 (+ zero row) and signs.
_RIC_ROWS = np.array([[_FULL_ROWS[64 * a + 16 * b + 4 * c + d] for a in range(4)
                       for c in range(4)] for (b, d) in _PAIRS])
_RIC_SIGN = np.array([[_FULL_SIGN[64 * a + 16 * b + 4 * c + d] for a in range(4)
                       for c in range(4)] for (b, d) in _PAIRS])
# Rows of g^ac (flattened 4×4) beside each of those terms, (10, 16).
_RIC_GINV = np.array([[4 * a + c for a in range(4) for c in range(4)]] * 10)
# First and second index of each bivector pair.
_BI = np.array([p[0] for p in BIVECTORS])
_BJ = np.array([p[1] for p in BIVECTORS])


def bivector_weights(E: np.ndarray, absolute: bool = False) -> np.ndarray:
    """W (6,6,N) with W[Â, A] = e_â^α e_b̂^β − e_â^β e_b̂^α for Â = (â<b̂), A = (α<β);
    with ``absolute``, |e_â^α||e_b̂^β| + |e_â^β||e_b̂^α| (a bound on |W|).

    A frame component of a tensor with the Riemann symmetries is
    R_ÂB̂ = Σ_AB W[Â,A] R_AB W[B̂,B]. ``E`` is a tetrad (N,4,4), rows the legs.
    """
    e = np.abs(E) if absolute else E
    e = np.moveaxis(e, 0, -1)                        # (4 legs, 4 comps, N)
    i, j = _BI, _BJ
    # e_â^α e_b̂^β for all (Â, A): legs (i[Â], j[Â]), components (i[A], j[A]).
    x = e[i][:, i] * e[j][:, j]                      # (6,6,N)
    y = e[i][:, j] * e[j][:, i]
    return x + y if absolute else x - y


class Curvature:
    """Geometric quantities on N points (geometric units; layout above).

    Component-first: ``rows`` (150,N) kernel output, ``r21``/``scale21`` (21,N)
    independent Riemann components and their round-off scale, ``christoffel10``
    (4,10,N) Γ^a_(bc). Point-first: ``g``, ``ginv``, ``ricci``, ``einstein``
    (N,4,4); ``ricci_scalar``, ``scale`` (N,); ``kretschmann``,
    ``kretschmann_scale`` (N,), ``dg``, ``christoffel``, ``riemann`` on first use
    (the audit needs none of them).
    """

    def __init__(self, rows, g, ginv, christoffel10, r21, scale21, ricci, ricci_scalar,
                 einstein):
        self.rows = rows
        self.g, self.ginv = g, ginv
        self.christoffel10 = christoffel10
        self.r21, self.scale21 = r21, scale21
        self.ricci, self.ricci_scalar, self.einstein = ricci, ricci_scalar, einstein
        self.scale = scale21.max(axis=0) if scale21.size else np.zeros(len(g))

    def __len__(self) -> int:
        return self.g.shape[0]

    @cached_property
    def _kretschmann(self) -> tuple[np.ndarray, np.ndarray]:
        # K = 4 tr(R 𝒢 R 𝒢) with the bivector metric 𝒢 (6,6,N); its scale sums |terms|
        gi = np.moveaxis(self.ginv, 0, -1)                           # (4,4,N)
        i, j = _BI, _BJ
        biv_g = gi[i][:, i] * gi[j][:, j] - gi[i][:, j] * gi[j][:, i]
        X = np.einsum("abn,bcn->acn", self.r21[R21], biv_g)
        kterms = (X * np.swapaxes(X, 0, 1)).reshape(36, len(self))
        return 4.0 * kterms.sum(axis=0), 4.0 * np.abs(kterms).sum(axis=0)

    @property
    def kretschmann(self) -> np.ndarray:
        """(N,) Kretschmann scalar R_abcd R^abcd."""
        return self._kretschmann[0]

    @property
    def kretschmann_scale(self) -> np.ndarray:
        """(N,) sum of the absolute terms of ``kretschmann`` (its round-off scale)."""
        return self._kretschmann[1]

    @cached_property
    def dg(self) -> np.ndarray:
        """(N,4,4,4) with dg[n,c,a,b] = ∂_c g_ab."""
        return np.moveaxis(self.rows[DIDX], -1, 0)

    @cached_property
    def christoffel(self) -> np.ndarray:
        """(N,4,4,4) with Γ[n,a,b,c] = Γ^a_bc."""
        return np.moveaxis(self.christoffel10[:, _PIDX], -1, 0)

    @cached_property
    def riemann(self) -> np.ndarray:
        """(N,4,4,4,4) with R[n,a,b,c,d] = R_abcd."""
        x = np.concatenate([self.r21, np.zeros((1, len(self)))])[_FULL_ROWS]
        return np.ascontiguousarray((x * _FULL_SIGN[:, None]).T).reshape(-1, 4, 4, 4, 4)

    def riemann6(self) -> np.ndarray:
        """R_AB as a symmetric (6,6,N) array."""
        return self.r21[R21]


# Index tables of the compiled loop (auditor/_native.c), the same as above.
_NATIVE_TABLES = {"gidx": GIDX.ravel(), "g1": _G1.ravel(), "g2": _G2.ravel(), "g3": _G3.ravel(),
                  "trows": _T_ROWS.ravel(), "q1": _T["q1"], "q2": _T["q2"],
                  "ric_rows": _RIC_ROWS, "ric_ginv": _RIC_GINV, "ric_sign": _RIC_SIGN,
                  "pidx": _PIDX.ravel(), "bi": _BI, "bj": _BJ, "r21": R21.ravel()}


def curvature_from_rows(rows: np.ndarray, extra_abs: np.ndarray | None = None,
                        constant: np.ndarray | None = None) -> Curvature:
    """Assemble Γ, Riemann, Ricci and Einstein from kernel rows (150,N).

    ``extra_abs`` adds an absolute uncertainty of the Riemann components per
    point (used where derivatives were obtained as limits). The compiled loop
    of :mod:`auditor.native` does the same work event by event where it is
    built; :func:`curvature_from_rows_numpy` is the reference. ``constant``
    (150,), NaN except for rows that hold that one value at every event, spares
    the compiled loop reading those rows (the results are the same).
    """
    n = rows.shape[1]
    if native.available():
        extra = np.zeros(n) if extra_abs is None else np.asarray(extra_abs, dtype=float)
        o = native.curvature(rows, extra, _NATIVE_TABLES, constant)
        return Curvature(rows, o["g"], o["ginv"], o["up"], o["r21"], o["scale21"], o["ricci"],
                         o["rscalar"], o["einstein"])
    return curvature_from_rows_numpy(rows, extra_abs)


def curvature_from_rows_numpy(rows: np.ndarray, extra_abs: np.ndarray | None = None
                              ) -> Curvature:
    """:func:`curvature_from_rows` in NumPy, whole batches at a time."""
    n = rows.shape[1]
    g = np.moveaxis(rows[GIDX], -1, 0)                               # (N,4,4)
    ginv = np.linalg.inv(g)
    ginv = 0.5 * (ginv + np.swapaxes(ginv, 1, 2))
    gi = np.moveaxis(ginv, 0, -1)                                    # (4,4,N)
    # Γ_a(bc) and Γ^a_(bc) = g^ad Γ_d(bc), (4,10,N)
    low = 0.5 * (rows[_G1] + rows[_G2] - rows[_G3])
    up = np.einsum("adn,dkn->akn", gi, low)
    # P[(bc),(ad)] = Σ_e Γ^e_bc Γ_ead and the same with absolute values (100,N)
    P = np.einsum("ekn,ejn->kjn", up, low).reshape(100, n)
    Pabs = np.einsum("ekn,ejn->kjn", np.abs(up), np.abs(low)).reshape(100, n)
    t = rows[_T_ROWS]                                                # (4,21,N)
    r21 = 0.5 * ((t[0] + t[1]) - (t[2] + t[3])) + (P[_T["q1"]] - P[_T["q2"]])
    scale21 = 0.5 * np.abs(t).sum(axis=0) + Pabs[_T["q1"]] + Pabs[_T["q2"]]
    if extra_abs is not None:
        scale21 = scale21 + extra_abs / np.finfo(float).eps
    # Ricci R_bd = Σ_ac g^ac R_abcd over the signed copies (10,N)
    gflat = gi.reshape(16, n)
    r22 = np.concatenate([r21, np.zeros((1, n))])
    ric10 = np.einsum("pkn,pkn->pn", gflat[_RIC_GINV], r22[_RIC_ROWS] * _RIC_SIGN[:, :, None])
    ricci = np.moveaxis(ric10[_PIDX], -1, 0)                         # (N,4,4)
    rscalar = np.einsum("nab,nab->n", ginv, ricci)
    einstein = ricci - 0.5 * rscalar[:, None, None] * g
    return Curvature(rows, g, ginv, up, r21, scale21, ricci, rscalar, einstein)


def curvature_from_raw(g: np.ndarray, dg: np.ndarray, d2g: np.ndarray,
                       extra_abs: np.ndarray | None = None) -> Curvature:
    """The same from point-first g (N,4,4), dg (N,4,4,4), d2g (N,4,4,4,4)."""
    n = len(g)
    rows = np.empty((150, n))
    rows[GIDX.ravel()] = g.reshape(n, 16).T
    rows[DIDX.ravel()] = dg.reshape(n, 64).T
    rows[D2IDX.ravel()] = d2g.reshape(n, 256).T
    return curvature_from_rows(rows, extra_abs)
