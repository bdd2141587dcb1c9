"""The audit reduces chunk by chunk: results must not depend on the chunk size.

Outside reference for the violating regions: ``scipy.ndimage`` (label,
minimum) with ``math.fsum`` (Python's correctly rounded sum), on whole maps.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import ndimage

from auditor.audit import ResultMaps, _regions, audit
from auditor.grid import Grid
from auditor.metric import load_metric, loads_metric
from auditor.pointwise import CONDITIONS, margin_tolerances

from ..conftest import SAMPLES_DIR

SMALL_CHUNK = 257
#: So small that chunks hold one cross-check event, or none.
TINY_CHUNK = 7


def _same_maps(a, b):
    assert set(a) == set(b)
    for key in a:
        if key.startswith("cross_"):
            for k in ("exact", "sampled", "tol"):
                x = np.concatenate(a[key][k]) if a[key][k] else np.zeros(0)
                y = np.concatenate(b[key][k]) if b[key][k] else np.zeros(0)
                np.testing.assert_array_equal(x, y, err_msg=f"{key}/{k}")
        else:
            np.testing.assert_array_equal(a[key], b[key], err_msg=key)


def _bubble_in_time():
    """The bubble sample with its time axis sampled too (volumes per time sample)."""
    text = (SAMPLES_DIR / "tanh_wall_bubble.toml").read_text()
    head, tail = text.split("[region]")
    region = ('[region]\nt = [0.0, 0.5]\nx = [-2.0, 2.0]\ny = [-2.0, 2.0]\nz = [-2.0, 2.0]\n'
              'points = { t = 3, x = 9, y = 9, z = 9 }\n')
    return head + region + "[crew]" + tail.split("[crew]")[1]


CASES = {"bubble": ("tanh_wall_bubble", 13), "schwarzschild": ("schwarzschild", 40),
         "bubble, time sampled": (None, None)}


@pytest.mark.parametrize("case, chunk", [(c, SMALL_CHUNK) for c in CASES]
                         + [("bubble", TINY_CHUNK)])
def test_small_chunks_give_identical_results(case, chunk, geometry_cache):
    stem, points = CASES[case]
    if stem is None:
        text = _bubble_in_time()
        metric, geometry = loads_metric(text), geometry_cache.text(text)
    else:
        metric = load_metric(SAMPLES_DIR / f"{stem}.toml", points=points)
        geometry = geometry_cache.sample(stem)
    assert Grid.from_region(metric).size > 4 * chunk
    big = audit(metric, geometry=geometry, crew=False, progress=False)
    small = audit(metric, geometry=geometry, crew=False, progress=False, chunk=chunk)
    assert geometry.chunk_events() != chunk
    # verdicts, minima, worst points (grid and refined), regions, energies, tides: all of it
    assert json.dumps(big.to_json(), sort_keys=True) == json.dumps(small.to_json(), sort_keys=True)
    _same_maps(big.maps, small.maps)
    # the comparison covers something: the bubble violates the WEC with negative
    # Eulerian energy (published-checks §1), in regions; volumes per time sample
    if case == "bubble":
        assert big.conditions["WEC"].region_count >= 1 and big.energy.total < 0
    if case == "bubble, time sampled":
        assert len(big.energy.total) == 3 and max(big.energy.total) < 0
        assert len(big.conditions["WEC"].regions[0].volume) == 3


def _synthetic(rng, shape):
    """A grid and maps with several violating blobs, ties and excluded events."""
    names = ("x", "y", "z")
    grid = Grid(("t", "x", "y", "z"), {"t": 0.0}, names,
                tuple(np.linspace(-1.0, 1.0, n) for n in shape))
    size = grid.size
    x = grid.events(0, size)[:, 1:]
    blobs = rng.uniform(-0.8, 0.8, (6, 3))
    field = sum(np.exp(-np.sum((x - b) ** 2, axis=1) / 0.02) for b in blobs)
    margin = np.round(0.3 - field, 3)            # rounding makes ties in the minima
    stored = {"reason": np.where(rng.random(size) < 0.05, 1, 0).astype(np.int8),
              "tol_T": np.full(size, 1e-4), "weight": rng.uniform(0.5, 1.5, size),
              "rho": np.where(rng.random(size) < 0.1, np.nan, rng.standard_normal(size))}
    for c in CONDITIONS:
        stored["margin_" + c] = margin.copy()
    return grid, ResultMaps(stored)


def test_regions_match_a_whole_map_reference(rng, monkeypatch):
    import auditor.audit as audit_module
    monkeypatch.setattr(audit_module, "BLOCK", 97)     # many blocks, regions across them
    grid, maps = _synthetic(rng, (17, 15, 13))
    got, n = _regions(grid, maps, "NEC", per_time=False)

    m = maps["margin_NEC"]
    ok = maps["reason"] == 0
    violating = ok & (m < -margin_tolerances(maps["tol_T"])["NEC"])
    labels, n_ref = ndimage.label(violating.reshape(grid.shape))
    flat = labels.ravel()
    assert n == n_ref and n >= 3
    mins = ndimage.minimum(m, flat, np.arange(1, n + 1))
    order = np.argsort(mins, kind="stable")
    assert len(got) == min(n, audit_module.MAX_REGIONS)
    rho, w = maps["rho"], maps["weight"]
    for region, k in zip(got, order):
        members = flat == k + 1
        first = int(np.flatnonzero(members & (m == mins[k]))[0])
        assert region.min_margin == mins[k]
        assert region.worst_point == grid.event(first)
        assert region.points == int(members.sum())
        assert region.volume == math.fsum(w[members])
        assert region.eulerian_energy == math.fsum((rho * w)[members & np.isfinite(rho)])


@pytest.mark.parametrize("n", [0, 1, 7, 5000])
def test_first_event_of_each_region_label_as_numpy_unique(n, rng):
    """The regions' first events per label: numpy.unique(..., return_index=True)
    is the reference (the audit avoids it for its first call's import)."""
    from auditor.audit import _first_of_each
    labels = rng.integers(1, 9, n)
    got, ref = _first_of_each(labels), np.unique(labels, return_index=True)
    assert np.array_equal(got[0], ref[0]) and np.array_equal(got[1], ref[1])


def test_the_audit_chunk_follows_the_kernel_size(monkeypatch):
    """Geometry.chunk_events: CHUNK_BYTES over the bytes per event (the path's
    arrays plus a double per common subexpression of the kernel), bounded."""
    from types import SimpleNamespace
    from auditor.geometry import Geometry
    from auditor.geometry import points

    def chunk(temps):
        src = "def kernel(x, p, out):\n" + "".join(f"        _t{i} = x\n" for i in range(temps))
        return Geometry.chunk_events(SimpleNamespace(kernel=SimpleNamespace(source=src)))

    from auditor import native
    base = points._EVENT_BYTES["native" if native.available() else "numpy"]
    small, large, huge = chunk(0), chunk(20_000), chunk(10_000_000)
    assert small == min(points.MAX_CHUNK, points.CHUNK_BYTES // base)
    assert huge == points.MIN_CHUNK
    assert points.MIN_CHUNK < large < small
    assert large == points.CHUNK_BYTES // (base + 8 * 20_000)
    monkeypatch.setenv("AUDITOR_NO_NATIVE", "1")
    assert chunk(100) == points.CHUNK_BYTES // (points._EVENT_BYTES["numpy"] + 800)
