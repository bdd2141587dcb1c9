"""The command line's JSON against the contract's JSON Schemas (design/schemas,
kept beside the repository in ``shared/``)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

jsonschema = pytest.importorskip("jsonschema")

ROOT = Path(__file__).resolve().parent.parent
SCHEMAS = ROOT.parent / "shared" / "design" / "schemas"
SAMPLES = ROOT / "sample_metrics"

pytestmark = pytest.mark.skipif(not SCHEMAS.is_dir(),
                                reason=f"contract schemas not found at {SCHEMAS}")


def run(*args):
    proc = subprocess.run([sys.executable, "-m", "auditor", *args, "--json", "-"],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode in (0, 1, 3), proc.stderr
    return json.loads(proc.stdout)


@pytest.mark.parametrize("stem, event", [
    ("tanh_wall_bubble", "t=0,x=0.3,y=1,z=0"),
    ("schwarzschild", "t=0,r=5,theta=pi/2,phi=0"),
    ("morris_thorne_wormhole", "t=0,l=0,theta=pi/2,phi=0"),
])
def test_probe_json_matches_the_contract(stem, event):
    data = run("probe", str(SAMPLES / f"{stem}.toml"), "--at", event)
    jsonschema.validate(data, json.loads((SCHEMAS / "probe.schema.json").read_text()))


@pytest.mark.parametrize("stem", ["tanh_wall_bubble", "reissner_nordstrom", "flrw_flat_w"])
def test_check_json_matches_the_contract(stem):
    data = run("check", str(SAMPLES / f"{stem}.toml"), "--points", "9", "--quiet")
    jsonschema.validate(data, json.loads((SCHEMAS / "check.schema.json").read_text()))
    assert set(data["conditions"]) == {"NEC", "WEC", "SEC", "DEC"}
