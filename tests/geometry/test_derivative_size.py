"""The bound on the size of the derivatives of g (auditor/geometry/size.py,
``metric_derivative_exprs``): the estimate follows the trees SymPy builds, a
metric just over the limit is refused before its derivatives are built, one
just under is differentiated, and the sample metrics stay far below it.

Outside reference: the derivative trees SymPy itself builds (``sympy.diff``),
measured by ``sympy.preorder_traversal``, which visits a shared part each time
it occurs, as the estimate counts. Shapes of growth: the product rule (a product
of n factors has n first-derivative terms and n² second-derivative terms) and
the chain rule, from memory.
"""

from __future__ import annotations

from itertools import combinations_with_replacement

import pytest
import sympy as sp

from auditor.errors import MetricFileError
from auditor.geometry import kernels
from auditor.geometry.kernels import compile_metric, metric_derivative_exprs, smooth_rewrite
from auditor.geometry.size import MAX_DERIVATIVE_NODES, DerivativeSizes
from auditor.metric import load_metric, loads_metric
from auditor.metric.expr import parse_expression

from tests.conftest import SAMPLES_DIR

PAIRS = list(combinations_with_replacement(range(4), 2))


def tree_nodes(expr) -> int:
    return sum(1 for _ in sp.preorder_traversal(expr))


def estimated(metric) -> int:
    """The quantity the limit bounds: estimated nodes of every first and second
    derivative of every component g_ab (a <= b; ∂_c∂_d with c <= d)."""
    g = metric.g.applyfunc(smooth_rewrite)
    coords = metric.coord_symbols
    sizes = DerivativeSizes(coords)
    total = 0
    for a, b in PAIRS:
        total += sum(sizes.first(g[a, b]))
        for c in range(4):
            first = sp.diff(g[a, b], coords[c])
            total += sum(sizes.first(first)[d] for d in range(c, 4))
    return total


def built(metric) -> int:
    """Nodes of the 140 derivative expressions as built (zeros not counted)."""
    exprs = metric_derivative_exprs(metric.g, metric.coord_symbols)
    return sum(tree_nodes(e) for e in exprs[10:] if e != 0)


def product(n: int) -> str:
    return "*".join(f"(1 + x/{k + 2})" for k in range(n))


def product_file(n: int, component: str = "t t") -> str:
    """A metric whose component ``component`` is minus a product of n linear
    factors in x; the others are those of Minkowski space."""
    comps = {"t t": "-1", "x x": "1", "y y": "1", "z z": "1"}
    comps[component] = f"-({product(n)})" if component == "t t" else product(n)
    body = "".join(f'"{k}" = "{v}"\n' for k, v in comps.items())
    return (f'name = "Product of {n}"\ncoordinates = ["t", "x", "y", "z"]\n'
            f"[metric.components]\n{body}")


SAMPLES = sorted(SAMPLES_DIR.glob("*.toml"))

#: Expressions in the safe language covering every rule of the estimate: sums,
#: products, constant and variable powers, one- and two-argument functions,
#: nested functions, and the tanh/sech rewrites.
SHAPES = ["x*y", "sin(x*y)", "x**y", "sqrt(1 + x**2 + y**2)", "exp(-x**2/a)*cos(t - x)",
          "atan2(y, x)", "log(x**2 + y**2)/(1 + z**2)", "tanh(a*(sqrt(x**2 + y**2 + z**2) - 1))",
          "asin(x/(1 + y**2))", "(1 + x)**(t*y)", "1/(1 - 2*a/sqrt(x**2 + y**2 + z**2))",
          product(10), "*".join(f"(x + y/{k} + sin({k}*z))" for k in range(1, 6)),
          "sin(sin(sin(sin(x*y))))", "(x**2 + y**2)**(3/2)*exp(-t)", "sech(x - a*t)**2",
          "coth(x*y)", "cot(x)*csc(y)"]


@pytest.mark.parametrize("text", SHAPES)
def test_the_estimate_of_each_derivative_follows_the_tree_sympy_builds(text):
    """Each first and second derivative, estimated from the expression (first)
    or from its built first derivative (second), against the tree SymPy builds.
    The estimate may exceed the tree (SymPy merges like terms and numbers; the
    second derivative of a product has its terms in equal pairs, so about half),
    but never falls far below it: a bound from an under-estimate would leak."""
    coords = sp.symbols("t x y z", real=True)
    names = dict(zip("txyz", coords)) | {"a": sp.Symbol("a", real=True)}
    expr = smooth_rewrite(parse_expression(text, names))
    sizes = DerivativeSizes(coords)
    checked = 0
    for c in range(4):
        first = sp.diff(expr, coords[c])
        est = sizes.first(expr)[c]
        assert (est == 0) == (first == 0), (text, c)
        if first == 0:
            continue
        assert tree_nodes(first) <= 1.4 * est and est <= 3.5 * tree_nodes(first), (text, c)
        for d in range(c, 4):
            second = sp.diff(first, coords[d])
            est2 = sizes.first(first)[d]
            if second == 0:
                continue
            assert tree_nodes(second) <= 1.4 * est2 and est2 <= 3.5 * tree_nodes(second), \
                (text, c, d)
            checked += 1
    assert checked > 0


@pytest.mark.parametrize("path", SAMPLES, ids=lambda p: p.stem)
def test_the_sample_metrics_are_estimated_faithfully_and_far_below_the_limit(path):
    metric = load_metric(path)
    est, real = estimated(metric), built(metric)
    assert real <= 1.1 * est and est <= 3 * real + 1, (est, real)
    # A wide margin: ten times the largest sample is still accepted.
    assert 10 * est <= MAX_DERIVATIVE_NODES, est


#: The boundary tests run at this limit (passed explicitly) rather than the default,
#: so that building the "just under" file stays quick; the mechanism is the same.
LIMIT = 200_000


def _boundary():
    """The largest n whose product file is estimated within LIMIT (the
    estimate grows with n: bisection)."""
    lo, hi = 1, 64          # within at 1 factor, beyond at 64
    assert estimated(loads_metric(product_file(hi))) > LIMIT
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if estimated(loads_metric(product_file(mid))) <= LIMIT:
            lo = mid
        else:
            hi = mid
    return lo


def _counting_diff(monkeypatch):
    calls = []
    real = sp.diff

    def diff(*args, **kwargs):
        calls.append(args)
        return real(*args, **kwargs)

    monkeypatch.setattr(kernels.sp, "diff", diff)
    return calls


def test_a_file_just_over_the_limit_is_refused_and_one_just_under_passes(monkeypatch):
    n = _boundary()
    assert 20 < n < 60      # second derivatives grow as n³: the limit sits at a few dozen

    over = loads_metric(product_file(n + 1, "x x"), path="over.toml")
    calls = _counting_diff(monkeypatch)
    with pytest.raises(MetricFileError) as err:
        metric_derivative_exprs(over.g, over.coord_symbols, coordinates=over.coordinates,
                                path=over.path, limit=LIMIT)
    message = str(err.value)
    assert message.startswith("over.toml: [metric] the first and second derivatives of g "
                              "would have ~"), message
    assert f"more than the {LIMIT} accepted" in message
    assert '(all from the component "x x")' in message
    assert "\n" not in message
    # Refused after the 40 first derivatives, before any second derivative.
    assert len(calls) == 40

    under = loads_metric(product_file(n, "x x"), path="under.toml")
    exprs = metric_derivative_exprs(under.g, under.coord_symbols,
                                    coordinates=under.coordinates, path=under.path, limit=LIMIT)
    assert len(exprs) == 150
    assert sum(tree_nodes(e) for e in exprs[10:] if e != 0) <= LIMIT


def test_first_derivatives_too_large_are_refused_before_any_is_built(monkeypatch):
    # About 5 n² first-derivative nodes: 600 factors exceed the default limit.
    metric = loads_metric(product_file(600), path="long.toml")
    calls = _counting_diff(monkeypatch)
    with pytest.raises(MetricFileError) as err:
        metric_derivative_exprs(metric.g, metric.coord_symbols,
                                coordinates=metric.coordinates, path=metric.path)
    assert str(err.value).startswith("long.toml: [metric] the first derivatives of g would "
                                     "have ~")
    assert '(all from the component "t t")' in str(err.value)
    assert calls == []


def test_the_message_names_the_component_with_the_largest_share():
    # Two heavy components: the larger product in "y z" of a chart named (T, r, p, q).
    text = ('name = "Two products"\ncoordinates = ["T", "r", "p", "q"]\n[metric.components]\n'
            '"T T" = "-1"\n"r r" = "1"\n"p p" = "1"\n"q q" = "1"\n'
            f'"T r" = "{product(20).replace("x", "r")}"\n'
            f'"p q" = "{product(40).replace("x", "r")}"\n')
    metric = loads_metric(text, path="two.toml")
    with pytest.raises(MetricFileError) as err:
        metric_derivative_exprs(metric.g, metric.coord_symbols,
                                coordinates=metric.coordinates, path=metric.path, limit=LIMIT)
    message = str(err.value)
    assert 'of them from the component "p q")' in message, message
    share = int(message.split("(~")[1].split(" ")[0])
    total = int(message.split("would have ~")[1].split(" ")[0])
    assert 0.5 * total < share < total


def test_a_refused_metric_leaves_no_kernel_in_the_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("AUDITOR_CACHE_DIR", str(tmp_path))
    monkeypatch.delenv("AUDITOR_NO_CACHE", raising=False)
    metric = loads_metric(product_file(100), path="big.toml")
    with pytest.raises(MetricFileError, match=r"^big\.toml: \[metric\] the first and second"):
        compile_metric(metric)
    assert list(tmp_path.glob("*.py")) == []
