"""Warm start: a repeat run of the same input does no symbolic work, and the
start-up record it uses gets the kernel cache's protection.

(auditor/warm.py.) The record is keyed by the file's bytes, the options and
the versions; it is signed with the per-user secret and its kernel sources
pass the identifier whitelist before anything is compiled. A changed, damaged
or foreign record sends the run down the full path (SymPy, validation,
compilation), never into running what the record holds.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import sys

import numpy as np
import pytest

from auditor.geometry import Geometry
from auditor.metric import loads_metric
from auditor.warm import WarmMetric, open_metric

from . import SAMPLES, child_env, run_child

EVENTS = np.array([[0.0, 1.0, 2.0, 0.0], [0.5, -0.3, 0.7, 1.0], [0.0, 0.1, 0.2, 0.3]])

METRIC = """name = "Warm start test"
coordinates = ["t", "x", "y", "z"]
[parameters]
a = 0.5
b = 2.0
[define]
f = "1 + a*x**2"
[metric]
line_element = "-f*dt**2 + (1 + b*y**2)*dx**2 + dy**2 + dz**2"
[region]
t = 0.0
x = [-1.0, 1.0]
y = [-1.0, 1.0]
z = 0.0
exclude = "x**2 + y**2 - 0.9"
points = 5
"""


@pytest.fixture
def cache_dir(tmp_path, monkeypatch):
    folder = tmp_path / "cache"
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(folder))
    monkeypatch.delenv("AUDITOR_NO_CACHE", raising=False)
    return folder


@pytest.fixture
def metric_file(tmp_path):
    path = tmp_path / "m.toml"
    path.write_text(METRIC)
    return path


def _record(folder):
    files = list(folder.glob("*.start.json"))
    assert len(files) == 1, sorted(p.name for p in folder.iterdir())
    return files[0]


def test_the_second_open_is_warm_and_equal(cache_dir, metric_file):
    cold, cold_geo = open_metric(metric_file)
    assert not isinstance(cold, WarmMetric)
    warm, warm_geo = open_metric(metric_file)
    assert isinstance(warm, WarmMetric)
    for name in ("name", "coordinates", "parameters", "form", "metric_text", "length_m",
                 "summary", "source", "path", "sha256", "crew"):
        assert getattr(warm, name) == getattr(cold, name), name
    # Parameter order is the order of kernel arguments.
    assert list(warm.parameters.items()) == list(cold.parameters.items())
    assert warm.region.axes == cold.region.axes and warm.region.points == cold.region.points
    assert warm.region.exclude_text == cold.region.exclude_text
    # The same kernels, bit for bit, including the exclusion and the geodesic kernel.
    for geo_a, geo_b in ((cold_geo, warm_geo),):
        a, b = geo_a.evaluate(EVENTS), geo_b.evaluate(EVENTS)
        np.testing.assert_array_equal(a.reason, b.reason)
        np.testing.assert_array_equal(a.curvature.einstein, b.curvature.einstein)
        x = np.ascontiguousarray(EVENTS.T)
        np.testing.assert_array_equal(geo_a.first_derivative_kernel()(x, geo_a.params()),
                                      geo_b.first_derivative_kernel()(x, geo_b.params()))
    # Symbolic fields are rebuilt on first use and equal the cold ones.
    assert warm.g == cold.g and warm.g_display == cold.g_display
    assert [d.name for d in warm.definitions] == ["f"]
    assert warm.region.exclude == cold.region.exclude      # rebuilt on first use, not None
    assert "WarmMetric" in repr(warm) and warm == cold
    # Parameters change without leaving the warm path.
    moved = warm.with_parameters(a=0.25)
    assert isinstance(moved, WarmMetric) and moved.parameters["a"] == 0.25
    assert warm.parameters["a"] == 0.5
    np.testing.assert_array_equal(
        warm_geo.raw(EVENTS, warm_geo.params(moved.parameters)),
        cold_geo.raw(EVENTS, cold_geo.params(cold.with_parameters(a=0.25).parameters)))


def test_options_and_file_bytes_are_part_of_the_key(cache_dir, metric_file):
    open_metric(metric_file)
    assert isinstance(open_metric(metric_file)[0], WarmMetric)
    m, _ = open_metric(metric_file, set_items=["a=0.3"])
    assert not isinstance(m, WarmMetric) and m.parameters["a"] == 0.3
    w, _ = open_metric(metric_file, set_items=["a=0.3"])
    assert isinstance(w, WarmMetric) and w.parameters["a"] == 0.3
    m, _ = open_metric(metric_file, points=7)
    assert not isinstance(m, WarmMetric) and set(m.region.points.values()) == {7}
    metric_file.write_text(METRIC.replace("b = 2.0", "b = 3.0"))
    m, _ = open_metric(metric_file)
    assert not isinstance(m, WarmMetric) and m.parameters["b"] == 3.0


def test_a_reinstalled_package_retires_the_record(cache_dir, metric_file, monkeypatch):
    """The key holds where SymPy and SciPy are installed and the size and time of
    their ``__init__.py`` (a reinstall or an upgrade rewrites it)."""
    import auditor.warm as warm
    stamp = warm._installed("scipy")
    assert stamp.split()[0].endswith("__init__.py") and warm._installed("no_such_pkg_x") == "?"
    open_metric(metric_file)
    assert isinstance(open_metric(metric_file)[0], WarmMetric)
    real = warm._installed
    monkeypatch.setattr(warm, "_installed",
                        lambda name: real(name) + (" reinstalled" if name == "scipy" else ""))
    assert not isinstance(open_metric(metric_file)[0], WarmMetric)
    assert isinstance(open_metric(metric_file)[0], WarmMetric)


def test_no_cache_means_no_record(monkeypatch, metric_file, tmp_path):
    monkeypatch.setenv("AUDITOR_NO_CACHE", "1")
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(tmp_path / "cache"))
    open_metric(metric_file)
    assert not isinstance(open_metric(metric_file)[0], WarmMetric)
    assert not (tmp_path / "cache").exists() or not list((tmp_path / "cache").iterdir())


def _resign(folder, path, body):
    secret = (folder / "secret").read_bytes()
    key = path.name[:-len(".start.json")]
    mac = hmac.new(secret, key.encode() + b"\0" + body.encode(), hashlib.sha256).hexdigest()
    path.write_text(mac + "\n" + body)


MARKER = "planted-code-ran"


@pytest.mark.parametrize("kind", [
    "body edited, header kept", "record of another input under this key",
    "hostile kernel signed with the real secret", "not JSON, signed", "empty file",
    "secret replaced"])
def test_a_damaged_or_foreign_record_is_never_used(kind, cache_dir, metric_file, tmp_path):
    cold, cold_geo = open_metric(metric_file)
    path = _record(cache_dir)
    head, _, body = path.read_text().partition("\n")
    record = json.loads(body)
    marker = tmp_path / MARKER
    if kind == "body edited, header kept":
        record["metric"]["parameters"] = [["a", 9.0], ["b", 2.0]]
        path.write_text(head + "\n" + json.dumps(record))
    elif kind == "record of another input under this key":
        other = tmp_path / "other.toml"
        other.write_text(METRIC.replace("a = 0.5", "a = 0.7"))
        open_metric(other)
        foreign = [p for p in cache_dir.glob("*.start.json") if p != path][0]
        _, _, fbody = foreign.read_text().partition("\n")
        path.write_text(foreign.read_text().partition("\n")[0] + "\n" + fbody)
    elif kind == "hostile kernel signed with the real secret":
        record["kernels"]["metric"] = (f"open({str(marker)!r}, 'w').write('x')\n"
                                       "def kernel(x, p, out):\n    return out\n")
        _resign(cache_dir, path, json.dumps(record))
    elif kind == "not JSON, signed":
        _resign(cache_dir, path, "{not json")
    elif kind == "empty file":
        path.write_text("")
    elif kind == "secret replaced":
        (cache_dir / "secret").write_bytes(b"\x01" * 32)
    metric, geo = open_metric(metric_file)
    assert not isinstance(metric, WarmMetric), "a damaged record was used"
    assert not marker.exists()
    assert metric.parameters == cold.parameters
    np.testing.assert_array_equal(geo.raw(EVENTS, geo.params()),
                                  cold_geo.raw(EVENTS, cold_geo.params()))
    # The full path wrote a sound record again: the next run is warm and equal.
    again, geo2 = open_metric(metric_file)
    assert isinstance(again, WarmMetric) and again.parameters == cold.parameters
    np.testing.assert_array_equal(geo2.raw(EVENTS, geo2.params()),
                                  cold_geo.raw(EVENTS, cold_geo.params()))


def _timings(stderr: str) -> str:
    lines = [l for l in stderr.splitlines() if "timings:" in l]
    assert len(lines) == 1, stderr
    return lines[0]


@pytest.mark.parametrize("command, extra", [
    ("check", ["--points", "5", "--quiet"]),
    ("probe", ["--at", "t=0,r=4,theta=1.2,phi=0.3"]),
])
def test_a_repeat_command_line_run_imports_no_sympy(command, extra, tmp_path):
    """The command line as users run it: the first run imports SymPy (parse,
    differentiate, compile), the repeat run does not, and both print the same."""
    env = child_env(tmp_path / "cache", AUDITOR_TIMINGS=1)
    args = [command, SAMPLES / "schwarzschild.toml", *extra, "--json", "out.json"]
    outs = []
    for run, expect in enumerate(("SymPy imported", "SymPy not imported")):
        proc = run_child(args, cwd=tmp_path, timeout=300, env=env)
        assert proc.returncode in (0, 1, 3), proc.stderr
        assert _timings(proc.stderr).endswith(expect), (run, proc.stderr)
        data = json.loads((tmp_path / "out.json").read_text())
        data.pop("timing", None)
        outs.append(data)
    assert outs[0] == outs[1]


def test_importing_the_audit_path_does_not_import_sympy():
    """Module-level imports on the warm path stay free of SymPy (a new import of
    it anywhere there would silently cost every run about a second)."""
    import subprocess
    code = ("import sys; import auditor, auditor.cli, auditor.warm, auditor.audit, "
            "auditor.probe, auditor.textout, auditor.outputs; "
            "print('sympy' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=child_env())
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"


def test_the_restored_metric_loads_like_the_file(cache_dir, metric_file):
    """Control for the record's description: the loader's own result."""
    direct = loads_metric(METRIC, path=str(metric_file))
    open_metric(metric_file)
    warm, _ = open_metric(metric_file)
    assert warm.parameters == direct.parameters
    assert warm.region.fixed == direct.region.fixed
    assert warm.crew == direct.crew
    assert Geometry(direct).kernel.source == warm.kernel_sources["metric"]


@pytest.mark.parametrize("literal", ["2.5", ".5e1", "+3", "-0.0", "0e7", "1e-300", "1e300", "1e301",
                                     "1e308",
                                     "1e-400", "1e-310", "1e999", "\u0664", "1_000"])
def test_plain_event_values_read_like_the_expression_language(literal):
    """`probe --at` reads plain decimal literals without the parser (no SymPy on a
    warm start); what it accepts and refuses must not differ from the parser's
    reading of the same literal in parentheses (which always takes the parser)."""
    from auditor.errors import UsageError
    from auditor.probe import parse_event
    metric = loads_metric(METRIC)

    def read(text):
        try:
            return parse_event(metric, f"t=0,x={text},y=0,z=0")["x"]
        except UsageError:
            return "refused"

    fast, parsed = read(literal), read(f"({literal})")
    assert fast == parsed, (literal, fast, parsed)


def test_a_warm_audit_equals_the_cold_one_with_lapse_exclusion_and_crew(cache_dir, tmp_path):
    """The ADM wormhole (lapse row, crew start and velocity followed as a worldline)
    with an exclusion and a --set: the warm run gives the same audit, bit for bit."""
    from auditor.audit import audit
    from auditor.outputs import dumps_json
    text = (SAMPLES / "morris_thorne_wormhole.toml").read_text()
    text = text.replace("[region]", '[region]\nexclude = "0.25 - l**2"', 1)
    path = tmp_path / "wormhole.toml"
    path.write_text(text)
    results = []
    for expect_warm in (False, True):
        metric, geo = open_metric(path, set_items=["a=0.3"], points=7)
        assert geo._lapse_row is not None and geo._exclude_row is not None
        assert isinstance(metric, WarmMetric) is expect_warm
        assert metric.crew.start is not None and metric.crew.velocity is not None
        data = audit(metric, geometry=geo, progress=False).to_json()
        data.pop("timing", None)
        results.append(json.loads(dumps_json(data)))
    assert results[0]["excluded_by_reason"]["user_exclusion"] > 0
    assert results[0]["crew"]["proper_time"] > 0
    assert results[0] == results[1]
