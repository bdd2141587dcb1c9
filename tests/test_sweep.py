"""Parameter sweeps: value parsing, serial/parallel agreement, resume, CLI outputs."""

from __future__ import annotations

import csv
import json
import os
import subprocess
import sys

import numpy as np
import pytest

from auditor.errors import UsageError
from auditor.metric import loads_metric
from auditor.sweep import _journal_path, _combo_key, parse_vary, sweep

# A de Sitter static patch: the SEC margin is −Λ/4π·(normalisation) at every
# event, so the sweep's sign pattern is known in closed form (published-checks
# §6: Λ > 0 violates only the SEC; Λ < 0 violates WEC and DEC).
DS = """
name = "de Sitter static patch"
coordinates = ["t", "r", "theta", "phi"]
[parameters]
Lambda = 0.03
[metric]
line_element = "-(1 - Lambda*r**2/3)*dt**2 + dr**2/(1 - Lambda*r**2/3) + r**2*(dtheta**2 + sin(theta)**2*dphi**2)"
[region]
t = 0.0
r = [0.5, 3.0]
theta = [0.4, 2.7]
phi = 0.0
points = 5
"""


@pytest.fixture(scope="module")
def ds_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("sweep") / "ds.toml"
    path.write_text(DS)
    return path


def test_parse_vary_ranges_and_lists():
    m = loads_metric(DS)
    (name, vals), = parse_vary(["Lambda=-0.1:0.1:5"], m)
    assert name == "Lambda" and vals == pytest.approx([-0.1, -0.05, 0.0, 0.05, 0.1])
    (_, vals), = parse_vary(["Lambda=pi/100, 0.5"], m)
    assert vals == pytest.approx([np.pi / 100, 0.5])


@pytest.mark.parametrize("spec, message", [
    (["Lamda=1,2"], "no parameter named 'Lamda' in <string>; did you mean 'Lambda'?"),
    (["Lambda=1:2"], "range is START:STOP:COUNT"),
    (["Lambda=1:2:x"], "COUNT must be an integer"),
    (["Lambda=1:2:0"], "COUNT must be at least 1"),
    (["Lambda"], "expects NAME=START:STOP:COUNT"),
    (["Lambda=1,2", "Lambda=3"], "given twice"),
    ([], "at least one --vary"),
    (["Lambda=__import__('os')"], "dunder name"),
])
def test_parse_vary_errors(spec, message):
    with pytest.raises(UsageError, match=None) as err:
        parse_vary(spec, loads_metric(DS))
    assert message in str(err.value)


def test_sweep_verdicts_follow_the_sign_of_lambda(ds_file):
    from auditor.metric import load_metric
    m = load_metric(ds_file)
    res = sweep(m, [("Lambda", [-0.03, 0.03])])
    neg, pos = res.rows
    assert (neg["NEC_holds"], neg["WEC_holds"], neg["SEC_holds"], neg["DEC_holds"]) == \
        (True, False, True, False)
    assert (pos["NEC_holds"], pos["WEC_holds"], pos["SEC_holds"], pos["DEC_holds"]) == \
        (True, True, False, True)
    assert res.exit_code() == 1


def test_serial_and_parallel_sweeps_agree(ds_file):
    from auditor.metric import load_metric
    m = load_metric(ds_file)
    varies = [("Lambda", [-0.02, 0.01, 0.04])]
    serial = sweep(m, varies, jobs=1)
    parallel = sweep(m, varies, jobs=2)
    # Same code on the same inputs: identical to the last bit (no reductions
    # depend on the process layout).
    assert serial.rows == parallel.rows


def test_sweep_resumes_from_its_journal(ds_file, tmp_path, monkeypatch):
    from auditor import sweep as sweep_mod
    from auditor.metric import load_metric
    m = load_metric(ds_file)
    varies = [("Lambda", [0.01, 0.02, 0.03])]
    journal = str(tmp_path / ".out.csv.journal.jsonl")
    full = sweep(m, varies)
    # Pretend an earlier run finished the first two combinations, then died.
    with open(journal, "w") as fh:
        for row, lam in zip(full.rows[:2], (0.01, 0.02)):
            fh.write(json.dumps({"key": _combo_key(m, None, {"Lambda": lam}), "row": row}) + "\n")
        fh.write('{"key": "cut mid-li')   # an interrupted write is ignored
    calls = []
    real = sweep_mod._audit_combo

    def counting(*args):
        calls.append(args[3])
        return real(*args)
    monkeypatch.setattr(sweep_mod, "_audit_combo", counting)
    resumed = sweep(m, varies, journal=journal)
    assert calls == [{"Lambda": 0.03}]
    assert resumed.resumed == 2
    assert resumed.rows == full.rows


def test_cli_sweep_writes_table_plot_and_json(ds_file, tmp_path):
    out = tmp_path / "s.csv"
    js = tmp_path / "s.json"
    proc = subprocess.run([sys.executable, "-m", "auditor", "sweep", str(ds_file), "--vary",
                           "Lambda=0.01:0.03:3", "-o", str(out), "--json", str(js), "--quiet"],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 1, proc.stderr      # SEC violated for Λ > 0
    rows = list(csv.DictReader(out.open()))
    assert [float(r["Lambda"]) for r in rows] == pytest.approx([0.01, 0.02, 0.03])
    assert all(r["SEC_holds"] == "False" for r in rows)
    assert (tmp_path / "s.pdf").stat().st_size > 1000
    data = json.loads(js.read_text())
    assert data["combinations"] == 3 and data["varied"] == ["Lambda"]
    assert not os.path.exists(_journal_path(str(out)))


def test_cli_sweep_bad_vary_is_one_line_exit_2(ds_file, tmp_path):
    out = tmp_path / "s.csv"
    proc = subprocess.run([sys.executable, "-m", "auditor", "sweep", str(ds_file), "--vary",
                           "Lambda=1:2", "-o", str(out)], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1 and proc.stderr.startswith("auditor: error:")
    assert not out.exists()


def test_a_sweep_refused_before_any_combination_leaves_nothing(tmp_path):
    """Every event excluded: exit 2, one line, and no table, plot or journal
    (the journal is opened only when a combination has finished)."""
    path = tmp_path / "all_out.toml"
    path.write_text(DS.replace("[region]", "[region]\nexclude = \"1\""))
    out = tmp_path / "s.csv"
    proc = subprocess.run([sys.executable, "-m", "auditor", "sweep", str(path), "--vary",
                           "Lambda=0.01:0.02:2", "-o", str(out), "--quiet"],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 2, proc.stderr
    assert proc.stderr.count("\n") == 1 and "no auditable event" in proc.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["all_out.toml"]


def test_dask_cluster_gives_the_same_rows(ds_file):
    distributed = pytest.importorskip("distributed", reason="the dask extra is not installed")
    from auditor.metric import load_metric
    m = load_metric(ds_file)
    varies = [("Lambda", [-0.02, 0.03])]
    serial = sweep(m, varies)
    # A local cluster on loopback only, started and stopped by the test.
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None) as cluster:
        on_dask = sweep(m, varies, dask=cluster.scheduler_address)
    assert on_dask.rows == serial.rows


def test_dask_unreachable_scheduler_is_a_usage_error(ds_file):
    pytest.importorskip("distributed", reason="the dask extra is not installed")
    from auditor.metric import load_metric
    with pytest.raises(UsageError, match="cannot reach a Dask scheduler"):
        sweep(load_metric(ds_file), [("Lambda", [0.01])], dask="tcp://127.0.0.1:9")
