"""Property-based tests of the expression parser and the metric loader.

Properties (for every generated input):

1. ``parse_expression`` and ``loads_metric`` either succeed or raise an
   :class:`~auditor.errors.InputError` subclass with a non-empty message;
   nothing else escapes (no RecursionError, MemoryError, SymPy or TOML error,
   no hang: each case runs under a wall-clock alarm).
2. What they build holds only declared symbols (the parser) or only the
   internal symbols ``_c0.._c3``, ``_p0..`` (the loader).
3. Code generated from it (``compile_scalars``, the same printer and
   ``_check_source`` as the metric kernels) holds no user text: every name
   token of the source is one of the generator's own, checked here with
   Python's tokenizer (independently of the tool's own regex check), the only
   string literal is ``'ignore'``, and the kernel runs.

Inputs: expression trees built from the grammar of the metric-format contract
(numbers, names, ``+ - * / **``, the listed functions) mixed with hostile
nodes (attribute access, subscripts, lambdas, strings, comprehensions,
conditionals, refused operators, dunder and builtin names, keyword and
starred arguments, odd literals, deep nesting, long runs), random text over
the grammar's characters plus non-ASCII look-alikes, random bytes, and random
TOML documents (mostly-valid metric files with mutations).

The short runs are derandomized (the same few hundred cases every time). The
long runs (``-m slow`` or ``AUDITOR_LONG_TESTS=1``; at least 10 000 cases per
property) draw from the seed printed at the start, ``AUDITOR_TEST_SEED=N``
replays one::

    python -m pytest -m slow tests/reliability/test_fuzz.py -s
"""

from __future__ import annotations

import contextlib
import json
import math
import re
import signal
import zlib

import numpy as np
import pytest
import sympy as sp
from hypothesis import HealthCheck, given, reject, seed, settings
from hypothesis import strategies as st

from auditor.errors import InputError
from auditor.geometry.kernels import compile_metric, compile_scalars
from auditor.metric import loads_metric, parse_expression
from auditor.metric.expr import FUNCTIONS

from tests.reliability import (BASE_SEED, INTERNAL_NAME, audit_source, require_long,
                               run_inprocess)

# -- budgets -------------------------------------------------------------------
SHORT_EXPR, SHORT_TEXT, SHORT_BYTES, SHORT_DOCS = 250, 200, 150, 120
LONG_CASES = 10_000
#: Wall-clock limit of one case. A parse is milliseconds and a loaded random
#: metric plus its scalar kernel well under a second; the slowest generated
#: shape (a 200-factor product through SymPy's CSE) takes seconds, and over 10 s
#: with three test processes sharing 2 cores. 30 s only catches hangs.
CASE_SECONDS = 30

COMMON = dict(deadline=None, database=None, print_blob=True,
              suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                     HealthCheck.filter_too_much])

# -- the parser's scope ----------------------------------------------------------
#: Declared names for the parser: user names that are Python builtins or
#: collide with the generator's own names, so that a leak would show.
COORD_NAMES = ("t", "x", "numpy", "out")
PARAM_NAMES = ("open", "exec", "len", "p", "_c0", "_p0", "_t0", "kernel")
DECLARED = {n: sp.Symbol(n, real=True) for n in COORD_NAMES + PARAM_NAMES}
INT_COORDS = tuple(sp.Symbol(f"_c{i}", real=True) for i in range(4))
INT_PARAMS = tuple(sp.Symbol(f"_p{i}", real=True) for i in range(len(PARAM_NAMES)))
TO_INTERNAL = {DECLARED[n]: INT_COORDS[i] for i, n in enumerate(COORD_NAMES)}
TO_INTERNAL.update({DECLARED[n]: INT_PARAMS[i] for i, n in enumerate(PARAM_NAMES)})


class CaseTimeout(Exception):
    """A single generated case ran longer than CASE_SECONDS."""


@contextlib.contextmanager
def alarm(seconds: int = CASE_SECONDS):
    def ring(signum, frame):
        raise CaseTimeout(f"one case ran longer than {seconds} s")
    old = signal.signal(signal.SIGALRM, ring)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


@pytest.fixture(scope="module", autouse=True)
def no_kernel_cache():
    """Generated kernels are compiled without the disk cache (no litter, and
    every case really runs the generator)."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("AUDITOR_NO_CACHE", "1")
        yield


# -- checks ----------------------------------------------------------------------
#: Defects already pinned by a strict xfail test (see the test named in each
#: entry): a case failing with exactly this signature is discarded, so that the
#: property keeps looking for other defects. When the defect is fixed its xfail
#: test passes, fails as XPASS(strict), and the entry must go.
KNOWN_DEFECTS = {
}


def _known_defect(exc) -> bool:
    return any(isinstance(exc, kind) and re.fullmatch(pattern, str(exc))
               for kind, pattern in KNOWN_DEFECTS)


def check_kernel(exprs, coord_syms, param_syms, user_words, n_params) -> None:
    try:
        kern = compile_scalars(exprs, coord_syms, param_syms)
    except Exception as exc:
        if _known_defect(exc):
            reject()
        raise
    audit_source(kern.source, user_words)
    pts = np.array([[0.3, -1.7, 2.5], [1.1, 0.0, -0.4], [-2.0, 0.9, 3.3], [0.5, 0.5, 0.5]])
    try:
        with np.errstate(all="ignore"):
            out = kern(pts, np.linspace(0.25, 2.0, n_params))
    except TypeError as exc:
        if _known_defect(exc):
            reject()
        raise
    assert out.shape == (len(exprs), 3)


def check_expression(text: str) -> None:
    """Property 1-3 for one expression string."""
    with alarm():
        try:
            expr = parse_expression(text, DECLARED, path="fuzz.toml", key="define.f")
        except InputError as exc:
            assert str(exc).strip(), "empty error message"
            return
        assert isinstance(expr, sp.Basic)
        stray = expr.free_symbols - set(DECLARED.values())
        assert not stray, f"undeclared symbols {stray} from {text!r}"
        check_kernel([expr.xreplace(TO_INTERNAL)], INT_COORDS, INT_PARAMS, DECLARED,
                     len(INT_PARAMS))


def check_document(data, full_kernel: bool = False) -> None:
    """Property 1-3 for one metric file (bytes or text). With ``full_kernel``,
    one loaded file in ten (chosen by a hash of its text) also gets its full
    derivative kernel compiled and audited (seconds each: long runs only)."""
    with alarm(CASE_SECONDS * (3 if full_kernel else 1)):
        try:
            metric = loads_metric(data, path="fuzz.toml")
        except InputError as exc:
            assert str(exc).strip(), "empty error message"
            return
        internal = set(metric.coord_symbols) | set(metric.param_symbols)
        assert all(INTERNAL_NAME.match(s.name) for s in internal)
        exprs = [metric.g[a, b] for a in range(4) for b in range(a, 4)]
        if metric.lapse is not None:
            exprs.append(metric.lapse)
        if metric.region is not None and metric.region.exclude is not None:
            exprs.append(metric.region.exclude)
        for e in exprs:
            assert e.free_symbols <= internal, f"user symbols {e.free_symbols - internal}"
        user_words = set(metric.coordinates) | set(metric.parameters) | \
            {d.name for d in metric.definitions}
        check_kernel(exprs, metric.coord_symbols, metric.param_symbols, user_words,
                     len(metric.param_symbols))
        raw = data if isinstance(data, bytes) else data.encode()
        if full_kernel and zlib.crc32(raw) % 10 == 0:
            try:
                kern = compile_metric(metric)
            except Exception as exc:
                if _known_defect(exc):
                    reject()
                raise
            audit_source(kern.source, user_words)


# -- expression strategies -------------------------------------------------------
NUMBER_TEXT = st.one_of(
    st.integers(-10**40, 10**40).map(str),
    st.floats(allow_nan=False, allow_infinity=False).map(repr),
    st.sampled_from(["0", "1", "2", "0.5", "1e-3", "1e308", "1e309", "1e-400", "1e300",
                     "0x1F", "0o17", "0b101", "1_000", "1j", "2e5j", "1.", ".5", "00",
                     "1e99999", "9" * 120, "1" + "0" * 31, "0.1e-310", "5e-324", "1__0"]))
GOOD_NAMES = st.sampled_from(sorted(DECLARED) + ["pi"])
HOSTILE_NAMES = st.sampled_from([
    "__import__", "__builtins__", "__class__", "os", "sys", "eval", "globals", "getattr",
    "print", "nan", "inf", "NaN", "Infinity", "True", "None", "I", "E", "oo", "zoo", "S",
    "Symbol", "sin", "lambda", "dt", "y", "numpy_", "_", "__", "ОPEN", "оpen", "ｅｘｅｃ",
    "x\u200b", "\u00e9", "µ"])
FUNC_NAMES = st.sampled_from(sorted(FUNCTIONS))
HOSTILE_FUNCS = st.sampled_from(["abs", "max", "exec", "eval", "open", "__import__", "print",
                                 "Heaviside", "sign", "floor", "sympify", "getattr", "tahn"])
BINOPS = st.sampled_from(["+", "-", "*", "/", "**"])
BAD_BINOPS = st.sampled_from(["^", "//", "%", "@", "&", "|", "<<", ">>", "<", "==", " and ",
                              " or ", " if 1 else ", " in ", " is "])
SPACE = st.sampled_from(["", " ", "\n", "\t", "  "])


def _wrap(parts):
    return "".join(parts)


def _extend(children):
    # A tree node of the grammar (mostly), or a hostile node around a child.
    return st.one_of(
        st.tuples(children, SPACE, BINOPS, SPACE, children)
        .map(lambda t: f"({t[0]}){t[1]}{t[2]}{t[3]}({t[4]})"),
        st.tuples(children, BINOPS, children).map(lambda t: f"{t[0]}{t[1]}{t[2]}"),
        st.tuples(st.sampled_from(["-", "+", "- -", "~", "not "]), children)
        .map(lambda t: f"{t[0]}({t[1]})"),
        st.tuples(FUNC_NAMES, st.lists(children, min_size=0, max_size=3))
        .map(lambda t: f"{t[0]}({', '.join(t[1])})"),
        st.tuples(FUNC_NAMES, children).map(lambda t: f"{t[0]}({t[1]})"),
        st.tuples(HOSTILE_FUNCS, children).map(lambda t: f"{t[0]}({t[1]})"),
        st.tuples(children, BAD_BINOPS, children).map(lambda t: f"({t[0]}){t[1]}({t[2]})"),
        st.tuples(st.sampled_from([
            "({0}).__class__", "({0}).real", "({0})[0]", "({0})[1:2]", "(lambda: {0})",
            "(lambda q: q)({0})", "[{0}]", "({0},)", "{{{0}: 1}}", "{{{0}}}",
            "[q for q in ({0},)]", "f'{{{0}}}'", "'{0}'", "b'{0}'", "(q := {0})",
            "yield {0}", "await {0}", "*{0}", "sin(*[{0}])", "sin(x={0})", "sin({0}, )",
            "atan2({0})", "sqrt({0}, {0})", "({0}) if x else 1", "__import__('os')",
            "().__class__.__bases__[0]", "{0} # comment", "{0};1", "{0}\x00", "(({0})",
            "{0})", "{0} = 1", "exp(exp(exp({0})))", "({0})**257", "({0})**256",
            "({0})**-0.5", "log(0*({0}))", "sqrt(-1-({0})**2)", "1/(({0})-({0}))",
            "10**300*({0})*10**300", "({0})**(10**6)", "2**({0})**2**10",
        ]), children).map(lambda t: t[0].format(t[1])),
    )


EXPRESSIONS = st.recursive(
    st.one_of(NUMBER_TEXT, GOOD_NAMES, GOOD_NAMES, HOSTILE_NAMES), _extend, max_leaves=24)

#: Deep and long shapes: nesting past the parser's limits, long sums and products.
#: Products stop at 200 factors: SymPy's common-subexpression pass is
#: superlinear in them (760 factors took over 10 s on a loaded machine), which
#: is the resource defect pinned in test_interruptions.py
#: (test_a_small_file_whose_derivatives_explode_is_refused_in_time).
SHAPES = st.tuples(
    st.sampled_from(["paren", "sin", "neg", "pow", "sum", "prod", "brackets", "exp", "pownum"]),
    st.integers(1, 1500)).map(lambda t: {
        "paren": "(" * t[1] + "x" + ")" * t[1],
        "sin": "sin(" * t[1] + "x" + ")" * t[1],
        "exp": "exp(" * t[1] + "1" + ")" * t[1],
        "neg": "-" * t[1] + "x",
        "pow": "x" + "**x" * t[1],
        "pownum": "x" + "**2" * t[1],
        "sum": "x" + "+t*x-open" * t[1],
        "prod": "*".join(f"(x+{k})" for k in range(1, min(t[1], 200) + 1)),
        "brackets": "[" * t[1] + "x" + "]" * t[1],
    }[t[0]])

#: Characters of the grammar and its near misses, plus non-ASCII look-alikes
#: (Cyrillic о, Greek ο, fullwidth letters, zero-width and odd spaces).
TEXT_ALPHABET = st.sampled_from(list("0123456789.eE+-*/()^%,_ xtpnoeaxsicl[]{}'\"#\\:=!<>@&|~")
                                + ["\u043e", "\u03bf", "\uff45", "\u200b", "\u00a0", "\n",
                                   "\t", "\x00", "\u2212", "\u00b2"])
RANDOM_TEXT = st.one_of(st.text(TEXT_ALPHABET, max_size=80), st.text(max_size=40))


# -- metric-file strategies ---------------------------------------------------------
def tq(text: str) -> str:
    """A TOML basic string: JSON escapes, but astral characters written as
    themselves (JSON's surrogate pairs are not TOML) and DEL escaped."""
    return json.dumps(text, ensure_ascii=False).replace("\x7f", "\\u007f")


def toml_value(v) -> str:
    """A Python value as TOML (inline tables and arrays for nesting)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return "nan" if math.isnan(v) else ("inf" if v > 0 else "-inf") if math.isinf(v) \
            else repr(v)
    if isinstance(v, str):
        return tq(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{tq(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    if isinstance(v, RawToml):
        return v.text
    raise TypeError(type(v))


class RawToml:
    """A TOML value written as is (dates, odd literals)."""

    def __init__(self, text):
        self.text = text

    def __repr__(self):
        return f"RawToml({self.text!r})"


def toml_document(doc: dict) -> str:
    """Top-level scalars first, then one [table] (and [a.b] sub-tables) each."""
    lines = [f"{tq(k)} = {toml_value(v)}" for k, v in doc.items()
             if not isinstance(v, dict)]
    for k, v in doc.items():
        if isinstance(v, dict):
            subs = {sk: sv for sk, sv in v.items() if isinstance(sv, dict) and sk != "points"
                    and sk != "start"}
            lines.append(f"[{tq(k)}]")
            lines += [f"{tq(sk)} = {toml_value(sv)}" for sk, sv in v.items()
                      if sk not in subs]
            for sk, sv in subs.items():
                lines.append(f"[{tq(k)}.{tq(sk)}]")
                lines += [f"{tq(kk)} = {toml_value(vv)}" for kk, vv in sv.items()]
    return "\n".join(lines) + "\n"


NAME_POOL = ["t", "x", "y", "z", "r", "theta", "phi", "u", "v", "M", "a", "b", "sigma", "R",
             "open", "exec", "print", "len", "numpy", "out", "p", "kernel", "_c0", "_c3", "_p0",
             "_p1", "_t0", "e", "E", "I", "nan", "inf", "dx", "pi", "sin", "lambda", "__x__",
             "1x", "x-y", "", "\u0445", "Ｍ", "a" * 300]
SCALARS = st.one_of(st.integers(-10**20, 10**20), st.floats(), st.booleans(),
                    st.text(max_size=12),
                    st.sampled_from([RawToml("1979-05-27T07:32:00Z"), RawToml("07:32:00"),
                                     RawToml("1979-05-27")]))
JUNK = st.recursive(SCALARS, lambda c: st.one_of(st.lists(c, max_size=4),
                                                 st.dictionaries(st.sampled_from(NAME_POOL), c,
                                                                 max_size=3)), max_leaves=6)


#: Valid names, many of them hostile to a code generator (builtins, the
#: generator's own names, SymPy's names for constants).
VALID_NAMES = ["t", "x", "y", "z", "r", "theta", "phi", "u", "v", "M", "a", "b", "sigma", "R",
               "open", "exec", "print", "len", "numpy", "out", "p", "kernel", "_c0", "_c3",
               "_p0", "_p1", "_t0", "e", "E", "I", "nan", "inf", "oo", "a" * 300]


def expr_over(names, hostile=True):
    """Small expression trees over the given names (the grammar, plus refused
    operators and odd names when ``hostile``)."""
    base = list(names) + ["pi", "1", "2", "0.5", "3"]
    leaves = st.sampled_from(base)
    if hostile:
        leaves = st.one_of(leaves, NUMBER_TEXT, HOSTILE_NAMES.filter(lambda s: len(s) < 3))
    nodes = [lambda c: st.tuples(c, BINOPS, c).map(lambda t: f"({t[0]}){t[1]}({t[2]})"),
             lambda c: st.tuples(FUNC_NAMES, c).map(lambda t: f"{t[0]}({t[1]})")]
    if hostile:
        nodes.append(lambda c: st.tuples(c, BAD_BINOPS, c).map(
            lambda t: f"({t[0]}){t[1]}({t[2]})"))
    return st.recursive(leaves, lambda c: st.one_of(*[n(c) for n in nodes]), max_leaves=5)


@st.composite
def metric_documents(draw):
    """A metric file. Half are well formed (valid names, often ones hostile to a
    code generator, random expressions of the grammar); the other half use any
    names, refused operators and junk values, and get random mutations (deleted
    keys, junk values, unknown and misplaced keys)."""
    hostile = draw(st.booleans())
    pool = NAME_POOL if hostile else VALID_NAMES
    if hostile and draw(st.integers(0, 4)) == 0:
        coords = draw(st.lists(st.sampled_from(NAME_POOL), min_size=0, max_size=6))
    else:
        coords = draw(st.lists(st.sampled_from(pool), min_size=4, max_size=4, unique=True))
    params = draw(st.dictionaries(
        st.sampled_from([n for n in pool if n not in coords or hostile]),
        st.one_of(st.floats(-10, 10), st.integers(-5, 5), SCALARS) if hostile
        else st.floats(-10, 10), max_size=3))
    names = [c for c in coords if isinstance(c, str)] + list(params)
    define = {}
    for k in draw(st.lists(st.sampled_from([n for n in pool if n not in names or hostile]),
                           max_size=3, unique=True)):
        define[k] = draw(expr_over(names + list(define), hostile))
    names += list(define)
    doc: dict = {"name": draw(st.sampled_from(["Fuzz", "", " ", "x" * 50])) if hostile
                 else "Fuzz", "coordinates": coords}
    if params:
        doc["parameters"] = params
    if define:
        doc["define"] = define
    forms = ["line_element", "components", "adm"] + (["two", "none"] if hostile else [])
    form = draw(st.sampled_from(forms))
    ex = expr_over(names, hostile)
    shapes = ["({c})*d{a}*d{b}", "({c})*d{a}**2", "({c})*(d{a} + d{b})**2"]
    if hostile:
        shapes += ["d{a}**3", "sin(d{a})*d{b}", "d{a}/d{b}", "({c})"]
    if form in ("line_element", "two"):
        terms = []
        for _ in range(draw(st.integers(1, 5))):
            a, b = draw(st.sampled_from(coords or ["t"])), draw(st.sampled_from(coords or ["x"]))
            terms.append(draw(st.sampled_from(shapes)).format(c=draw(ex), a=a, b=b))
        doc["metric"] = {"line_element": " + ".join(terms)}
    if form in ("components", "two"):
        comps = {}
        for _ in range(draw(st.integers(0 if hostile else 1, 5))):
            a, b = draw(st.sampled_from(coords or ["t"])), draw(st.sampled_from(coords or ["x"]))
            key = draw(st.sampled_from([f"{a} {b}", f"{a}  {b}", f"{a}", f"{a} {b} {a}"])) \
                if hostile else f"{a} {b}"
            comps[key] = draw(ex)
        doc.setdefault("metric", {})["components"] = comps
    if form == "adm":
        spatial = draw(st.one_of(st.just("identity"), st.lists(
            st.lists(ex, min_size=3, max_size=3), min_size=3, max_size=3),
            *([JUNK] if hostile else [])))
        doc["metric"] = {"adm": {"lapse": draw(ex),
                                 "shift": draw(st.lists(ex, min_size=2 if hostile else 3,
                                                        max_size=4 if hostile else 3)),
                                 "spatial": spatial}}
    if draw(st.booleans()):
        region = {}
        for c in coords:
            if not isinstance(c, str):
                continue
            region[c] = draw(st.one_of(st.floats(-3, 3), st.just([-1.0, 1.0]),
                                       *([st.lists(st.floats(-5, 5), max_size=3), SCALARS]
                                         if hostile else [])))
        region["points"] = draw(st.one_of(st.integers(-2, 12), st.dictionaries(
            st.sampled_from(coords or ["x"]), st.integers(0, 5), max_size=2), SCALARS)
            if hostile else st.integers(2, 9))
        if draw(st.booleans()):
            region["exclude"] = draw(ex)
        doc["region"] = region
    if hostile and draw(st.integers(0, 3)) == 0:
        doc["crew"] = draw(st.dictionaries(st.sampled_from(
            ["body_length_m", "frame", "tidal_limit_g", "start", "velocity", "duration",
             "speed"]), st.one_of(SCALARS, st.lists(st.floats(-1, 1), max_size=4),
                                  st.dictionaries(st.sampled_from(coords or ["t"]),
                                                  st.floats(-2, 2), max_size=4)), max_size=6))
    for _ in range(draw(st.integers(0, 2)) if hostile else 0):       # mutations
        what = draw(st.sampled_from(["delete", "junk", "unknown", "units"]))
        keys = list(doc)
        if what == "delete" and keys:
            del doc[draw(st.sampled_from(keys))]
        elif what == "junk" and keys:
            doc[draw(st.sampled_from(keys))] = draw(JUNK)
        elif what == "unknown":
            doc[draw(st.sampled_from(["metrc", "regions", "line_element", "points", "lapse",
                                      "cordinates", "x" * 100]))] = draw(SCALARS)
        else:
            doc["units"] = {"length_m": draw(st.one_of(st.floats(), SCALARS))}
    return toml_document(doc)


# -- short runs (default suite) -----------------------------------------------------
def short(n):
    """Settings of a short, derandomized run of n cases."""
    return settings(derandomize=True, max_examples=n, **COMMON)


@short(SHORT_EXPR)
@given(st.one_of(EXPRESSIONS, EXPRESSIONS, SHAPES))
def test_expression_trees_are_parsed_or_refused(text):
    check_expression(text)


@short(SHORT_TEXT)
@given(RANDOM_TEXT)
def test_random_text_is_parsed_or_refused(text):
    check_expression(text)


@short(SHORT_BYTES)
@given(st.binary(max_size=400))
def test_random_bytes_are_refused_cleanly(data):
    check_document(data)


@short(SHORT_DOCS)
@given(metric_documents())
def test_random_metric_files_load_or_are_refused(text):
    check_document(text)


def test_the_generators_reach_success_and_refusal():
    """The properties above are only as good as their inputs: the generators must
    produce both accepted and refused cases, and files that load (a fuzz that
    only ever hits the first syntax check would prove little)."""
    from hypothesis import find
    find(EXPRESSIONS, lambda s: _parses(s) and ("**" in s or "(" in s),
         settings=settings(derandomize=True, max_examples=2000, database=None))
    find(EXPRESSIONS, lambda s: not _parses(s), settings=settings(derandomize=True,
                                                                 database=None))
    find(metric_documents(), _loads, settings=settings(derandomize=True, max_examples=3000,
                                                       database=None, deadline=None))


def _parses(text):
    try:
        parse_expression(text, DECLARED)
        return True
    except InputError:
        return False


def _loads(text):
    try:
        loads_metric(text)
        return True
    except InputError:
        return False


def test_euler_number_constant_compiles():
    """A metric may use e = exp(1) like any other constant. Regression (found by
    the fuzzer): numpy.e was refused by _check_source, exit 70."""
    expr = parse_expression("exp(1)*x", DECLARED).xreplace(TO_INTERNAL)
    kern = compile_scalars([expr], INT_COORDS, INT_PARAMS)
    out = kern(np.array([[0.0], [2.0], [0.0], [0.0]]), np.ones(len(INT_PARAMS)))
    assert out[0, 0] == pytest.approx(2.0 * math.e, rel=1e-15)


def test_big_integer_constant_inside_a_function():
    """Regression (found by the fuzzer as acosh(1.8446744073709552e+19)): an
    integer beyond int64 reached NumPy as a Python int, TypeError, exit 70."""
    expr = parse_expression("log(10**20)*x", DECLARED).xreplace(TO_INTERNAL)
    kern = compile_scalars([expr], INT_COORDS, INT_PARAMS)
    out = kern(np.array([[0.0], [1.0], [0.0], [0.0]]), np.ones(len(INT_PARAMS)))
    assert out[0, 0] == pytest.approx(20 * math.log(10), rel=1e-15)


def test_square_root_of_a_square_is_not_an_internal_error(tmp_path, capsys):
    """Regression (found by the long fuzz run as '"t t" = "sqrt((t)*(t))"'): SymPy
    folds it to Abs, which code generation could not print: exit 70, two lines."""
    path = tmp_path / "abs.toml"
    path.write_text('name = "abs"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
                    'line_element = "-(1 + sqrt(x**2))*dt**2 + dx**2 + dy**2 + dz**2"\n')
    code, out, err = run_inprocess(["probe", path, "--at", "t=0,x=1,y=0,z=0"], capsys)
    assert code in (0, 2), err
    assert err.count("\n") <= 1, err


@pytest.mark.parametrize("component", ["atanh(u)", "t/acos(u)", "log(u - 1)",
                                       "acosh(acos(u))"])
def test_definitions_that_make_a_constant_infinite_or_complex_are_refused(component, tmp_path,
                                                                          capsys):
    path = tmp_path / "define.toml"
    path.write_text('name = "d"\ncoordinates = ["t", "x", "y", "z"]\n[define]\nu = "1"\n'
                    f'[metric.components]\n"t t" = "-2 + {component}"\n"x x" = "1"\n'
                    '"y y" = "1"\n"z z" = "1"\n')
    code, out, err = run_inprocess(["probe", path, "--at", "t=0.5,x=0,y=0,z=0"], capsys)
    assert code == 2 and err.startswith("auditor: error: ") and err.count("\n") == 1, err


def test_a_tiny_constant_inside_a_function_is_not_an_internal_error(tmp_path, capsys):
    path = tmp_path / "tiny.toml"
    path.write_text('name = "tiny"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
                    'line_element = "-dt**2 + (1 + atan2(1, 1e-400)*x)*dx**2 + dy**2 + dz**2"\n')
    code, out, err = run_inprocess(["probe", path, "--at", "t=0,x=1,y=0,z=0"], capsys)
    # Either refused as a number too small for a double, or evaluated
    # (atan2(1, 1e-400) = pi/2 to double precision): not an internal error.
    assert code in (0, 2) and err.count("\n") <= 1, err


def test_zero_to_a_symbolic_power_is_not_an_internal_error(tmp_path, capsys):
    path = tmp_path / "zero.toml"
    path.write_text('name = "zero"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
                    'line_element = "-dt**2 + (2 + 0**sec(x))*dx**2 + dy**2 + dz**2"\n')
    code, out, err = run_inprocess(["probe", path, "--at", "t=0,x=0.5,y=0,z=0"], capsys)
    assert code in (0, 2) and err.count("\n") <= 1, err


# -- long runs (opt in) ----------------------------------------------------------
def _long(strategy, check, request):
    require_long(request)
    s = BASE_SEED + sum(map(ord, request.node.name))
    print(f"hypothesis seed for {request.node.name}: {s} (AUDITOR_TEST_SEED={BASE_SEED})")

    @seed(s)
    @settings(max_examples=LONG_CASES, **COMMON)
    @given(strategy)
    def run(value):
        check(value)

    run()


@pytest.mark.slow
def test_long_expression_trees(request):
    """10 000 grammar trees with hostile nodes and deep shapes.
    Run: ``python -m pytest -m slow tests/reliability/test_fuzz.py -s``."""
    _long(st.one_of(EXPRESSIONS, EXPRESSIONS, SHAPES), check_expression, request)


@pytest.mark.slow
def test_long_random_text(request):
    """10 000 random strings over the grammar's characters and look-alikes.
    Run: ``python -m pytest -m slow tests/reliability/test_fuzz.py -s``."""
    _long(RANDOM_TEXT, check_expression, request)


@pytest.mark.slow
def test_long_random_bytes(request):
    """10 000 random byte strings as metric files.
    Run: ``python -m pytest -m slow tests/reliability/test_fuzz.py -s``."""
    _long(st.binary(max_size=2000), check_document, request)


@pytest.mark.slow
def test_long_metric_files(request):
    """10 000 random, mostly-valid metric files with mutations.
    Run: ``python -m pytest -m slow tests/reliability/test_fuzz.py -s``."""
    _long(metric_documents(), lambda text: check_document(text, full_kernel=True), request)
