"""Start-up of a repeat run: time from process start to the first evaluated event.

Runs `auditor probe` twice on a fresh kernel cache: the first run compiles
(symbolic derivatives, common subexpressions, code generation), the second must
find everything in the cache and do no symbolic work. Prints both wall times and
their ratio, and the import time of the package.

    python benchmarks/bench_startup.py [METRIC_FILE]
"""

from __future__ import annotations

import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def timed(cmd, env):
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env)
    if proc.returncode != 0:
        raise SystemExit(proc.stderr)
    return time.perf_counter() - t0


def main():
    path = sys.argv[1] if len(sys.argv) > 1 else str(ROOT / "sample_metrics" / "tanh_wall_bubble.toml")
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, AUDITOR_CACHE_DIR=cache)
        probe = [sys.executable, "-m", "auditor", "probe", path, "--at", "t=0,x=0.5,y=0.5,z=0"] \
            if "bubble" in path else [sys.executable, "-m", "auditor", "probe", path, "--at",
                                      "t=0,r=3,theta=1,phi=0"]
        imp = timed([sys.executable, "-c", "import auditor.cli"], env)
        cold = timed(probe, env)
        warm = timed(probe, env)
    print(f"import auditor.cli      {imp:6.2f} s")
    print(f"probe, empty cache      {cold:6.2f} s")
    print(f"probe, warm cache       {warm:6.2f} s   (cold/warm {cold / warm:.1f}x)")


if __name__ == "__main__":
    main()
