"""Identities every curvature tensor obeys, at random events of the sample metrics.

* Riemann symmetries R_abcd = −R_bacd = −R_abdc = R_cdab and the first Bianchi
  identity R_abcd + R_acdb + R_adbc = 0 (MTW 1973 eq. 8.45 — equation number
  from memory; common practice);
* trace relation G^a_a = −R in four dimensions (from G_ab = R_ab − ½ R g_ab
  and g^ab g_ab = 4; derived);
* contracted Bianchi identity ∇_a G^a_b = 0 (MTW 1973 §15 — from memory),
  with ∂_a G^a_b from an 8th-order central finite difference of the package's
  exact Einstein tensor.

The engine assembles R_abcd from one formula; the symmetries are not imposed
by construction (only Ricci is symmetrised), so they test the index layout and
the assembly. Round-off floors: tests/conftest.py.
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import (EPS, FLOOR_FACTOR, SAMPLES_DIR, assert_close, einstein_floor,
                            inverse_weight, riemann_floor, scalar_floor)

SAMPLE_STEMS = sorted(p.stem for p in SAMPLES_DIR.glob("*.toml"))


def _region_events(metric, rng, n):
    """Random events in the file's region box (fixed coordinates jittered by ±0.3,
    except angles, so that every coordinate varies)."""
    region = metric.region
    cols = []
    for c in metric.coordinates:
        if c in region.axes:
            lo, hi = region.axes[c]
            cols.append(rng.uniform(lo, hi, n))
        else:
            v = region.fixed[c]
            jitter = 0.0 if c in ("theta", "phi") else 0.3
            cols.append(v + rng.uniform(-jitter, jitter, n))
    return np.column_stack(cols)


def _auditable(geometry, rng, n=12):
    x = _region_events(geometry.metric, rng, 4 * n)
    batch = geometry.evaluate(x)
    assert batch.ok.sum() >= n, f"too few auditable events in the region of {geometry.metric.name}"
    keep = np.flatnonzero(batch.ok)[:n]
    return x[keep], geometry.evaluate(x[keep]).curvature


@pytest.mark.parametrize("stem", SAMPLE_STEMS)
def test_riemann_symmetries_and_traces(stem, geometry_cache, rng):
    geo = geometry_cache.sample(stem)
    _, curv = _auditable(geo, rng)
    R = curv.riemann
    floor = riemann_floor(curv)
    assert_close(R, -np.einsum("nbacd->nabcd", R), 2 * floor, rtol=0, what="R_abcd = −R_bacd")
    assert_close(R, -np.einsum("nabdc->nabcd", R), 2 * floor, rtol=0, what="R_abcd = −R_abdc")
    assert_close(R, np.einsum("ncdab->nabcd", R), 2 * floor, rtol=0, what="R_abcd = R_cdab")
    # out[a,b,c,d] = R[a,c,d,b] is einsum "nacdb->nabcd"; R_adbc likewise
    bianchi = R + np.einsum("nacdb->nabcd", R) + np.einsum("nadbc->nabcd", R)
    assert_close(bianchi, 0.0, 3 * floor, rtol=0, what="first Bianchi identity")
    # G^a_a = −R (derived)
    trace_g = np.einsum("nab,nab->n", curv.ginv, curv.einstein)
    floor_tr = einstein_floor(curv) * inverse_weight(curv.ginv)
    assert_close(trace_g, -curv.ricci_scalar, floor_tr + scalar_floor(curv), what="G^a_a = −R")
    # R_bd = g^ac R_abcd (MTW contraction; the engine's definition — a layout check)
    assert_close(curv.ricci, np.einsum("nac,nabcd->nbd", curv.ginv, R),
                 FLOOR_FACTOR * EPS * np.abs(curv.ricci).max(axis=(1, 2)) + floor
                 * inverse_weight(curv.ginv), what="R_bd = g^ac R_abcd")


# 8th-order central difference for a first derivative (Fornberg 1988, Math. Comp.
# 51, 699, table 1 — from memory; the weights are easily re-derived):
# f'(0) ≈ Σ_k c_k f(k h) / h, truncation error ~ (h^8/630) f^(9).
FD8 = {1: 4 / 5, 2: -1 / 5, 3: 4 / 105, 4: -1 / 280}
FD8_ABS_SUM = 2 * sum(abs(c) for c in FD8.values())   # ≈ 2.08

# (sample, step h): non-vacuum metrics only (in vacuum G ≡ 0 and the identity
# is empty). h is chosen against each metric's shortest length L: the wall
# width 1/σ = 0.125 of the bubble, the throat radius b0 = 1 of the wormhole,
# M = 1 of Reissner–Nordström, t ≥ 0.5 of FLRW, the packet width w = 1 of the
# plane wave, 1/sqrt(Λ) ≈ 5.8 of de Sitter. The truncation error of the
# stencil is (h^8/630) |∂⁹G|. For the tanh wall G holds f″, so ∂_a G ~ σ³ tanh‴
# and ∂⁹G ~ σ¹¹ tanh⁽¹¹⁾; with max|tanh‴| = 2 and max|tanh⁽¹¹⁾| = 353792
# (derived with SymPy) the relative error is about
# (hσ)^8 / 630 · 353792 / 2 ≈ 5e-7 for hσ = 0.08. The smoother metrics have
# h/L ≤ 0.05 and far smaller errors (measured ≤ 3e-11). The tolerance, 1e-5 of
# the size of the summed terms, leaves 20x headroom over that estimate and
# still fails by orders of magnitude for a wrong Einstein tensor
# (test_contracted_bianchi_catches_a_wrong_trace: residual > 1e-2 of the terms).
# Halving h reduces the measured residuals ~2^8-fold, as an 8th-order scheme should.
BIANCHI_CASES = [
    ("tanh_wall_bubble", 0.01),
    ("morris_thorne_wormhole", 0.02),
    ("reissner_nordstrom", 0.02),
    ("flrw_flat_w", 0.02),
    ("plane_wave_brinkmann", 0.02),
    ("de_sitter_static", 0.05),
]


def _mixed_einstein(geo, x):
    """G^a_b = g^ac G_cb at events x (all must be auditable)."""
    batch = geo.evaluate(x, use_exclude=False)
    assert batch.ok.all()
    c = batch.curvature
    return np.einsum("nac,ncb->nab", c.ginv, c.einstein), c


def _wall_events(metric, rng, n):
    """Events with R − 0.5 ≤ r_s ≤ R + 0.6 (σ|r_s − R| ≤ 4.8), random directions and t.

    In and near the wall, where G varies; far from it G ~ e^{-2σ|r_s − R|} and
    the identity is nearly empty (a random event of the region box mostly lands there).
    """
    p = metric.parameters
    t = rng.uniform(-1, 1, n)
    d = rng.normal(size=(n, 3))
    d *= (rng.uniform(p["R"] - 0.5, p["R"] + 0.6, n) / np.linalg.norm(d, axis=1))[:, None]
    return np.column_stack([t, p["v"] * t + d[:, 0], d[:, 1], d[:, 2]])


@pytest.mark.parametrize("stem,h", BIANCHI_CASES)
def test_contracted_bianchi_identity(stem, h, geometry_cache, rng):
    geo = geometry_cache.sample(stem)
    if stem == "tanh_wall_bubble":
        x0 = _wall_events(geo.metric, rng, 6)
        curv = geo.evaluate(x0).curvature
    else:
        x0, curv = _auditable(geo, rng, n=6)
    n = len(x0)
    Gm0, _ = _mixed_einstein(geo, x0)
    # ∂_a G^a_b by the 8th-order stencil along each coordinate a
    dG = np.zeros((n, 4))              # Σ_a ∂_a G^a_b
    dG_abs = np.zeros((n, 4))          # Σ_a |∂_a G^a_b|  (size of the summed terms)
    round_off = np.zeros(n)            # round-off of the stencil sums
    for a in range(4):
        acc = np.zeros((n, 4))
        for k, ck in FD8.items():
            for sgn in (1, -1):
                xs = x0.copy()
                xs[:, a] += sgn * k * h
                Gm, c = _mixed_einstein(geo, xs)
                acc += sgn * ck * Gm[:, a, :]
                round_off = np.maximum(round_off, einstein_floor(c) * inverse_weight(c.ginv))
        dG += acc / h
        dG_abs += np.abs(acc / h)
    # connection terms at the centre: ∇_a G^a_b = ∂_a G^a_b + Γ^a_ae G^e_b − Γ^e_ab G^a_e
    gam = curv.christoffel
    conn1 = np.einsum("naae,neb->nb", gam, Gm0)
    conn2 = np.einsum("neab,nae->nb", gam, Gm0)
    div = dG + conn1 - conn2
    size = dG_abs + np.abs(conn1) + np.abs(conn2)
    # Tolerance: 1e-5 of the size of the terms (truncation, see BIANCHI_CASES)
    # plus the round-off of the stencil: each value carries the floor of G^a_b,
    # amplified by Σ|c_k|/h, summed over the 4 directions.
    tol = 1e-5 * size + 4 * FD8_ABS_SUM * round_off[:, None] / h
    assert (size > 100 * tol).any()   # the identity is not trivially 0 = 0 here
    assert_close(div, 0.0, tol, rtol=0, what=f"{stem} ∇_a G^a_b")


def test_contracted_bianchi_catches_a_wrong_trace(geometry_cache, rng):
    """The check has power: with G'_ab = R_ab − R g_ab (trace term doubled, a
    plausible slip) the divergence is of the order of its terms (derived: the
    error is −½ ∂_b R, non-zero where R varies, e.g. in the bubble wall)."""
    geo = geometry_cache.sample("tanh_wall_bubble")
    x0 = np.array([[0.1, 0.05, 0.95, 0.2]])
    h = 0.01

    def wrong(x):
        c = geo.evaluate(x, use_exclude=False).curvature
        Gw = c.ricci - c.ricci_scalar[:, None, None] * c.g
        return np.einsum("nac,ncb->nab", c.ginv, Gw), c

    Gm0, c0 = wrong(x0)
    div = np.zeros((1, 4))
    size = np.zeros((1, 4))
    for a in range(4):
        acc = np.zeros((1, 4))
        for k, ck in FD8.items():
            for sgn in (1, -1):
                xs = x0.copy()
                xs[:, a] += sgn * k * h
                acc += sgn * ck * wrong(xs)[0][:, a, :]
        div += acc / h
        size += np.abs(acc / h)
    gam = c0.christoffel
    div += np.einsum("naae,neb->nb", gam, Gm0) - np.einsum("neab,nae->nb", gam, Gm0)
    assert np.abs(div).max() > 1e-2 * size.max()
