"""Throughput of a full `auditor check` against a plain textbook baseline.

Prints, for each metric: events per second of the whole `check` process
(curvature, the four exact margins, Hawking–Ellis type, tidal map, station
acceleration, regions, refinement, cross-check), measured with a warm kernel
cache; the same for a baseline written as a textbook would (exact derivatives
through ``sympy.lambdify(..., cse=True)`` and ``numpy.einsum(...,
optimize=True)`` contractions, curvature and the Eulerian energy density
only), measured in the same run on the same events; their ratio; and the peak
resident memory of the check process.

    python benchmarks/bench_check.py                 # 65³ bubble and Kerr
    python benchmarks/bench_check.py --points 33     # quicker
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import sympy as sp

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from auditor.grid import Grid  # noqa: E402
from auditor.metric import load_metric  # noqa: E402

METRICS = {"bubble": ROOT / "sample_metrics" / "tanh_wall_bubble.toml",
           "kerr": ROOT / "sample_metrics" / "kerr_boyer_lindquist.toml"}


def run_check(path, points, jobs, env):
    """Wall time and peak RSS (MiB) of one `auditor check` process (its own
    rusage, from wait4: not the maximum over every child of this script)."""
    with tempfile.TemporaryDirectory() as tmp:
        cmd = [sys.executable, "-m", "auditor", "check", str(path), "--points", str(points),
               "--quiet", "--json", os.path.join(tmp, "out.json"), "--jobs", str(jobs)]
        t0 = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                                text=True, env=env)
        err = proc.stderr.read()
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode not in (0, 1, 3):
        raise SystemExit(f"check failed: {err}")
    return wall, usage.ru_maxrss / 1024.0


def baseline(metric, events):
    """Textbook pipeline: lambdify(cse=True) of g, ∂g, ∂∂g, then einsum contractions."""
    xs = metric.coord_symbols
    g = metric.g
    dg = [[[sp.diff(g[a, b], xs[c]) for b in range(4)] for a in range(4)] for c in range(4)]
    d2g = [[[[sp.diff(dg[c][a][b], xs[d]) for b in range(4)] for a in range(4)]
            for d in range(4)] for c in range(4)]
    t0 = time.perf_counter()
    f = sp.lambdify(list(xs) + list(metric.param_symbols), [g.tolist(), dg, d2g],
                    modules="numpy", cse=True)
    t_compile = time.perf_counter() - t0
    p = list(metric.parameters.values())
    t0 = time.perf_counter()
    n = events.shape[0]
    with np.errstate(all="ignore"):
        G_, DG, D2G = f(*events.T, *p)
    bc = lambda a: np.broadcast_to(np.asarray(a, dtype=float), (n,)) if np.ndim(a) == 0 else a
    G_ = np.moveaxis(np.array([[bc(v) for v in row] for row in G_]), -1, 0)
    DG = np.moveaxis(np.array([[[bc(v) for v in r] for r in m] for m in DG]), -1, 0)
    D2G = np.moveaxis(np.array([[[[bc(v) for v in r] for r in m] for m in k] for k in D2G]), -1, 0)
    ginv = np.linalg.inv(G_)
    gam_low = 0.5 * (np.einsum("nbac->nabc", DG) + np.einsum("ncab->nabc", DG) - DG)
    gam = np.einsum("nad,ndbc->nabc", ginv, gam_low, optimize=True)
    riem = 0.5 * (np.einsum("nbcad->nabcd", D2G) + np.einsum("nadbc->nabcd", D2G)
                  - np.einsum("nacbd->nabcd", D2G) - np.einsum("nbdac->nabcd", D2G)) \
        + np.einsum("nebc,nead->nabcd", gam, gam_low, optimize=True) \
        - np.einsum("nebd,neac->nabcd", gam, gam_low, optimize=True)
    ric = np.einsum("nac,nabcd->nbd", ginv, riem, optimize=True)
    R = np.einsum("nbd,nbd->n", ginv, ric)
    Gab = ric - 0.5 * R[:, None, None] * G_
    Tup = np.einsum("nac,nbd,ncd->nab", ginv, ginv, Gab, optimize=True) / (8 * np.pi)
    rho = -Tup[:, 0, 0] / ginv[:, 0, 0]          # N² T^tt with N² = −1/g^tt
    return time.perf_counter() - t0, t_compile, rho


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=65)
    ap.add_argument("--jobs", type=int, default=1)
    ap.add_argument("--metric", choices=sorted(METRICS) + ["all"], default="all")
    ap.add_argument("--repeat", type=int, default=3,
                    help="runs of each measurement; the fastest is reported (default 3)")
    args = ap.parse_args()
    names = sorted(METRICS) if args.metric == "all" else [args.metric]
    env = dict(os.environ)
    # As on an ordinary installation, the check process reads its modules'
    # cached bytecode (written by the warm-up run) instead of compiling them
    # again each time: an environment that turns bytecode caching off would add
    # its own start-up cost to every figure.
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    print(f"{'metric':8} {'events':>9} {'check ev/s':>11} {'baseline ev/s':>14} "
          f"{'ratio':>6} {'check s':>8} {'5^3 s':>6} {'per-event ratio':>16} {'peak MiB':>9}")
    # The first runs write the caches (kernels, start-up record, bytecode) and
    # are not counted. Then rounds of: every check, then every baseline, so
    # that both see the machine in the same state (its speed drifts); each
    # figure is the fastest of its rounds. Peak memory comes from the first
    # counted check, made while this process is still small.
    metrics = {name: load_metric(METRICS[name], points=args.points) for name in names}
    events = {name: Grid.from_region(m).events(0, Grid.from_region(m).size)
              for name, m in metrics.items()}
    best = {name: {"check": np.inf, "small": np.inf, "base": np.inf, "rss": None}
            for name in names}
    for name in names:
        run_check(METRICS[name], 5, args.jobs, env)
        run_check(METRICS[name], args.points, args.jobs, env)
    for _ in range(max(1, args.repeat)):
        for name in names:
            b = best[name]
            b["small"] = min(b["small"], run_check(METRICS[name], 5, args.jobs, env)[0])
            wall, rss = run_check(METRICS[name], args.points, args.jobs, env)
            b["check"] = min(b["check"], wall)
            b["rss"] = rss if b["rss"] is None else b["rss"]
        for name in names:
            with np.errstate(all="ignore"):
                t_base = baseline(metrics[name], events[name])[0]
            best[name]["base"] = min(best[name]["base"], t_base)
    for name in names:
        b, size = best[name], len(events[name])
        ours, base = size / b["check"], size / b["base"]
        per_event = (size - 125) / max(b["check"] - b["small"], 1e-9) / base
        print(f"{name:8} {size:9d} {ours:11.0f} {base:14.0f} {ours / base:6.2f} "
              f"{b['check']:8.2f} {b['small']:6.2f} {per_event:16.2f} {b['rss']:9.0f}")
    print("check: whole process, warm caches, every output, fastest of the runs; baseline: "
          "curvature and Eulerian energy density only, evaluation time without compilation, "
          "fastest of the runs. 5^3 s: the same check on 125 events (start-up and the work "
          "that does not grow with the grid); per-event ratio: the check's events per "
          "second beyond that, against the baseline's.")


if __name__ == "__main__":
    main()
