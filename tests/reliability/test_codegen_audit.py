"""Only whitelisted names and functions reach generated source; a tampered kernel
cache is never compiled.

Part 1, names. Metric files whose coordinates, parameters and definitions are
named like Python builtins (``open``, ``exec``, ``print``, ``len``), like the
generator's own names (``numpy``, ``out``, ``p``, ``x``, ``kernel``,
``errstate``), like the internal symbols (``_c0``, ``_p0``, ``_t0``), or very
long, are loaded and compiled. Their kernels must be *the same* as those of
the same metric written with plain names (the user names are replaced by
internal symbols before any code exists), the source must hold only the
generator's own words (checked with Python's tokenizer and with an AST
whitelist, independently of the tool's own check), and the numbers must be
those of the user's metric. Unicode look-alikes of ASCII names are refused at
load.

Part 2, the cache (``AUDITOR_CACHE_DIR`` set to a fresh folder per test). The
cached file is edited with its header kept or re-signed with a wrong key, its
header removed, the secret replaced, truncated or deleted, a foreign file is
planted under the right name, a hostile source is signed with the real
secret. ``kernels._compile`` and ``kernels._generate`` are wrapped to see what
is compiled and whether the kernel was rebuilt: the tampered text must never
be compiled, the kernel is regenerated and the numbers are unchanged. A
control test shows that an untouched cache *is* used (otherwise the tamper
tests would pass trivially).
"""

from __future__ import annotations

import ast
import hashlib
import hmac
import os
import secrets
from pathlib import Path

import numpy as np
import pytest
import sympy as sp

from auditor.errors import MetricFileError
from auditor.geometry import Geometry, cache, kernels
from auditor.metric import loads_metric

from tests.reliability import assert_one_line_error, audit_source, run_inprocess

# -- part 1: names ------------------------------------------------------------------
LONG = "q" + "_very_long_name" * 300          # 4501 characters

#: A perturbed flat metric written with placeholders; every parameter enters g
#: so that a leak or a mix-up of any name changes the kernel.
TEMPLATE = """name = "Names test"
coordinates = ["{T}", "{X}", "{Y}", "{Z}"]
[parameters]
{P1} = 0.3
{P2} = 0.2
{P3} = 0.1
{P4} = 0.4
{P5} = 0.05
{P6} = 0.11
{P7} = 0.13
{P8} = 0.17
{P9} = 0.19
{P10} = 0.23
{P11} = 0.29
{P12} = 0.031
[define]
{D1} = "{P1}*{X}"
{D2} = "{P2}*{Y}*{D1}"
[metric]
line_element = "-(1 + {D1}**2 + {P6}*{Z}**2)*d{T}**2 + (1 + {D2}**2 + {P7}*{T}*{Z})*d{X}**2 + (1 + {P3}*{X}*{Z} + {P8}*{Y}**2)*d{Y}**2 + (1 + {P4}*{Y}*{X} + {P9}*{Z}*{T})*d{Z}**2 + 2*{P5}*{X}*d{T}*d{Z} + 2*{P10}*{P11}*d{X}*d{Y} + 2*{P12}*{Y}*{Z}*d{T}*d{X}"
[region]
{T} = 0.0
{X} = [0.1, 0.9]
{Y} = [0.2, 0.8]
{Z} = 0.5
points = 3
"""
PLAIN = dict(T="t", X="x", Y="y", Z="z", **{f"P{i}": f"a{i}" for i in range(1, 13)},
             D1="h1", D2="h2")
BUILTINS = dict(T="numpy", X="out", Y="p", Z="x", P1="open", P2="exec", P3="print",
                P4="len", P5="kernel", P6="_c0", P7="_c1", P8="_p0", P9="_p1", P10="_t0",
                P11="e", P12=LONG, D1="errstate", D2="_t1")
INTERNAL = dict(T="_c1", X="_c0", Y="_p0", Z="_t0", P1="_c2", P2="_p1", P3="_c3", P4="x",
                P5="p", P6="out", P7="float64", P8="empty", P9="sqrt_", P10="_p3",
                P11="_t2", P12="_p2", D1="_c", D2="_p")


def _metric(names):
    return loads_metric(TEMPLATE.format(**names), path="names.toml")


@pytest.fixture(scope="module")
def no_cache():
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("AUDITOR_NO_CACHE", "1")
        yield


@pytest.fixture(scope="module")
def plain(no_cache):
    m = _metric(PLAIN)
    return m, Geometry(m)


ALLOWED_AST = (ast.Module, ast.FunctionDef, ast.arguments, ast.arg, ast.Assign, ast.Name,
               ast.Load, ast.Store, ast.Subscript, ast.Constant, ast.BinOp, ast.UnaryOp,
               ast.Call, ast.Attribute, ast.With, ast.withitem, ast.keyword, ast.Return,
               ast.Add, ast.Sub, ast.Mult, ast.Div, ast.Pow, ast.USub, ast.UAdd)


def audit_ast(src: str) -> None:
    """The generated module is one function of assignments: attributes only of
    ``numpy``, calls only of ``numpy`` functions, the one keyword ``all='ignore'``."""
    tree = ast.parse(src)
    assert len(tree.body) == 1 and isinstance(tree.body[0], ast.FunctionDef)
    assert [a.arg for a in tree.body[0].args.args] == ["x", "p", "out"]
    for node in ast.walk(tree):
        assert isinstance(node, ALLOWED_AST), f"{type(node).__name__} in generated source"
        if isinstance(node, ast.Attribute):
            assert isinstance(node.value, ast.Name) and node.value.id == "numpy"
        if isinstance(node, ast.Call):
            assert isinstance(node.func, ast.Attribute), ast.dump(node)
        if isinstance(node, ast.keyword):
            assert node.arg == "all" and node.value.value == "ignore"
        if isinstance(node, ast.Constant):
            assert isinstance(node.value, (int, float)) or node.value == "ignore"


@pytest.mark.parametrize("names", [BUILTINS, INTERNAL], ids=["builtins", "internal-names"])
def test_user_names_never_reach_the_kernel(names, plain, no_cache):
    metric = _metric(names)
    pm, pg = plain
    # The loader replaced every user name by the same internal symbol as in the
    # plain metric: the internal trees are identical, hence the kernels too.
    assert metric.g == pm.g
    geo = Geometry(metric)
    src = geo.kernel.source
    assert src == pg.kernel.source
    audit_source(src, user_words=set(names.values()))
    audit_ast(src)
    assert LONG not in src and "open" not in src and "exec" not in src
    # The numbers are those of the user's metric: g from the file's own text,
    # evaluated by SymPy with the user's names, at two events.
    user = metric.user_symbols
    expand = {user[d.name]: d.expanded for d in metric.definitions}
    values = {user[k]: sp.Float(v) for k, v in metric.parameters.items()}
    for event in ([0.0, 0.3, 0.7, 0.5], [0.2, -0.4, 0.9, 1.3]):
        ev = {user[c]: sp.Float(v) for c, v in zip(metric.coordinates, event)}
        want = np.array(metric.g_display.xreplace(expand).xreplace(ev).xreplace(values)
                        .evalf(30).tolist(), dtype=float)
        raw = geo.raw(np.array([event]), geo.params())
        got = raw[kernels.GIDX, 0]
        # Entries are sums of a few products of O(1) numbers: a few ulps.
        np.testing.assert_allclose(got, want, rtol=1e-14, atol=1e-15)


def test_hostile_names_work_end_to_end(tmp_path, capsys):
    """The whole pipeline (probe, check) runs with builtin-like names."""
    path = tmp_path / "names.toml"
    path.write_text(TEMPLATE.format(**BUILTINS))
    code, out, err = run_inprocess(["probe", path, "--at", "numpy=0,out=0.3,p=0.7,x=0.5",
                                    "--set", "open=0.25"], capsys)
    assert code == 0, err
    code, out, err = run_inprocess(["check", path, "--quiet", "--json", "-"], capsys)
    assert code in (0, 1), err


LOOKALIKES = [
    ("cyrillic coordinate", 'coordinates = ["t", "\u0445", "y", "z"]', "not a valid name"),
    ("mathematical italic coordinate", 'coordinates = ["t", "\U0001d465", "y", "z"]',
     "not a valid name"),
    ("fullwidth parameter", 'coordinates = ["t", "x", "y", "z"]\n[parameters]\n'
     '"\uff45\uff58\uff45\uff43" = 1.0', "not a valid name"),
    ("greek omicron parameter", 'coordinates = ["t", "x", "y", "z"]\n[parameters]\n'
     '"\u03bfpen" = 1.0', "not a valid name"),
    ("ligature definition", 'coordinates = ["t", "x", "y", "z"]\n[define]\n'
     '"\ufb01x" = "x"', "not a valid name"),
    ("zero-width space in a name", 'coordinates = ["t", "x", "y", "z"]\n[parameters]\n'
     '"a\u200b" = 1.0', "not a valid name"),
    ("cyrillic letter in a function", 'coordinates = ["t", "x", "y", "z"]\n[define]\n'
     'f = "\u0441os(x)"', "non-ASCII character"),
    ("unicode minus", 'coordinates = ["t", "x", "y", "z"]\n[define]\nf = "\u2212x"',
     "non-ASCII character"),
    ("fullwidth call of exec", 'coordinates = ["t", "x", "y", "z"]\n[define]\n'
     'f = "\uff45\uff58\uff45\uff43(x)"', "non-ASCII character"),
]


@pytest.mark.parametrize("label, head, fragment", LOOKALIKES, ids=[c[0] for c in LOOKALIKES])
def test_unicode_lookalikes_are_refused_at_load(label, head, fragment, tmp_path, capsys):
    text = ('name = "Look-alike"\n' + head +
            '\n[metric]\nline_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n')
    with pytest.raises(MetricFileError) as err:
        loads_metric(text, path="lookalike.toml")
    assert fragment in str(err.value)
    path = tmp_path / "lookalike.toml"
    path.write_text(text, encoding="utf-8")
    code, out, err_text = run_inprocess(["probe", path, "--at", "t=0,x=1,y=0,z=0"], capsys)
    assert_one_line_error(code, err_text, fragment)


# -- the tool's own source check ------------------------------------------------------
HOSTILE_SOURCES = [
    "import os\ndef kernel(x, p, out):\n    return out\n",
    "def kernel(x, p, out):\n    __import__('os').system('true')\n    return out\n",
    "def kernel(x, p, out):\n    open('f', 'w')\n    return out\n",
    "def kernel(x, p, out):\n    out[0] = numpy.load('f')\n    return out\n",
    "def kernel(x, p, out):\n    out[0] = x.__class__\n    return out\n",
    "def kernel(x, p, out):\n    out[0] = numpy.sqrt.__globals__\n    return out\n",
    "def kernel(x, p, out):\n    out[0] = eval('1')\n    return out\n",
    "def kernel(x, p, out):\n    out[0] = getattr(numpy, 'load')\n    return out\n",
    'def kernel(x, p, out):\n    with numpy.errstate(all="ignore"):\n        return out\n',
    "def kernel(x, p, out):\n    out[0] = x  # a comment\n    return out\n",
    "def kernel(x, p, out):\n    out[0] = x + \\\n        p\n    return out\n",
]


@pytest.mark.parametrize("src", HOSTILE_SOURCES)
def test_source_check_refuses_foreign_names(src):
    with pytest.raises(RuntimeError):
        kernels._check_source(src)


# -- part 2: the cache ------------------------------------------------------------------
CACHE_METRIC = """name = "Cache test"
coordinates = ["t", "x", "y", "z"]
[parameters]
a = 0.5
[metric]
line_element = "-(1 + a*x**2)*dt**2 + (1 + a*y**2)*dx**2 + dy**2 + dz**2"
"""
OTHER_METRIC = CACHE_METRIC.replace("a*x**2", "a*y**3").replace("Cache test", "Other")
EVENTS = np.array([[0.0, 1.0, 2.0, 0.0], [0.5, -0.3, 0.7, 1.0]])


class Spy:
    """Wraps kernels._compile and kernels._generate: what was compiled, how often
    the source was generated afresh."""

    def __init__(self, monkeypatch):
        self.compiled: list[str] = []
        self.generated = 0
        real_compile, real_generate = kernels._compile, kernels._generate

        def compile_(src):
            self.compiled.append(src)
            return real_compile(src)

        def generate(*a, **k):
            self.generated += 1
            return real_generate(*a, **k)

        monkeypatch.setattr(kernels, "_compile", compile_)
        monkeypatch.setattr(kernels, "_generate", generate)


@pytest.fixture
def warm_cache(tmp_path, monkeypatch):
    """A fresh cache folder holding the kernel of CACHE_METRIC; yields
    (folder, metric, kernel file, legitimate source, reference raw output)."""
    folder = tmp_path / "cache"
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(folder))
    monkeypatch.delenv("AUDITOR_NO_CACHE", raising=False)
    metric = loads_metric(CACHE_METRIC)
    geo = Geometry(metric)
    key = cache.cache_key("metric:1", [metric.g])
    path = folder / f"{key}.py"
    assert path.exists(), os.listdir(folder)
    return folder, metric, path, geo.kernel.source, geo.raw(EVENTS, geo.params())


def _sign(secret: bytes, source: str) -> str:
    return cache._HEADER + hmac.new(secret, source.encode(), hashlib.sha256).hexdigest() + "\n"


MARKER = "planted-code-ran"


def _payload(marker: Path) -> str:
    return (f"open({str(marker)!r}, 'w').write('x')\n"
            f"import os\nos.system('touch {marker}')\n"
            "def kernel(x, p, out):\n    out[:] = 0.0\n    return out\n")


def tamper(kind: str, folder: Path, path: Path, legit: str, marker: Path) -> str | None:
    """Apply one kind of tampering; returns the tampered source text, if any."""
    head, _, body = path.read_text().partition("\n")
    edited = body.replace("    return out", "        out[0] = 42.0\n    return out")
    assert edited != body
    real_secret = (folder / "secret").read_bytes()
    if kind == "body edited, header kept":
        path.write_text(head + "\n" + edited)
        return edited
    if kind == "body edited, re-signed with another key":
        path.write_text(_sign(secrets.token_bytes(32), edited) + edited)
        return edited
    if kind == "header removed, body edited":
        path.write_text(edited)
        return edited
    if kind == "secret replaced":
        (folder / "secret").write_bytes(secrets.token_bytes(32))
        return None
    if kind == "secret truncated":
        (folder / "secret").write_bytes(real_secret[:5])
        return None
    if kind == "secret deleted":
        (folder / "secret").unlink()
        return None
    if kind == "foreign file under the right name":
        src = _payload(marker)
        path.write_text(cache._HEADER + "0" * 64 + "\n" + src)
        return src
    if kind == "hostile source signed with the real secret":
        src = _payload(marker)
        path.write_text(_sign(real_secret, src) + src)
        return src
    if kind == "not UTF-8":
        path.write_bytes(b"\xff\xfe" + os.urandom(64))
        return None
    if kind == "empty file":
        path.write_text("")
        return None
    raise ValueError(kind)


TAMPERING = ["body edited, header kept", "body edited, re-signed with another key",
             "header removed, body edited", "secret replaced", "secret truncated", "secret deleted",
             "foreign file under the right name", "hostile source signed with the real secret",
             "not UTF-8", "empty file"]


def test_an_untouched_cache_is_used(warm_cache, monkeypatch):
    """Control: without tampering the cached source is compiled and nothing is
    regenerated, so the tests below do exercise the cache."""
    folder, metric, path, legit, ref = warm_cache
    spy = Spy(monkeypatch)
    geo = Geometry(metric)
    assert spy.generated == 0 and spy.compiled == [legit]
    np.testing.assert_array_equal(geo.raw(EVENTS, geo.params()), ref)


@pytest.mark.parametrize("kind", TAMPERING)
def test_a_tampered_cache_is_rebuilt_never_compiled(kind, warm_cache, monkeypatch, tmp_path):
    folder, metric, path, legit, ref = warm_cache
    marker = tmp_path / MARKER
    bad = tamper(kind, folder, path, legit, marker)
    spy = Spy(monkeypatch)
    geo = Geometry(metric)
    assert spy.generated == 1, "the kernel was not regenerated"
    assert spy.compiled == [legit]
    if bad is not None:
        assert bad not in spy.compiled
    assert not marker.exists()
    # Regenerated from the same expressions: the same numbers, bit for bit.
    np.testing.assert_array_equal(geo.raw(EVENTS, geo.params()), ref)
    # And the cache is healthy again: the next build uses the new file.
    spy2 = Spy(monkeypatch)
    Geometry(metric)
    assert spy2.generated == 0 and spy2.compiled == [legit]


def test_a_signed_kernel_of_another_metric_is_not_accepted(warm_cache, monkeypatch):
    folder, metric, path, legit, ref = warm_cache
    other = loads_metric(OTHER_METRIC)
    Geometry(other)
    other_path = folder / f"{cache.cache_key('metric:1', [other.g])}.py"
    path.write_text(other_path.read_text())
    geo = Geometry(metric)
    np.testing.assert_array_equal(geo.raw(EVENTS, geo.params()), ref)


def _escaped(text: str) -> str:
    """A Python string literal with every character as an octal escape: it
    holds no letters for a regex to see."""
    return "'" + "".join(f"\\{ord(c):03o}" for c in text) + "'"


def _fullwidth(word: str) -> str:
    """ASCII letters as fullwidth look-alikes; Python folds them back (NFKC)
    when it compiles an identifier."""
    return "".join(chr(ord(c) + 0xFEE0) for c in word)


def test_whitelist_sees_through_lookalike_identifiers(warm_cache, monkeypatch, tmp_path):
    folder, metric, path, legit, ref = warm_cache
    marker = tmp_path / MARKER
    payload = f"numpy.{_fullwidth('savetxt')}({_escaped(str(marker))}, numpy.empty(1))\n"
    src = payload + legit
    with pytest.raises(RuntimeError):
        kernels._check_source(src)
    secret = (folder / "secret").read_bytes()
    path.write_text(_sign(secret, src) + src)
    Geometry(metric)
    assert not marker.exists(), "a source with look-alike identifiers was compiled and ran"


def test_a_cache_folder_writable_by_others_is_not_trusted(tmp_path, monkeypatch):
    folder = tmp_path / "shared-cache"
    folder.mkdir()
    folder.chmod(0o777)
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(folder))
    monkeypatch.delenv("AUDITOR_NO_CACHE", raising=False)
    known = b"k" * 32                    # the other user's choice
    (folder / "secret").write_bytes(known)
    (folder / "secret").chmod(0o666)
    metric = loads_metric(CACHE_METRIC)
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("AUDITOR_NO_CACHE", "1")
        legit = Geometry(metric).kernel.source
    planted = legit.replace("    return out", "        out[0] = 42.0\n    return out")
    key = cache.cache_key("metric:1", [metric.g])
    (folder / f"{key}.py").write_text(_sign(known, planted) + planted)
    geo = Geometry(metric)
    assert geo.kernel.source == legit


def test_a_failed_cache_store_leaves_no_temporary_file(warm_cache):
    """Regression (found here): store_source swallowed the OSError of os.replace
    but left its .kernel-*.part file behind."""
    folder, metric, path, legit, ref = warm_cache
    path.unlink()
    path.mkdir()
    geo = Geometry(metric)
    np.testing.assert_array_equal(geo.raw(EVENTS, geo.params()), ref)
    assert [p.name for p in folder.iterdir() if p.name.endswith(".part")] == []
