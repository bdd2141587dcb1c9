"""Peak resident memory of `auditor check` against the grid size.

For each grid (``--points N``: N³ events of the tanh-wall bubble by default)
one `auditor check --jobs 1` process runs and its own peak RSS is read with
``os.wait4``. The baseline, measured in the same run, is the same check on a
25³ grid (interpreter, libraries, compiled kernels, and one full chunk's
temporaries: 15 625 events exceed the audit's chunk, 13 729 for the bubble). Printed per grid: events,
wall time, peak RSS, the part above the baseline, bytes per event above it,
and that figure against ``auditor.audit.BYTES_PER_EVENT`` (the figure the
audit's memory pre-check uses; a ratio above 1 means the pre-check is too
optimistic). The slope between the two largest grids is printed as well (it
cancels whatever does not grow with the grid).

Then the agreement check: the smallest grid audited in a child process with a
small chunk (``--chunk``, default 257 events) against the JSON of the check at
the default chunk size: identical documents, or the paths that differ.

    python benchmarks/bench_memory.py                     # 33³, 49³, 65³ bubble
    python benchmarks/bench_memory.py --points 65 129     # slower, for extrapolation
    python benchmarks/bench_memory.py --points 257        # 16.98 M events: an hour or more
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from auditor.audit import BYTES_PER_EVENT  # noqa: E402

BUBBLE = ROOT / "sample_metrics" / "tanh_wall_bubble.toml"
MiB = 1 << 20
#: Points per axis of the baseline grid.
BASE_POINTS = 25


def _env():
    env = dict(os.environ)
    old = env.get("PYTHONPATH")
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + old if old else "")
    return env


def run(cmd) -> tuple[float, int, int]:
    """(wall seconds, peak RSS in bytes, exit code) of one child process."""
    t0 = time.perf_counter()
    with tempfile.TemporaryFile() as err:
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=err, cwd=ROOT, env=_env())
        _, status, usage = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)
        wall = time.perf_counter() - t0
        if proc.returncode not in (0, 1, 3):
            err.seek(0)
            raise SystemExit(f"{' '.join(map(str, cmd))} failed ({proc.returncode}):\n"
                             + err.read().decode(errors="replace"))
    return wall, usage.ru_maxrss * 1024, proc.returncode      # ru_maxrss is in KiB on Linux


def check(path, points, out_json) -> tuple[float, int]:
    """Wall time and peak RSS of `auditor check` at --points ``points``, started
    warm: the start-up record of exactly this command (one per file, --set and
    --points) is written first by a cheap process, so that the measured one
    restores it without importing SymPy, as every repeat run does (a first run
    imports it and holds some 50 MiB more)."""
    run([sys.executable, "-c", _WARM, str(path), str(points)])
    wall, rss, _ = run([sys.executable, "-m", "auditor", "check", str(path), "--points",
                        str(points), "--quiet", "--jobs", "1", "--json", str(out_json)])
    return wall, rss


_WARM = """
import sys
from auditor.warm import open_metric
open_metric(sys.argv[1], points=int(sys.argv[2]))
"""


_SMALL_CHUNK = """
import json, sys
from auditor.audit import audit
from auditor.metric import load_metric
from auditor.outputs import write_json
res = audit(load_metric(sys.argv[1], points=int(sys.argv[2])), chunk=int(sys.argv[3]),
            progress=False)
write_json(res.to_json(), sys.argv[4])
"""


def differences(a, b, path=""):
    """Paths at which two JSON documents differ."""
    if isinstance(a, dict) and isinstance(b, dict):
        out = [f"{path}/{k}" for k in set(a) ^ set(b)]
        for k in set(a) & set(b):
            out += differences(a[k], b[k], f"{path}/{k}")
        return out
    if isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        return [d for i, (x, y) in enumerate(zip(a, b)) for d in differences(x, y, f"{path}[{i}]")]
    return [] if a == b else [path or "/"]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, nargs="+", default=[33, 49, 65],
                    help="points per axis of each grid (default 33 49 65)")
    ap.add_argument("--metric", type=Path, default=BUBBLE, help="metric file (default: bubble)")
    ap.add_argument("--chunk", type=int, default=257,
                    help="small chunk of the agreement check (events; default 257)")
    args = ap.parse_args(argv)
    sizes = sorted(set(args.points))

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        check(args.metric, 2, tmp / "warm.json")          # fills the kernel cache
        _, base = check(args.metric, BASE_POINTS, tmp / "base.json")
        print(f"{args.metric.name}; baseline ({BASE_POINTS} points per axis): peak RSS "
              f"{base / MiB:.0f} MiB; BYTES_PER_EVENT = {BYTES_PER_EVENT}")
        print(f"{'--points':>8}{'events':>12}{'wall s':>9}{'peak MiB':>10}{'above MiB':>11}"
              f"{'B/event':>9}{'/ BYTES_PER_EVENT':>19}")
        rows = []
        for n in sizes:
            wall, rss = check(args.metric, n, tmp / f"check_{n}.json")
            events = json.loads((tmp / f"check_{n}.json").read_text())["points"]
            per = (rss - base) / events
            rows.append((events, rss))
            print(f"{n:>8}{events:>12}{wall:>9.1f}{rss / MiB:>10.0f}{(rss - base) / MiB:>11.0f}"
                  f"{per:>9.1f}{per / BYTES_PER_EVENT:>19.2f}")
        if len(rows) >= 2:
            (e1, r1), (e2, r2) = rows[-2], rows[-1]
            print(f"slope between the two largest grids: {(r2 - r1) / (e2 - e1):.1f} B/event")

        n = sizes[0]
        small = tmp / "small_chunk.json"
        wall, _, _ = run([sys.executable, "-c", _SMALL_CHUNK, str(args.metric), str(n),
                          str(args.chunk), str(small)])
        a = json.loads((tmp / f"check_{n}.json").read_text())
        b = json.loads(small.read_text())
        diff = differences(a, b)
        print(f"agreement at --points {n}, chunk {args.chunk} against the default chunk: "
              + ("identical JSON" if not diff else f"{len(diff)} differing values: "
                 + ", ".join(sorted(diff)[:10])))


if __name__ == "__main__":
    main()
