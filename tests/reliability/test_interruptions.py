"""The auditor as a process: resource limits, interruptions, resumable sweeps,
and the error page kept honest.

1. Resource limits, through the command line in child processes with a
   timeout and a 4 GiB address-space limit (so that a runaway is a failed test,
   not an out-of-memory kill of the machine): grids and sweeps too large, huge
   exponents, towers of powers, deep nesting, long unary and power chains,
   definitions that double at each step, oversized files. Each must be refused
   with exit 2 and one clear line, quickly. The children start together (a
   module fixture) so their start-up overlaps. A short product whose
   derivatives explode is refused within a tighter time, by a child of its own.
2. Interruptions: SIGINT (Ctrl-C) and SIGTERM during ``auditor sweep`` (once
   the journal holds finished combinations) and during ``auditor report``, and
   exactly during the write of an output (a child whose output writer signals
   itself on its first write). No output file and no ``.part`` file may remain.
   A sweep killed midway resumes: the number of combinations audited on resume
   (counted by wrapping ``auditor.sweep._audit_combo`` in the child) equals the
   number not yet in the journal, and resumed rows equal fresh audits.
3. ``docs/errors.md``: every example file is written and every ``$ auditor``
   line run; the message and exit code must be those shown, and the page must
   list every error class of ``auditor/errors.py``.
"""

from __future__ import annotations

import csv
import importlib.util
import io
import json
import os
import re
import resource
import shlex
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

import auditor.errors as errors_module
from auditor.metric import loads_metric

from tests.reliability import (DOCS, assert_one_line_error, auditor_cmd, child_env,
                               part_files, run_inprocess)

GiB = 1 << 30


def _limit_memory(limit):
    def apply():
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    return apply


def _doc(line_element, extra=""):
    return ('name = "Resource test"\ncoordinates = ["t", "x", "y", "z"]\n' + extra +
            f'[metric]\nline_element = "{line_element}"\n')


FLAT3 = _doc("-dt**2 + dx**2 + dy**2 + dz**2") + \
    "[region]\nt = 0.0\nx = [-1.0, 1.0]\ny = [-1.0, 1.0]\nz = [-1.0, 1.0]\npoints = 10000\n"
FLAT2 = _doc("-dt**2 + dx**2 + dy**2 + dz**2") + \
    "[region]\nt = 0.0\nx = [-1.0, 1.0]\ny = [-1.0, 1.0]\nz = 0.0\npoints = 5\n"
AT = ["--at", "t=0,x=1,y=0,z=0"]
TAIL = "*dt**2 + dx**2 + dy**2 + dz**2"
DOUBLING = ('name = "Doubling"\ncoordinates = ["t", "x", "y", "z"]\n[define]\nf0 = "x"\n'
            + "".join(f'f{k} = "f{k - 1} + sin(f{k - 1})"\n' for k in range(1, 41))
            + f'[metric]\nline_element = "-(1 + f40**2){TAIL}"\n')
#: A 1 800-character product of 200 linear factors: small, within the limits on
#: the file and on its expressions, but by the product rule its first
#: derivative has 200 terms of 199 factors and its second ~200² terms of 198.
PRODUCT = _doc("-(" + "*".join(f"(1 + x/{k + 2})" for k in range(200)) + ")" + TAIL)

#: name -> (file text, extra arguments, command, fragment of the message)
LIMITS = {
    "10000 points on 3 axes": (FLAT3, [], "check",
                               "events, more than the 30000000 one audit accepts"),
    "--points 6000 on 2 axes": (FLAT2, ["--points", "6000"], "check",
                                "more than the 30000000 one audit accepts"),
    "huge exponent": (_doc("-(1 + x**2)**1000000" + TAIL), AT, "probe",
                      "exponent 1000000 is too large"),
    "tower of powers": (_doc("-(2**2**2**2**2**2)" + TAIL), AT, "probe",
                        "number too large or too small"),
    "exp of exp of exp": (_doc("-exp(exp(exp(exp(10))))" + TAIL), AT, "probe",
                          "number too large"),
    "deep nesting": (_doc("-" + "sin(" * 1000 + "x" + ")" * 1000 + TAIL), AT, "probe",
                     "nested deeper than 60"),
    "long unary chain": (_doc("-" * 19000 + "x" + TAIL), AT, "probe",
                         "too deeply nested or has too many terms"),
    "long power chain": (_doc("x" + "**x" * 5000 + TAIL), AT, "probe",
                         "too deeply nested or has too many terms"),
    "doubling definitions": (DOUBLING, AT, "probe", "operations once definitions are substituted"),
    "file over 1 MB": (_doc("-dt**2 + dx**2 + dy**2 + dz**2") + "#" + "x" * 1_000_001 + "\n",
                       AT, "probe", "bytes, more than the 1000000 accepted"),
    "sweep of 100000 combinations": (
        FLAT2.replace("[metric]", "[parameters]\na = 1.0\n[metric]"),
        ["--vary", "a=1:2:100000", "-o", "sweep.csv"], "sweep", "combinations, more than"),
}
#: A refusal needs the start-up (~2 s) and at most a parse: 60 s only catches
#: a hang, on a loaded 2-core machine running the other children too.
LIMIT_SECONDS = 60
#: The product's refusal must come within this time, counted from the child's
#: start (Python and SymPy start-up included): it must be decided by an
#: estimate, not after differentiating (which ran > 590 s with 80 factors).
PRODUCT_SECONDS = 20


def _start_limited(folder: Path, text: str, args, seconds: float, env):
    """Start ``auditor ARGS`` on ``text`` (as m.toml in ``folder``) under a 4 GiB
    address-space limit; a timer kills it ``seconds`` after its start and records
    that it did. Returns (Popen, deadline flag, folder, timer)."""
    (folder / "m.toml").write_text(text)
    proc = subprocess.Popen(auditor_cmd(*args), cwd=folder, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL,
                            env=env, preexec_fn=_limit_memory(4 * GiB))
    flag = {"killed": False}

    def expire():
        if proc.poll() is None:
            flag["killed"] = True
            proc.kill()

    timer = threading.Timer(seconds, expire)
    timer.daemon = True
    timer.start()
    return proc, flag, folder, timer


@pytest.fixture(scope="module")
def limit_runs(tmp_path_factory):
    """Start every resource-limit child at once; name -> (Popen, deadline flag,
    folder). A timer kills each child at its deadline (so that a runaway does
    not hold a core while the other tests run) and records that it did."""
    root = tmp_path_factory.mktemp("limits")
    runs = {}
    for i, (name, (text, extra, command, _)) in enumerate(LIMITS.items()):
        folder = root / f"case{i}"
        folder.mkdir()
        runs[name] = _start_limited(folder, text, [command, "m.toml", *extra], LIMIT_SECONDS,
                                    child_env(root / "cache"))
    yield {k: v[:3] for k, v in runs.items()}
    for proc, flag, folder, timer in runs.values():
        timer.cancel()
        if proc.poll() is None:
            proc.kill()
            proc.communicate()


def _finish(run, seconds):
    proc, flag, folder = run
    out, err = proc.communicate(timeout=seconds + 30)    # the timer ends it by then
    if flag["killed"]:
        pytest.fail(f"still running {seconds} s after it started (killed); stderr {err[-500:]!r}")
    return proc.returncode, out, err, folder


@pytest.mark.parametrize("name", list(LIMITS))
def test_oversized_requests_are_refused_quickly(name, limit_runs):
    code, out, err, folder = _finish(limit_runs[name], LIMIT_SECONDS)
    assert_one_line_error(code, err, LIMITS[name][3])
    assert sorted(p.name for p in folder.iterdir()) == ["m.toml"], "an output was written"


# -- interruptions ---------------------------------------------------------------------
DS = """name = "de Sitter static patch"
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
COMBOS = 12
SWEEP_POINTS = 30           # 900 events a combination: a sweep of several seconds
SWEEP = ["sweep", "ds.toml", "--vary", f"Lambda=-0.03:0.03:{COMBOS}", "--points",
         str(SWEEP_POINTS), "-o", "sw.csv", "--quiet"]
JOURNAL = ".sw.csv.journal.jsonl"

#: A child that runs the command line with auditor.sweep._audit_combo wrapped to
#: count the combinations it audits (one line each in the file argv[1]).
COUNTING = """
import sys
import auditor.sweep as s
real = s._audit_combo
def counted(*a, **k):
    with open(sys.argv[1], "a") as fh:
        fh.write("audit\\n")
    return real(*a, **k)
s._audit_combo = counted
from auditor.cli import main
sys.exit(main(sys.argv[2:]))
"""

#: A child whose output writer (auditor.outputs.atomic_write) sends the given
#: signal to its own process on the first write into the temporary file: the
#: interruption lands exactly inside an output write.
SIGNAL_ON_WRITE = """
import os, signal, sys
import auditor.outputs as outputs
SIG = getattr(signal, sys.argv[1])

class _File:
    def __init__(self, fh):
        self._fh = fh
    def __getattr__(self, name):
        return getattr(self._fh, name)
    def __enter__(self):
        self._fh.__enter__()
        return self
    def __exit__(self, *exc):
        return self._fh.__exit__(*exc)
    def write(self, data):
        os.kill(os.getpid(), SIG)
        return self._fh.write(data)

class _Os:
    def __getattr__(self, name):
        return getattr(os, name)
    def fdopen(self, *a, **k):
        return _File(os.fdopen(*a, **k))

outputs.os = _Os()
from auditor.cli import main
sys.exit(main(sys.argv[2:]))
"""


@pytest.fixture(scope="module")
def sweep_env(tmp_path_factory):
    """A kernel cache warmed with the sweep's metric, so that a child reaches
    its first combination quickly."""
    cache = tmp_path_factory.mktemp("sweep-cache")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("AUDITOR_CACHE_DIR", str(cache))
        mp.delenv("AUDITOR_NO_CACHE", raising=False)
        from auditor.geometry import Geometry
        Geometry(loads_metric(DS))
    return child_env(cache)


def _journal_rows(path: Path) -> list[dict]:
    rows = []
    if path.exists():
        for line in path.read_text().splitlines():
            try:
                rows.append(json.loads(line))
            except ValueError:
                pass     # a line cut by the kill: the sweep skips it too
    return rows


def _sigint_at_default():
    """Ctrl-C at a terminal reaches a process whose SIGINT is at its default
    disposition; a child of a test run started in the background (which the
    shell starts with SIGINT ignored) would otherwise inherit the ignoring and
    Python would leave it so."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _start_sweep(folder: Path, env):
    (folder / "ds.toml").write_text(DS)
    return subprocess.Popen(auditor_cmd(*SWEEP), cwd=folder, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL,
                            preexec_fn=_sigint_at_default)


def _wait_for(predicate, proc, seconds, what):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if predicate():
            return
        if proc.poll() is not None:
            out, err = proc.communicate()
            pytest.fail(f"the child ended (exit {proc.returncode}) before {what}: {err[-800:]!r}")
        time.sleep(0.01)
    proc.kill()
    proc.communicate()
    pytest.fail(f"timed out waiting for {what}")


def _interrupt_sweep(folder, env, sig):
    proc = _start_sweep(folder, env)
    journal = folder / JOURNAL
    _wait_for(lambda: len(_journal_rows(journal)) >= 2, proc, 120,
              "two finished combinations in the journal")
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=60)
    done = _journal_rows(journal)
    assert 2 <= len(done) < COMBOS, "the sweep was not interrupted midway"
    return proc.returncode, out, err, done


def _no_outputs(folder):
    names = {p.name for p in folder.iterdir()}
    assert not names & {"sw.csv", "sw.pdf", "audit.pdf", "out.json"}, names
    assert part_files(folder) == [], part_files(folder)


def _doc_line(prefix: str) -> str:
    """The line of docs/errors.md that starts with ``prefix``."""
    for line in (DOCS / "errors.md").read_text().splitlines():
        if line.strip().startswith(prefix):
            return line.strip()
    raise AssertionError(f"docs/errors.md has no line starting {prefix!r}")


def test_ctrl_c_during_a_sweep_leaves_no_output(tmp_path, sweep_env):
    code, out, err, done = _interrupt_sweep(tmp_path, sweep_env, signal.SIGINT)
    assert code == 130, err
    assert err.strip().splitlines()[-1] == _doc_line("auditor: interrupted")
    assert "Traceback" not in err
    _no_outputs(tmp_path)
    # Every finished combination is in the journal, keyed by input and resolution.
    assert all(item["row"]["audited_points"] == SWEEP_POINTS ** 2 for item in done)


def _assert_terminated(code, err):
    """SIGTERM: either the default action (killed, -15) or a handler that cleans up
    and exits 143 = 128 + 15 with the documented line."""
    assert code in (-signal.SIGTERM, 143), (code, err)
    if code == 143:
        assert err.strip().splitlines()[-1] == _doc_line("auditor: terminated")
    assert "Traceback" not in err


def test_a_killed_sweep_resumes_without_redoing_finished_combinations(tmp_path, sweep_env):
    code, out, err, done = _interrupt_sweep(tmp_path, sweep_env, signal.SIGTERM)
    _assert_terminated(code, err)
    _no_outputs(tmp_path)
    counter = tmp_path / "audits.txt"
    resumed = subprocess.run([sys.executable, "-c", COUNTING, str(counter), *SWEEP],
                             cwd=tmp_path, env=sweep_env, capture_output=True, text=True,
                             timeout=300)
    assert resumed.returncode == 1, resumed.stderr      # Λ > 0 combinations violate the SEC
    audited_now = len(counter.read_text().splitlines())
    assert audited_now == COMBOS - len(done), (audited_now, len(done))
    assert f"{COMBOS} combinations ({len(done)} resumed)" in resumed.stdout
    assert not (tmp_path / JOURNAL).exists(), "the journal outlived a finished sweep"
    assert part_files(tmp_path) == []
    rows = list(csv.DictReader(io.StringIO((tmp_path / "sw.csv").read_text())))
    assert len(rows) == COMBOS
    # A resumed row (from the journal) and a fresh one equal audits made now.
    from auditor.audit import audit
    from auditor.sweep import row_for
    metric = loads_metric(DS, path=str(tmp_path / "ds.toml"), points=SWEEP_POINTS)
    done_values = {float(item["row"]["parameters"]["Lambda"]) for item in done}
    fresh = next(r for r in rows if float(r["Lambda"]) not in done_values)
    for row in (next(r for r in rows if float(r["Lambda"]) in done_values), fresh):
        lam = float(row["Lambda"])
        want = row_for(audit(metric.with_parameters(Lambda=lam), progress=False, refine=False))
        for c in ("NEC", "WEC", "SEC", "DEC"):
            assert row[f"{c}_holds"] == str(want[f"{c}_holds"])
            assert float(row[f"{c}_min_margin"]) == want[f"{c}_min_margin"]


def _children(pid: int) -> list[int]:
    """Child process ids of ``pid`` (Linux /proc)."""
    try:
        return [int(c) for c in Path(f"/proc/{pid}/task/{pid}/children").read_text().split()]
    except (OSError, ValueError):
        return []


@pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="needs Linux /proc")
@pytest.mark.parametrize("jobs", ["1", "2"])
@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["Ctrl-C", "SIGTERM"])
def test_a_signal_to_the_whole_job_leaves_one_line(sig, jobs, tmp_path):
    """A terminal's Ctrl-C reaches every process of the job: the check, the
    process that follows the crew worldline beside it and, with --jobs, the
    worker processes. Only the documented line is printed (no helper may print
    a traceback), and no output. Regression: workers that inherited the
    command line's SIGTERM handler raised inside the pool's machinery, and the
    check then waited for them forever."""
    path = Path(__file__).resolve().parents[2] / "sample_metrics" / "tanh_wall_bubble.toml"
    env = child_env(tmp_path / "cache")
    subprocess.run(auditor_cmd("check", path, "--points", "9", "--quiet"), env=env,
                   capture_output=True, timeout=300)            # the caches, once
    proc = subprocess.Popen(auditor_cmd("check", path, "--points", "81", "--quiet", "--json",
                                        "out.json", "--jobs", jobs),
                            cwd=tmp_path, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL,
                            start_new_session=True, preexec_fn=_sigint_at_default)
    _wait_for(lambda: _children(proc.pid), proc, 120, "the worldline process to start")
    os.killpg(proc.pid, sig)
    out, err = proc.communicate(timeout=60)
    time.sleep(1.0)                      # a straggling helper would print by now
    if sig == signal.SIGINT:
        assert proc.returncode == 130, err
        assert err.strip().splitlines() == [_doc_line("auditor: interrupted")], err
    else:
        _assert_terminated(proc.returncode, err)
        assert len(err.strip().splitlines()) <= 1, err
    assert "Traceback" not in err and "Process " not in err
    _no_outputs(tmp_path)


def _signal_on_write(folder, env, sig_name):
    (folder / "ds.toml").write_text(DS)
    args = ["sweep", "ds.toml", "--vary", "Lambda=0.01", "-o", "sw.csv", "--quiet"]
    return subprocess.run([sys.executable, "-c", SIGNAL_ON_WRITE, sig_name, *args], cwd=folder,
                          env=env, capture_output=True, text=True, timeout=120)


def test_ctrl_c_inside_an_output_write_leaves_no_partial_file(tmp_path, sweep_env):
    res = _signal_on_write(tmp_path, sweep_env, "SIGINT")
    assert res.returncode == 130, res.stderr
    _no_outputs(tmp_path)


def test_sigterm_inside_an_output_write_leaves_no_partial_file(tmp_path, sweep_env):
    """Regression (found here): with no SIGTERM handler the process died inside
    atomic_write and left a .auditor-*.part file beside the output."""
    res = _signal_on_write(tmp_path, sweep_env, "SIGTERM")
    _assert_terminated(res.returncode, res.stderr)
    _no_outputs(tmp_path)


def _report_available():
    spec = importlib.util.find_spec("auditor.report")
    if spec is None:
        return "auditor.report is not installed"
    try:
        from auditor.report import write_report  # noqa: F401
        import weasyprint  # noqa: F401
    except Exception as exc:    # the report command is not working here
        return f"the report command cannot run ({type(exc).__name__}: {exc})"
    return None


REPORT_METRIC = DS.replace("points = 5", "points = 40")


@pytest.mark.parametrize("sig, phase", [(signal.SIGINT, "audit"), (signal.SIGTERM, "render")],
                         ids=["SIGINT during the audit", "SIGTERM during rendering"])
def test_a_signal_during_report_leaves_no_output(sig, phase, tmp_path):
    reason = _report_available()
    if reason:
        pytest.skip(reason)
    cache = tmp_path / "cache"          # fresh: a kernel file appears as the audit starts
    (tmp_path / "ds.toml").write_text(REPORT_METRIC)
    proc = subprocess.Popen(auditor_cmd("report", "ds.toml", "-o", "audit.pdf", "--json",
                                        "out.json", "--quiet"),
                            cwd=tmp_path, env=child_env(cache), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL,
                            preexec_fn=_sigint_at_default)
    if phase == "audit":
        _wait_for(lambda: cache.exists() and any(cache.glob("*.py")), proc, 120,
                  "the kernel to be compiled")
    else:
        maps = Path(f"/proc/{proc.pid}/maps")
        _wait_for(lambda: maps.exists() and "libpango" in maps.read_text(), proc, 180,
                  "the PDF renderer to load")
    proc.send_signal(sig)
    out, err = proc.communicate(timeout=60)
    if sig == signal.SIGINT:
        assert proc.returncode == 130, err
    else:
        _assert_terminated(proc.returncode, err)
    assert "Traceback" not in err
    _no_outputs(tmp_path)


# -- docs/errors.md ------------------------------------------------------------------------
def _page():
    return (DOCS / "errors.md").read_text()


def _examples(page):
    files = dict(re.findall(r"```toml file=(\S+)\n(.*?)```", page, flags=re.S))
    runs = []
    for block in re.findall(r"```console\n(.*?)```", page, flags=re.S):
        lines = block.splitlines()
        i = 0
        while i < len(lines):
            assert lines[i].startswith("$ auditor "), lines[i]
            command, _, note = lines[i][2:].partition("  # ")
            message = lines[i + 1]
            assert lines[i + 2] == "$ echo $?", lines[i + 2]
            code = int(lines[i + 3])
            runs.append((command, message, code, note))
            i += 4
    return files, runs


def test_the_error_page_lists_every_error_type_and_exit_code():
    page = _page()
    documented = set(re.findall(r"^### `(\w+)`", page, flags=re.M)) | \
        set(re.findall(r"^### `(\w+)` and `(\w+)`", page, flags=re.M)[0])
    assert documented == set(errors_module.__all__)
    codes = set(re.findall(r"^\| (\d+) \|", page, flags=re.M))
    assert codes == {"0", "1", "2", "3", "70", "130", "143"}
    files, runs = _examples(page)
    assert len(runs) >= 10 and len(files) >= 4


def test_every_example_on_the_error_page_is_what_the_tool_prints(tmp_path, monkeypatch, capsys):
    files, runs = _examples(_page())
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    monkeypatch.chdir(tmp_path)
    for command, message, code, note in runs:
        argv = shlex.split(command)[1:]
        with monkeypatch.context() as mp:
            # A condition stated on the page ("on a machine without WeasyPrint")
            # is made true here by hiding that module.
            hidden = re.fullmatch(r"on a machine without (\w+)", note)
            if note:
                assert hidden, f"unknown condition {note!r} on the error page"
                mp.setitem(sys.modules, hidden.group(1).lower(), None)
            got_code, out, err = run_inprocess(argv, capsys)
        assert got_code == code, (command, err)
        line = err.splitlines()[0] if err else ""
        if message.endswith("…"):
            assert line.startswith(message[:-1]), (command, line)
        else:
            assert line == message, (command, line)
        if code == 2:
            assert_one_line_error(got_code, err)
            assert not (tmp_path / "flat.pdf").exists()


# -- last: after the children of limit_runs have ended -----------------------------------
def test_a_small_file_whose_derivatives_explode_is_refused_in_time(tmp_path):
    """Regression (found here): limits applied to g before differentiation
    only, and `auditor probe` on PRODUCT was still differentiating after 20 s.
    The child runs alone: started together with the eleven children of
    limit_runs, the twelve start-ups (~2.5 s of CPU each) took more than the 20 s
    on a loaded 2-core machine."""
    run = _start_limited(tmp_path, PRODUCT, ["probe", "m.toml", *AT], PRODUCT_SECONDS,
                         child_env(tmp_path / "cache"))
    try:
        code, out, err, folder = _finish(run[:3], PRODUCT_SECONDS)
    finally:
        run[3].cancel()
    assert_one_line_error(code, err, 'derivatives of g would have')
    assert 'from the component "t t"' in err
    assert sorted(p.name for p in folder.iterdir() if p.name != "cache") == ["m.toml"], \
        "an output was written"


def test_a_grid_that_does_not_fit_in_memory_is_refused_cleanly(tmp_path):
    """Regression (found here): a grid under MAX_GRID_POINTS (310**3 events,
    then ~4.5 GB of result maps) under a 3 GiB address-space limit ended in
    MemoryError, exit 70, instead of a one-line refusal. The maps of 310**3
    events now take ~2 GiB (auditor.audit.BYTES_PER_EVENT), so the limit here is
    2 GiB: the grid still does not fit."""
    from auditor.audit import BYTES_PER_EVENT
    assert 310**3 * BYTES_PER_EVENT > 0.8 * 2 * GiB      # the premise holds
    (tmp_path / "m.toml").write_text(FLAT3)
    res = subprocess.run(auditor_cmd("check", "m.toml", "--points", "310", "--quiet"),
                         cwd=tmp_path, env=child_env(), capture_output=True, text=True,
                         timeout=120, preexec_fn=_limit_memory(2 * GiB))
    assert_one_line_error(res.returncode, res.stderr)
