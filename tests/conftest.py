"""Shared fixtures: the sample metrics, a session cache of compiled geometries,
seeded random generators and round-off floors.

Compiling a metric's kernel costs seconds (symbolic differentiation and common
subexpression elimination), so every test that needs the geometry of a sample
file goes through :func:`geometry_cache`, which compiles each file once per
session. Parameter changes use ``metric.with_parameters`` and pass
``parameters=`` to ``Geometry.evaluate`` (no recompilation).
"""

from __future__ import annotations

import os
import zlib
from pathlib import Path

import numpy as np
import pytest

from auditor.geometry import Geometry
from auditor.metric import load_metric, loads_metric

SAMPLES_DIR = Path(__file__).resolve().parent.parent / "sample_metrics"

#: Base seed of every random test; override with AUDITOR_TEST_SEED=N to explore.
#: Each test derives its own seed from this and its node id, and prints it, so a
#: failure can be replayed exactly (pytest shows captured output on failure).
BASE_SEED = int(os.environ.get("AUDITOR_TEST_SEED", "20250601"))

EPS = np.finfo(float).eps


class GeometryCache:
    """Geometry objects keyed by file path (or by text for inline metrics)."""

    def __init__(self):
        self._by_key: dict[str, Geometry] = {}

    def path(self, path) -> Geometry:
        key = str(Path(path).resolve())
        if key not in self._by_key:
            self._by_key[key] = Geometry(load_metric(key))
        return self._by_key[key]

    def sample(self, stem: str) -> Geometry:
        return self.path(SAMPLES_DIR / f"{stem}.toml")

    def text(self, text: str) -> Geometry:
        key = "text:" + text
        if key not in self._by_key:
            self._by_key[key] = Geometry(loads_metric(text))
        return self._by_key[key]


_CACHE = GeometryCache()


@pytest.fixture(scope="session")
def samples_dir() -> Path:
    """The folder of sample metric files."""
    return SAMPLES_DIR


@pytest.fixture(scope="session")
def geometry_cache() -> GeometryCache:
    """Session-wide cache of compiled geometries (see module docstring)."""
    return _CACHE


@pytest.fixture
def rng(request):
    """A numpy Generator seeded from BASE_SEED and the test id; the seed is printed."""
    seed = (BASE_SEED + zlib.crc32(request.node.nodeid.encode())) % 2**32
    print(f"random seed for {request.node.nodeid}: {seed} (AUDITOR_TEST_SEED={BASE_SEED})")
    request.node.user_properties.append(("seed", seed))
    return np.random.default_rng(seed)


# -- round-off floors ----------------------------------------------------------
# Curvature.scale (auditor/geometry/curvature.py) is, per point, the largest sum
# of absolute values of the terms that cancel in forming one component R_abcd.
# Each term is a product of at most four rounded numbers, so the error of one
# component is a few ulps of that sum: eps * scale. A quantity that contracts
# R_abcd with weights w (metric inverse, tetrad legs) is uncertain by
# eps * scale * sum|w|. FLOOR_FACTOR = 64 covers the handful of ulps per product
# and per sum with headroom; the floor is then far below 1e-10 of any
# non-vanishing value these tests compare, so it only matters where the
# reference value is (near) zero: vacuum, flat space, the bubble's axis.
FLOOR_FACTOR = 64.0


def inverse_weight(ginv: np.ndarray) -> np.ndarray:
    """Σ_ab |g^ab| per point: the weight of one index contraction with g^ab."""
    return np.abs(ginv).reshape(len(ginv), -1).sum(axis=1)


def riemann_floor(curv) -> np.ndarray:
    """Absolute round-off floor of R_abcd (coordinate basis), per point."""
    return FLOOR_FACTOR * EPS * curv.scale


def ricci_floor(curv) -> np.ndarray:
    """Floor of R_bd = g^ac R_abcd."""
    return riemann_floor(curv) * inverse_weight(curv.ginv)


def scalar_floor(curv) -> np.ndarray:
    """Floor of R = g^bd g^ac R_abcd."""
    return riemann_floor(curv) * inverse_weight(curv.ginv) ** 2


def einstein_floor(curv) -> np.ndarray:
    """Floor of G_ab = R_ab − ½ R g_ab."""
    gmax = np.abs(curv.g).reshape(len(curv.g), -1).max(axis=1)
    return ricci_floor(curv) + 0.5 * scalar_floor(curv) * gmax


def kretschmann_floor(curv) -> np.ndarray:
    """Floor of K = R_abcd R^abcd: δK ≤ 2 Σ|R^abcd| δR_abcd."""
    gi = curv.ginv
    rup = np.einsum("nae,nbf,ncg,ndh,nefgh->nabcd", gi, gi, gi, gi, curv.riemann)
    weight = np.abs(rup).reshape(len(gi), -1).sum(axis=1)
    return 2.0 * riemann_floor(curv) * weight + FLOOR_FACTOR * EPS * curv.kretschmann_scale


def tetrad_weight(E: np.ndarray, legs: int) -> np.ndarray:
    """(max_â Σ_μ |e_â^μ|)^legs: the weight of projecting ``legs`` indices on a tetrad."""
    return np.abs(E).sum(axis=2).max(axis=1) ** legs


def frame_floor(curv, E: np.ndarray) -> np.ndarray:
    """Floor of a frame component of R_ab, G_ab or 8πT (contraction of R_abcd
    with four legs, then a sum of at most 12 such components)."""
    return 12.0 * riemann_floor(curv) * tetrad_weight(E, 4)


def assert_close(got, expected, floor, rtol=1e-10, what=""):
    """|got − expected| <= rtol |expected| + floor, elementwise, with a readable report.

    ``floor`` broadcasts against the arrays (per point: shape (N,) is expanded
    over trailing axes).
    """
    got = np.asarray(got, dtype=float)
    expected = np.broadcast_to(np.asarray(expected, dtype=float), got.shape)
    floor = np.asarray(floor, dtype=float)
    while floor.ndim < got.ndim:
        floor = floor[..., None]
    err = np.abs(got - expected)
    bound = rtol * np.abs(expected) + floor
    bad = ~(err <= bound)
    if bad.any():
        idx = np.argwhere(bad)[:5]
        lines = [f"{what}: {int(bad.sum())} of {bad.size} values outside rtol={rtol:g} + floor"]
        for i in idx:
            i = tuple(i)
            lines.append(f"  at {i}: got {got[i]!r}, expected {expected[i]!r}, "
                         f"|diff| {err[i]:.3e} > bound {bound[i]:.3e}")
        raise AssertionError("\n".join(lines))
