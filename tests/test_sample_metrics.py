"""Every file in sample_metrics/ loads, audits at a documented event, and works
through the ``auditor probe`` command line.

The files are found by glob, so a new sample is covered automatically; it
must then get an entry in EVENTS (the test says so).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from auditor.metric import load_metric
from auditor.probe import parse_event, probe
from tests.conftest import SAMPLES_DIR

SAMPLE_PATHS = sorted(SAMPLES_DIR.glob("*.toml"))
REPO = SAMPLES_DIR.parent

#: One auditable event per sample file (the `--at` text), chosen off every
#: coordinate singularity and excluded set: in the wall for the bubble, at the
#: throat for the wormhole, in the packet for the plane wave.
EVENTS = {
    "minkowski_cartesian": "t=0,x=1,y=0.5,z=-0.3",
    "minkowski_spherical": "t=0,r=2,theta=1,phi=0.5",
    "schwarzschild": "t=0,r=5,theta=pi/2,phi=0",
    "reissner_nordstrom": "t=0,r=4,theta=1,phi=0",
    "de_sitter_static": "t=0,r=3,theta=1,phi=0",
    "flrw_flat_w": "t=1,x=0.2,y=0,z=0",
    "tanh_wall_bubble": "t=0,x=0.3,y=1,z=0",
    "morris_thorne_wormhole": "t=0,l=0,theta=pi/2,phi=0",
    "plane_wave_brinkmann": "t=0,x=1,y=0.5,z=0.2",
    "kerr_boyer_lindquist": "t=0,r=3,theta=1,phi=0.2",
}

#: Keys `auditor probe --json` must write (cli-contract.md, "probe JSON"); the
#: condition and tidal keys come with later stages and are not required here.
PROBE_KEYS = ("name", "point", "g", "einstein", "ricci_scalar", "kretschmann",
              "eulerian_energy_density", "eulerian_energy_density_J_m3")

IDS = [p.stem for p in SAMPLE_PATHS]


def test_samples_exist():
    assert len(SAMPLE_PATHS) >= 9
    stale = set(EVENTS) - set(IDS)
    assert not stale, f"EVENTS lists files that do not exist: {sorted(stale)}"
    forms = {load_metric(p).form for p in SAMPLE_PATHS}
    assert forms == {"line_element", "components", "adm"}, "every metric form is used once"


@pytest.fixture(scope="session")
def cli_results():
    """Run `python -m auditor probe FILE --at EVENT --json -` for every sample
    with a listed event, all at once (each process spends ~2 s importing and
    compiling), and collect (returncode, stdout, stderr) by stem."""
    procs = {}
    for path in SAMPLE_PATHS:
        if path.stem in EVENTS:
            procs[path.stem] = subprocess.Popen(
                [sys.executable, "-m", "auditor", "probe", str(path), "--at",
                 EVENTS[path.stem], "--json", "-"],
                cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                stdin=subprocess.DEVNULL)
    out = {}
    for stem, proc in procs.items():
        try:
            stdout, stderr = proc.communicate(timeout=180)
        except subprocess.TimeoutExpired:
            proc.kill()
            stdout, stderr = proc.communicate()
        out[stem] = (proc.returncode, stdout, stderr)
    return out


@pytest.mark.parametrize("path", SAMPLE_PATHS, ids=IDS)
def test_sample_loads_and_documents_itself(path):
    metric = load_metric(path)
    assert metric.source, "each sample names its source (source = ...)"
    text = Path(path).read_text(encoding="utf-8")
    comments = " ".join(line for line in text.splitlines() if line.lstrip().startswith("#"))
    assert "Source" in comments or "source" in comments, "a comment states the source"
    assert any(w in comments for w in ("NEC", "verdict")), "a comment states the expected verdict"
    assert metric.region is not None, "each sample has a [region]"


@pytest.mark.parametrize("path", SAMPLE_PATHS, ids=IDS)
def test_sample_region_is_mostly_auditable(path, geometry_cache):
    """A coarse grid of the region (5 samples per axis) is at least half auditable."""
    geo = geometry_cache.path(path)
    region = geo.metric.region
    axes = [np.linspace(*region.axes[c], 5) if c in region.axes else np.array([region.fixed[c]])
            for c in geo.metric.coordinates]
    x = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 4)
    batch = geo.evaluate(x)
    assert batch.ok.mean() >= 0.5, batch.counts()


@pytest.mark.parametrize("path", SAMPLE_PATHS, ids=IDS)
def test_sample_probe_at_documented_event(path, geometry_cache):
    stem = path.stem
    assert stem in EVENTS, (f"sample_metrics/{path.name} has no documented event: add "
                            f"an auditable --at text for '{stem}' to EVENTS in {__file__}")
    geo = geometry_cache.path(path)
    metric = geo.metric
    event = parse_event(metric, EVENTS[stem])
    res = probe(metric, event, geometry=geo)
    for value in (res.g, res.einstein, res.ricci_scalar, res.kretschmann):
        assert np.all(np.isfinite(value))
    assert np.isfinite(res.eulerian_energy_density) or res.frame != "eulerian"
    if metric.crew.start is not None:
        start = np.array([[metric.crew.start[c] for c in metric.coordinates]])
        assert geo.evaluate(start, use_exclude=False).ok.all(), "crew start must be auditable"


@pytest.mark.parametrize("path", SAMPLE_PATHS, ids=IDS)
def test_sample_cli_probe_json(path, cli_results, geometry_cache):
    stem = path.stem
    assert stem in EVENTS, f"no documented event for {path.name} (see EVENTS)"
    code, stdout, stderr = cli_results[stem]
    assert code == 0, f"auditor probe exited {code}: {stderr}"
    data = json.loads(stdout)                     # --json - writes JSON and nothing else
    missing = [k for k in PROBE_KEYS if k not in data]
    assert not missing, f"probe JSON lacks {missing}"
    geo = geometry_cache.path(path)
    metric = geo.metric
    assert list(data["point"]) == list(metric.coordinates)
    assert data["name"] == metric.name
    # the command line reports what the library computes
    lib = probe(metric, parse_event(metric, EVENTS[stem]), geometry=geo)
    np.testing.assert_allclose(np.array(data["g"], dtype=float), lib.g, rtol=1e-15, atol=0)
    np.testing.assert_allclose(np.array(data["einstein"], dtype=float), lib.einstein,
                               rtol=1e-13, atol=1e-300)
    assert data["kretschmann"] == pytest.approx(lib.kretschmann, rel=1e-13, abs=1e-300)
