"""The same audit serially, over processes and on a Dask cluster: identical results."""

from __future__ import annotations

import json

import pytest

from auditor.audit import audit
from auditor.metric import load_metric

from ..conftest import SAMPLES_DIR


def _json(res):
    out = res.to_json()
    return json.dumps(out, sort_keys=True, default=str)


@pytest.fixture(scope="module")
def bubble():
    return load_metric(SAMPLES_DIR / "tanh_wall_bubble.toml", points=13)


def test_jobs_give_identical_results(bubble, geometry_cache):
    geometry = geometry_cache.sample("tanh_wall_bubble")
    serial = audit(bubble, geometry=geometry, crew=False, chunk=512)
    parallel = audit(bubble, geometry=geometry, crew=False, chunk=512, jobs=2)
    # Chunks are evaluated by the same code and reduced in the same order.
    assert _json(serial) == _json(parallel)


def test_jobs_keep_few_chunks_in_flight(bubble, geometry_cache, monkeypatch):
    """Finished chunks wait in the parent's memory: with --jobs, at most
    CHUNKS_AHEAD per worker are submitted ahead of the one being reduced (a
    synchronous stand-in for the pool counts them), and results are unchanged."""
    from concurrent.futures import Future
    import auditor.audit as A
    count = {"now": 0, "peak": 0}

    class CountingPool:
        def __init__(self, jobs):
            pass

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            return False

        def submit(self, fn, *args):
            fut = Future()
            fut.set_result(fn(*args))
            count["now"] += 1
            count["peak"] = max(count["peak"], count["now"])
            done = fut.result

            def result(timeout=None):
                count["now"] -= 1
                return done(timeout)
            fut.result = result
            return fut

    geometry = geometry_cache.sample("tanh_wall_bubble")
    serial = audit(bubble, geometry=geometry, crew=False, refine=False, chunk=100)
    monkeypatch.setattr(A, "WorkerPool", CountingPool)
    parallel = audit(bubble, geometry=geometry, crew=False, refine=False, chunk=100, jobs=3)
    assert count["peak"] == A.CHUNKS_AHEAD * 3 and count["now"] == 0
    assert _json(serial) == _json(parallel)


def test_chunk_size_does_not_change_results(bubble, geometry_cache):
    geometry = geometry_cache.sample("tanh_wall_bubble")
    big = audit(bubble, geometry=geometry, crew=False, refine=False, chunk=4096)
    small = audit(bubble, geometry=geometry, crew=False, refine=False, chunk=97)
    # Per-event values are identical; integrals are sums in the same order.
    assert _json(big) == _json(small)


def test_dask_gives_identical_results(bubble, geometry_cache):
    distributed = pytest.importorskip("distributed", reason="the dask extra is not installed")
    geometry = geometry_cache.sample("tanh_wall_bubble")
    serial = audit(bubble, geometry=geometry, crew=False, refine=False, chunk=700)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        remote = audit(bubble, geometry=geometry, crew=False, refine=False, chunk=700,
                       dask=cluster.scheduler_address)
    assert _json(serial) == _json(remote)
