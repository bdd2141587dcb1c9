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

Arrays are point-first: g (N,4,4), dg (N,4,4,4) with dg[n,c,a,b] = ∂_c g_ab,
d2g (N,4,4,4,4) with d2g[n,c,d,a,b] = ∂_c∂_d g_ab, Γ (N,4,4,4) with
Γ[n,a,b,c] = Γ^a_bc, Riemann (N,4,4,4,4) with R[n,a,b,c,d] = R_abcd.

Round-off: ``scale`` is the size of the terms that cancel in forming R_abcd
(the sum of absolute values of each term), per point; the error of any
curvature component is a modest multiple of machine epsilon times it. It is
not the size of the result, which vanishes in vacuum or flat space.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .kernels import D2IDX, DIDX, GIDX

__all__ = ["Curvature", "split_raw", "curvature_from_raw"]


@dataclass(frozen=True)
class Curvature:
    """Geometric quantities on N points (geometric units; layout above)."""

    g: np.ndarray          # (N,4,4)
    ginv: np.ndarray       # (N,4,4)
    dg: np.ndarray         # (N,4,4,4)
    christoffel: np.ndarray  # (N,4,4,4) Γ^a_bc
    riemann: np.ndarray    # (N,4,4,4,4) R_abcd
    ricci: np.ndarray      # (N,4,4)
    ricci_scalar: np.ndarray  # (N,)
    einstein: np.ndarray   # (N,4,4) G_ab
    kretschmann: np.ndarray   # (N,)
    scale: np.ndarray      # (N,) size of the cancelling terms of R_abcd (max over components)
    scale_terms: np.ndarray  # (N,4,4,4,4) that size per component
    kretschmann_scale: np.ndarray  # (N,) size of the terms summed in K

    def __len__(self) -> int:
        return self.g.shape[0]


def split_raw(raw: np.ndarray):
    """Unpack the kernel output (150, N) into g, dg, d2g (point-first)."""
    r = np.ascontiguousarray(raw.T)          # (N, 150)
    g = r[:, GIDX]                           # (N,4,4)
    dg = r[:, DIDX]                          # (N,4,4,4)
    d2g = r[:, D2IDX]                        # (N,4,4,4,4)
    return g, dg, d2g


def curvature_from_raw(g: np.ndarray, dg: np.ndarray, d2g: np.ndarray,
                       extra_abs: np.ndarray | None = None) -> Curvature:
    """Assemble Γ, Riemann, Ricci, Einstein and Kretschmann (formulas above).

    ``extra_abs`` adds an absolute uncertainty of the Riemann components per
    point (used where derivatives were obtained as limits).
    """
    n = len(g)
    ginv = np.linalg.inv(g)
    ginv = 0.5 * (ginv + np.swapaxes(ginv, 1, 2))
    # Contractions are batched matrix products (matmul) over reshaped index
    # pairs; the einsum spelling of each is given beside it.
    # Γ_abc = ½(∂_b g_ac + ∂_c g_ab − ∂_a g_bc); dg[n,c,a,b] = ∂_c g_ab
    gam_low = 0.5 * (dg.transpose(0, 2, 1, 3) + dg.transpose(0, 2, 3, 1) - dg)
    gam = (ginv @ gam_low.reshape(n, 4, 16)).reshape(n, 4, 4, 4)      # g^ad Γ_dbc
    # Second-derivative part ½(g_ad,bc + g_bc,ad − g_bd,ac − g_ac,bd), d2g[n,c,d,a,b] = ∂_c∂_d g_ab
    t1 = d2g.transpose(0, 3, 1, 2, 4)        # nbcad->nabcd: ∂_b∂_c g_ad
    t2 = d2g.transpose(0, 1, 3, 4, 2)        # nadbc->nabcd: ∂_a∂_d g_bc
    t3 = d2g.transpose(0, 1, 3, 2, 4)        # nacbd->nabcd: ∂_a∂_c g_bd
    t4 = d2g.transpose(0, 3, 1, 4, 2)        # nbdac->nabcd: ∂_b∂_d g_ac
    # P[n, bc, ad] = Σ_e Γ^e_bc Γ_ead; then q1 = Γ^e_bc Γ_ead, q2 = Γ^e_bd Γ_eac
    m1, m2 = gam.reshape(n, 4, 16), gam_low.reshape(n, 4, 16)
    P = (np.swapaxes(m1, 1, 2) @ m2).reshape(n, 4, 4, 4, 4)           # [b,c,a,d]
    Pabs = (np.swapaxes(np.abs(m1), 1, 2) @ np.abs(m2)).reshape(n, 4, 4, 4, 4)
    q1, q2 = P.transpose(0, 3, 1, 2, 4), P.transpose(0, 3, 1, 4, 2)
    riemann = 0.5 * (t1 + t2 - t3 - t4) + q1 - q2
    scale_terms = 0.5 * (np.abs(t1) + np.abs(t2) + np.abs(t3) + np.abs(t4)) \
        + Pabs.transpose(0, 3, 1, 2, 4) + Pabs.transpose(0, 3, 1, 4, 2)
    if extra_abs is not None:
        scale_terms = scale_terms + (extra_abs / np.finfo(float).eps)[:, None, None, None, None]
    scale = scale_terms.reshape(n, -1).max(axis=1)
    # Ricci R_bd = g^ac R_abcd  (nac,nabcd->nbd)
    rt = riemann.transpose(0, 2, 4, 1, 3).reshape(n, 16, 16)
    ricci = (rt @ ginv.reshape(n, 16, 1)).reshape(n, 4, 4)
    ricci = 0.5 * (ricci + np.swapaxes(ricci, 1, 2))
    rscalar = (ginv * ricci).reshape(n, -1).sum(axis=1)
    einstein = ricci - 0.5 * rscalar[:, None, None] * g
    # R^ab_cd = g^ae g^bf R_efcd (nae,nbf,nefcd->nabcd), then K = R^ab_cd R^cd_ab
    x = (ginv @ riemann.reshape(n, 4, 64)).reshape(n, 4, 4, 16)
    y = (ginv @ x.transpose(0, 2, 1, 3).reshape(n, 4, 64)).reshape(n, 4, 4, 16)
    rup = y.transpose(0, 2, 1, 3).reshape(n, 16, 16)
    kterms = rup * np.swapaxes(rup, 1, 2)
    kretschmann = kterms.reshape(n, -1).sum(axis=1)
    kscale = np.abs(kterms).reshape(n, -1).sum(axis=1)
    return Curvature(g=g, ginv=ginv, dg=dg, christoffel=gam, riemann=riemann, ricci=ricci,
                     ricci_scalar=rscalar, einstein=einstein, kretschmann=kretschmann,
                     scale=scale, scale_terms=scale_terms, kretschmann_scale=kscale)
