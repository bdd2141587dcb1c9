"""The compiled per-event loops (auditor/_native.c) against the NumPy reference.

Both implementations carry out the same steps (auditor/native.py); they may
differ in the order of floating-point sums, so they are compared at the
round-off of each quantity: a few ε times the size of the cancelling terms
(``scale21`` for curvature, max|T_âb̂| for margins — the bounds documented in
auditor/geometry/curvature.py and auditor/conditions/margins.py). Random tests
print their seed (fixture ``rng``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from auditor import native
from auditor.conditions import margins as M
from auditor.geometry.curvature import curvature_from_rows, curvature_from_rows_numpy
from auditor.grid import Grid

pytestmark = pytest.mark.skipif(not native.available(),
                                reason="compiled accelerator not built here")

EPS = np.finfo(float).eps


def _raw_rows(geometry_cache, name, points=9):
    from tests.conftest import SAMPLES_DIR
    from auditor.metric import load_metric
    metric = load_metric(SAMPLES_DIR / name, points=points)
    geo = geometry_cache.path(SAMPLES_DIR / name)
    grid = Grid.from_region(metric)
    raw = geo.raw(grid.events(0, grid.size), geo.params(metric.parameters))
    return raw[:, np.isfinite(raw).all(axis=0)]


@pytest.mark.parametrize("name", ["tanh_wall_bubble.toml", "kerr_boyer_lindquist.toml"])
def test_curvature_matches_numpy(geometry_cache, name):
    rows = _raw_rows(geometry_cache, name)
    a, b = curvature_from_rows(rows), curvature_from_rows_numpy(rows)
    bound = 64 * EPS * b.scale                       # per event: round-off of Riemann
    assert np.all(np.abs(a.r21 - b.r21) <= bound)
    assert np.allclose(a.scale21, b.scale21, rtol=1e-13, atol=0)
    assert np.allclose(a.g, b.g, rtol=0, atol=0)
    ginv_size = np.abs(b.ginv).max(axis=(1, 2))
    assert np.all(np.abs(a.ginv - b.ginv).max(axis=(1, 2)) <= 1e-12 * ginv_size)
    # Ricci and Einstein sum ≤ 16 components times g^ab: bound on that scale
    ein_bound = 64 * EPS * b.scale * np.abs(b.ginv).max(axis=(1, 2)) ** 2 * 16
    assert np.all(np.abs(a.einstein - b.einstein).max(axis=(1, 2)) <= ein_bound + 1e-300)
    assert np.all(np.abs(a.kretschmann - b.kretschmann) <= 1e-12 * b.kretschmann_scale)
    assert np.allclose(a.christoffel10, b.christoffel10, rtol=1e-12, atol=1e-14)


def _tensors(rng, n):
    """Gaussian tensors, nearly isotropic stresses with large momentum density,
    large energy flux, and tensors with exact zeros."""
    T = rng.normal(size=(n, 4, 4))
    T = T + np.swapaxes(T, 1, 2)
    q = n // 4
    T[q:2 * q, 1:, 1:] = rng.normal(size=(q, 1, 1)) * np.eye(3) + 1e-4 * T[q:2 * q, 1:, 1:]
    T[2 * q:3 * q, 0, :] *= 5.0
    T[2 * q:3 * q, :, 0] *= 5.0
    T[3 * q:, 1:, 0] = T[3 * q:, 0, 1:] = 0.0
    T[-1] = 0.0
    return T


def test_margins_and_observers_match_numpy(rng, monkeypatch):
    T = _tensors(rng, 4000)
    a = M.margins_with_observers(T)
    monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    assert not native.available()
    b = M.margins_with_observers(T)
    tol = 64 * EPS * np.abs(T).max(axis=(1, 2))
    for c in ("NEC", "WEC", "SEC"):
        assert np.all(np.abs(a[c][0] - b[c][0]) <= 2 * tol), c
    # DEC is a global search with the same starts and steps: the two agree
    # within round-off.
    assert np.all(a["DEC"][0] <= b["DEC"][0] + tol)
    assert np.all(b["DEC"][0] <= a["DEC"][0] + tol)
    # observers attain their margins: T(n + s1, n + s2) at the returned pair
    rho, bb, A = T[:, 0, 0], T[:, 0, 1:], T[:, 1:, 1:]
    s1, s2 = a["DEC"][1], a["DEC"][2]
    val = rho + ((s1 + s2) * bb).sum(1) + np.einsum("ni,nij,nj->n", s1, A, s2)
    assert np.all(np.abs(val - a["DEC"][0]) <= tol)
    assert np.allclose(np.linalg.norm(s1, axis=1), 1.0) and np.allclose(
        np.linalg.norm(s2, axis=1), 1.0)


def test_settled_rows_keep_the_nec_pair(rng):
    T = _tensors(rng, 200)
    settled = np.zeros(len(T), bool)
    settled[::2] = True
    r = M.margins_with_observers(T, settled=settled)
    assert np.array_equal(r["DEC"][0][settled], r["NEC"][0][settled])


def test_batching_does_not_change_a_bit(rng):
    """Every event is computed on its own: any split gives identical bits."""
    T = _tensors(rng, 300)
    whole = M.margins_with_observers(T)
    parts = [M.margins_with_observers(T[i:i + 7]) for i in range(0, len(T), 7)]
    for c in ("NEC", "WEC", "SEC", "DEC"):
        for k in range(len(whole[c])):              # margin, then its observers
            joined = np.concatenate([p[c][k] for p in parts])
            assert np.array_equal(joined, whole[c][k]), (c, k)


@pytest.mark.parametrize("vectors", [False, True])
def test_frame_batching_does_not_change_a_bit(geometry_cache, vectors):
    """The frame loop works on blocks of events (the tidal eigenproblems of a
    block together): any split, and a non-finite event beside the others,
    gives identical bits for every event."""
    from auditor.geometry.curvature import _NATIVE_TABLES
    curv = curvature_from_rows(_raw_rows(geometry_cache, "tanh_wall_bubble.toml"))
    E, _ = native.eulerian(curv.g, curv.ginv)
    r21 = curv.r21.copy()
    r21[:, 5] = np.nan                              # one event with non-finite tides
    args = (E, curv.einstein, r21, curv.scale21, _NATIVE_TABLES)
    whole = native.frame(*args, vectors=vectors)
    n = E.shape[0]
    parts = [native.frame(E[i:i + 7], curv.einstein[i:i + 7], r21[:, i:i + 7],
                          curv.scale21[:, i:i + 7], _NATIVE_TABLES, vectors=vectors)
             for i in range(0, n, 7)]
    assert np.isnan(whole["eigenvalues"][5]).all() and np.isfinite(whole["eigenvalues"][6]).all()
    for key, value in whole.items():
        joined = np.concatenate([p[key] for p in parts])
        assert np.array_equal(joined, value, equal_nan=True), key


def test_wrong_buffers_are_refused():
    """The C side checks sizes itself (a short buffer must not be read past)."""
    from auditor import _native
    with pytest.raises(ValueError):
        _native.margins(10, np.zeros((2, 4, 4)), np.zeros(10), np.zeros((10, 20)),
                        np.zeros((10, 3, 3)))
    with pytest.raises((ValueError, BufferError, TypeError)):
        _native.margins(2, np.zeros((2, 4, 4))[:, ::2], np.zeros(2), np.zeros((2, 20)),
                        np.zeros((2, 3, 3)))


@pytest.mark.parametrize("name", sorted(p.name for p in
                                         (Path(__file__).parents[2] / "sample_metrics")
                                         .glob("*.toml")))
def test_whole_audit_agrees_with_the_numpy_path(geometry_cache, monkeypatch, name):
    """End to end, the compiled loops and the NumPy reference give the same
    verdicts and counts, and margins within their stated tolerances."""
    from tests.conftest import SAMPLES_DIR
    from auditor.audit import audit
    from auditor.metric import load_metric
    path = SAMPLES_DIR / name
    metric = load_metric(path, points=9)
    geo = geometry_cache.path(path)
    fast = audit(metric, geometry=geo, progress=False, crew=False)
    monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    ref = audit(metric, geometry=geo, progress=False, crew=False)
    assert fast.excluded_by_reason == ref.excluded_by_reason
    assert fast.he_type_counts == ref.he_type_counts
    for c in ("NEC", "WEC", "SEC", "DEC"):
        a, b = fast.conditions[c], ref.conditions[c]
        assert a.holds == b.holds, c
        assert a.violating_fraction == b.violating_fraction, c
        assert a.saturated_fraction == b.saturated_fraction, c
        assert abs(a.min_margin - b.min_margin) <= a.min_margin_tolerance + b.min_margin_tolerance
        ma, mb = fast.maps["margin_" + c], ref.maps["margin_" + c]
        tol = fast.maps["tol_" + c] + ref.maps["tol_" + c]
        ok = np.isfinite(mb)
        assert np.array_equal(np.isfinite(ma), ok)
        assert np.all(np.abs(ma[ok] - mb[ok]) <= tol[ok]), c


@pytest.mark.parametrize("shape", [(7,), (5, 6), (9, 8, 7), (3, 5, 6, 7), (1, 1, 1), (2, 17, 17, 17)])
def test_region_labels_equal_scipy_ndimage(rng, shape):
    """Connected regions (face connectivity, numbered in order of first
    appearance) equal scipy.ndimage.label's, the reference library."""
    from scipy import ndimage
    masks = [rng.random(shape) < p for p in (0.05, 0.3, 0.5, 0.7, 0.97)]
    masks += [np.zeros(shape, bool), np.ones(shape, bool),
              (np.indices(shape).sum(axis=0) % 2 == 0)]            # checkerboard: most labels
    for m in masks:
        a, na = native.label(m)
        b, nb = ndimage.label(m)
        assert na == nb
        assert a.dtype == b.dtype and np.array_equal(a, b)


def test_sampled_minima_match_numpy(rng, monkeypatch):
    from auditor.conditions.sampled import sampled_margins
    T = _tensors(rng, 300)
    a = sampled_margins(T, n_dirs=60, dec_dirs=40)
    monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    b = sampled_margins(T, n_dirs=60, dec_dirs=40)
    tol = 64 * EPS * np.abs(T).max(axis=(1, 2))
    for c in ("nec", "wec", "sec", "dec"):
        assert np.all(np.abs(getattr(a, c) - getattr(b, c)) <= tol), c


def test_hawking_ellis_screen_agrees_with_the_full_classification(rng):
    """Type IV with a degenerate real pair (decided by the screen: Hawking & Ellis
    1973 §4.3, from memory — the real pair of a type IV tensor is diagonalisable),
    and fluids and null dust (degenerate or Jordan spectra, left to the full
    classification), in rotated and boosted frames: the same types both ways."""
    from auditor.conditions.hawking_ellis import _classify, classify

    def boosted(T0, phi, axis):
        L = np.eye(4)
        L[0, 0] = L[axis, axis] = np.cosh(phi)
        L[0, axis] = L[axis, 0] = np.sinh(phi)
        q, r = np.linalg.qr(rng.normal(size=(3, 3)))
        R = np.eye(4)
        R[1:, 1:] = q * np.sign(np.diag(r))
        M = L @ R
        return M.T @ T0 @ M

    iv = np.diag([1.0, -1.0, 0.3, 0.3])
    iv[0, 1] = iv[1, 0] = 2.0                    # M = ηT has eigenvalues −1 ± 2i, 0.3, 0.3
    fluid = np.diag([1.0, 0.2, 0.2, 0.2])        # type I, triple eigenvalue
    null = np.zeros((4, 4))
    null[np.ix_([0, 1], [0, 1])] = 1.0           # null dust along x: type II
    Ts = [boosted(T0, phi, axis) for T0 in (iv, fluid, null)
          for phi in (0.0, 0.5, 1.5) for axis in (1, 2)]
    T = np.array(Ts)
    tol = 64 * EPS * np.abs(T).max(axis=(1, 2)) * 10
    a, b = classify(T, tol), _classify(0.5 * (T + np.swapaxes(T, 1, 2)), tol)
    assert np.array_equal(a, b)
    assert list(a[:6]) == [4] * 6 and list(a[6:12]) == [1] * 6 and list(a[12:]) == [2] * 6


def test_metric_screen_matches_eigenvalues(rng):
    """Degenerate / not Lorentzian decisions of the compiled screen equal those
    read from numpy.linalg.eigvalsh (geometry.points): nearly diagonal metrics
    (decided from the diagonal), general ones, degenerate and Riemannian ones."""
    from auditor.geometry.layout import GIDX, PAIRS
    from auditor.geometry.points import _DEGENERATE_RTOL
    n = 3000
    g = np.zeros((n, 4, 4))
    g[:] = np.diag([-1.0, 1.0, 1.0, 1.0]) * rng.uniform(0.1, 10.0, size=(n, 1, 4))
    noise = rng.normal(size=(n, 4, 4)) * rng.choice([1e-6, 0.1, 3.0], size=(n, 1, 1))
    g += noise + np.swapaxes(noise, 1, 2)
    g[:200, 3, :] = g[:200, 2, :]                  # rank-deficient rows and columns
    g[:200, :, 3] = g[:200, :, 2]
    g[200:400, 0, 0] = np.abs(g[200:400, 0, 0]) + 20.0   # Riemannian (no negative one)
    rows = np.full((150, n), 0.0)
    for k, (a, b) in enumerate(PAIRS):
        rows[k] = g[:, a, b]
    flags = native.gscreen(rows, GIDX, _DEGENERATE_RTOL)
    lam = np.linalg.eigvalsh(g)
    big = np.abs(lam).max(axis=1)
    degenerate = np.abs(lam).min(axis=1) <= _DEGENERATE_RTOL * big
    lorentz = (lam < 0).sum(axis=1) == 1
    assert np.array_equal((flags & 4) != 0, degenerate)
    assert np.array_equal((flags & 8) != 0, ~degenerate & ~lorentz)
    assert degenerate.sum() >= 150 and (~degenerate & ~lorentz).sum() >= 150


def test_metric_screen_flags_every_kind_of_non_finite_entry():
    """A NaN or infinite derivative anywhere (both infinities in one event
    included) sets flag 2; a non-finite g sets flag 1 alone (common practice:
    the same decisions as numpy.isfinite over the rows)."""
    from auditor.geometry.layout import GIDX, PAIRS
    from auditor.geometry.points import _DEGENERATE_RTOL
    n = 8
    rows = np.full((150, n), 0.25)
    for k, (a, b) in enumerate(PAIRS):
        rows[k] = -1.0 if (a, b) == (0, 0) else (1.0 if a == b else 0.0)
    rows[10, 1] = np.nan
    rows[149, 2] = np.inf
    rows[57, 3], rows[58, 3] = np.inf, -np.inf
    rows[100, 4] = -np.inf
    rows[0, 5] = np.nan                           # g itself
    rows[3, 6], rows[20, 6] = np.inf, np.nan
    flags = native.gscreen(rows, GIDX, _DEGENERATE_RTOL)
    assert list(flags) == [0, 2, 2, 2, 2, 1, 1, 0]


def test_screen_eigenvalues_match_lapack(rng):
    """The real double-shift QR of the Hawking–Ellis screen against LAPACK
    (numpy.linalg.eigvals): η T with T symmetric and normalised as the screen
    uses it, general Hessenberg matrices, and hard cases (a cyclic
    permutation, a nilpotent Jordan block, two complex pairs, and a matrix on
    which the iteration cycled before its exceptional shift came every 10
    iterations)."""
    n = 20000
    T = rng.normal(size=(n, 4, 4))
    T = T + np.swapaxes(T, 1, 2)
    eta_T = np.diag([-1.0, 1.0, 1.0, 1.0]) @ T / np.abs(T).max(axis=(1, 2), keepdims=True)
    hess = np.triu(rng.normal(size=(n, 4, 4)), -1)
    cyclic = np.zeros((4, 4))
    cyclic[[1, 2, 3, 0], [0, 1, 2, 3]] = 1.0            # eigenvalues 1, i, −1, −i
    jordan = np.diag([1.0, 1.0, 1.0], 1)                # nilpotent: all eigenvalues 0
    pairs = np.array([[0.3, 2.0, 0, 0], [-2.0, 0.3, 0, 0], [0, 0, -1.0, 0.5], [0, 0, -0.5, -1.0]])
    q, _ = np.linalg.qr(rng.normal(size=(4, 4)))
    cycled = np.array([[0.34808427, 0.53967521, 1.17626232, 2.51322117],
                       [-0.1034749, -1.40841968, -0.13564986, 0.16852789],
                       [0.0, 1.11203049, -0.14522024, 0.54784728],
                       [0.0, 0.0, 0.71116352, 0.01636735]])
    hard = np.array([cyclic, jordan, q @ pairs @ q.T, cycled, np.zeros((4, 4))])
    for M_ in (eta_T, hess, hard):
        lam, ok = native.eigvals4(M_)
        assert ok.all()
        ref = np.linalg.eigvals(M_)
        # each computed eigenvalue has a LAPACK eigenvalue close by, and back
        d = np.abs(lam[:, :, None] - ref[:, None, :])
        scale = np.abs(M_).sum(axis=(1, 2))
        assert np.all(d.min(axis=2).max(axis=1) <= 1e-12 * scale)
        assert np.all(d.min(axis=1).max(axis=1) <= 1e-12 * scale)
    # complex pairs come as conjugates, the positive imaginary part first
    lam, _ = native.eigvals4(hard[2:3])
    assert lam[0, 0] == np.conj(lam[0, 1]) and lam[0, 0].imag > 0


@pytest.mark.parametrize("crew_frame", ["eulerian", "static"])
def test_tides_without_principal_directions(geometry_cache, crew_frame):
    """A region audit asks for the tidal eigenvalues only: they are the same
    bits as with the eigenvectors, in the compiled loops (common practice: the
    rotations of the Jacobi method act on the matrix whether or not they are
    accumulated)."""
    from tests.conftest import SAMPLES_DIR
    from auditor.metric import load_metric
    from auditor.pointwise import analyse
    path = SAMPLES_DIR / "tanh_wall_bubble.toml"
    metric = load_metric(path, points=7)
    grid = Grid.from_region(metric)
    batch = geometry_cache.path(path).evaluate(grid.events(0, grid.size), metric.parameters)
    full = analyse(batch, crew_frame)
    lean = analyse(batch, crew_frame, vectors=False)
    assert lean.tidal_vectors is None and full.tidal_vectors is not None
    assert np.array_equal(lean.tidal_eigenvalues, full.tidal_eigenvalues, equal_nan=True)
    assert np.isfinite(full.tidal_eigenvalues).any()


def test_exact_sum_bins_equal_the_numpy_binning(rng, monkeypatch):
    """The compiled binning of ExactSum fills the same bins with the same bits as
    the NumPy one (values over 600 decades, subnormals, zeros, signs, groups);
    totals against math.fsum (Python's correctly rounded sum)."""
    import math
    from auditor.sums import ExactSum
    x = rng.standard_normal(6000) * 10.0 ** rng.integers(-300, 300, 6000)
    x = np.concatenate([x, rng.standard_normal(500) * 1e-310, np.zeros(50), -x[:700]])
    groups = rng.integers(0, 3, x.size)
    fast = ExactSum(3)
    fast.add(x, groups)
    monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    ref = ExactSum(3)
    ref.add(x, groups)
    assert np.array_equal(fast._hi, ref._hi) and np.array_equal(fast._lo, ref._lo)
    assert fast.values() == ref.values() == [math.fsum(x[groups == k]) for k in range(3)]
    monkeypatch.delenv("AUDITOR_NO_NATIVE")
    hi, lo = np.zeros(2200), np.zeros(2200)
    with pytest.raises(ValueError, match="group out of range"):
        native.exact_bins(np.ones(2), np.array([0, 1]), hi, lo, 1100, 2200)
    with pytest.raises(ValueError, match="non-finite"):
        native.exact_bins(np.array([1.0, np.nan]), None, hi, lo, 1100, 2200)


@pytest.mark.parametrize("name", ["tanh_wall_bubble.toml", "kerr_boyer_lindquist.toml"])
def test_constant_rows_are_not_read_and_change_nothing(geometry_cache, name):
    """Rows the kernel fills with one number (its generated source says so)
    hold that number at every event; the compiled loops given them skip
    reading them and return the same bits."""
    from tests.conftest import SAMPLES_DIR
    from auditor.geometry.layout import GIDX
    geo = geometry_cache.path(SAMPLES_DIR / name)
    constant = geo.kernel.constant_rows
    fixed = np.flatnonzero(~np.isnan(constant))
    assert 0 < fixed.size < 150          # both metrics have derivatives that vanish identically
    rows = _raw_rows(geometry_cache, name)
    assert np.array_equal(rows[fixed], np.broadcast_to(constant[fixed, None], rows[fixed].shape))
    a, b = curvature_from_rows(rows), curvature_from_rows(rows, constant=constant)
    for key in ("g", "ginv", "christoffel10", "r21", "scale21", "ricci", "ricci_scalar",
                "einstein"):
        assert np.array_equal(getattr(a, key), getattr(b, key)), key
    assert np.array_equal(native.gscreen(rows, GIDX, 1e-12),
                          native.gscreen(rows, GIDX, 1e-12, constant))


def test_observers_match_numpy(rng, monkeypatch):
    """Frame vectors n + v in coordinates: the compiled loop and the batched
    matrix product agree to round-off (one or several vectors per event)."""
    from auditor.pointwise import _to_coordinates
    E = rng.normal(size=(500, 4, 4))
    V = rng.normal(size=(500, 5, 3))
    a, a1 = _to_coordinates(E, V), _to_coordinates(E, V[:, 2])
    monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    b, b1 = _to_coordinates(E, V), _to_coordinates(E, V[:, 2])
    scale = (np.abs(V).sum(axis=2, keepdims=True) + 1) * np.abs(E).max(axis=(1, 2))[:, None, None]
    assert np.all(np.abs(a - b) <= 4 * EPS * scale)
    assert np.array_equal(a1, a[:, 2])
    assert np.allclose(a1, b1, rtol=0, atol=4 * EPS * scale[:, 2].max())


@pytest.mark.parametrize("compiled", [True, False])
def test_settle_tolerance_equals_the_settled_mask(rng, monkeypatch, compiled):
    """Settling by a per-event tolerance (the compiled loop's max |T|) gives
    the same margins and observers as the mask max |T| ≤ tolerance."""
    if not compiled:
        monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    T = _tensors(rng, 400)
    T[::3] *= 1e-13                              # some events within their round-off
    tol = np.full(len(T), 1e-12)
    mask = np.abs(T).max(axis=(1, 2)) <= tol
    assert 0 < mask.sum() < len(T)
    a = M._margins_of_checked(T, settle_tol=tol)
    b = M._margins_of_checked(T, settled=mask)
    for c in ("NEC", "WEC", "SEC", "DEC"):
        for k in range(len(a[c])):
            assert np.array_equal(a[c][k], b[c][k]), (c, k)
