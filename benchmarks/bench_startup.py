"""Start-up of a repeat run: time from process start to the first evaluated event.

Runs `auditor probe` and `auditor check` (at 9 points per axis) three times
each on a fresh cache folder: the first run parses and validates with SymPy,
differentiates and compiles; the repeats start from the start-up record
(auditor/warm.py) and must do no symbolic work. For every run it prints the
whole wall time, when the first event was evaluated (counted from the start of
the process, reported by the run itself with AUDITOR_TIMINGS=1) and whether
SymPy was imported; and, as the baseline measured in the same run, the time to
start Python and import NumPy alone.

    python benchmarks/bench_startup.py [METRIC_FILE ...]
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEFAULT = [ROOT / "sample_metrics" / "tanh_wall_bubble.toml",
           ROOT / "sample_metrics" / "kerr_boyer_lindquist.toml"]
EVENTS = {"tanh_wall_bubble": "t=0,x=0.5,y=0.5,z=0",
          "kerr_boyer_lindquist": "t=0,r=5,theta=1,phi=0"}


def run(cmd, env):
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t0
    if proc.returncode not in (0, 1, 3):
        raise SystemExit(proc.stderr)
    m = re.search(r"first event evaluated ([0-9.]+) s .*SymPy (not imported|imported)",
                  proc.stderr)
    return wall, (float(m.group(1)) if m else float("nan")), (m.group(2) if m else "?")


def main():
    paths = [Path(p) for p in sys.argv[1:]] or DEFAULT
    env0 = dict(os.environ)
    base = min(run([sys.executable, "-c", "import numpy"], env0)[0] for _ in range(3))
    print(f"baseline: python -c 'import numpy'  {base:6.3f} s (best of 3)")
    print(f"{'metric':22} {'command':6} {'run':>4} {'wall s':>7} {'first event s':>14}  SymPy")
    for path in paths:
        at = EVENTS.get(path.stem, "t=0,r=5,theta=1,phi=0")
        with tempfile.TemporaryDirectory() as cache:
            env = dict(env0, AUDITOR_CACHE_DIR=cache, AUDITOR_TIMINGS="1")
            with tempfile.TemporaryDirectory() as out:
                commands = {
                    "probe": [sys.executable, "-m", "auditor", "probe", str(path), "--at", at],
                    "check": [sys.executable, "-m", "auditor", "check", str(path), "--points",
                              "9", "--quiet", "--json", os.path.join(out, "o.json")]}
                for name, cmd in commands.items():
                    for k in range(3):
                        wall, first, sym = run(cmd, env)
                        print(f"{path.stem:22} {name:6} {k + 1:4d} {wall:7.2f} {first:14.3f}  {sym}")
    print("run 1 starts from an empty cache; runs 2 and 3 are repeats (target: first event "
          "within 1 s, SymPy not imported).")


if __name__ == "__main__":
    main()
