"""Symbolic derivatives of g_ab compiled to vectorised numeric kernels.

The metric is differentiated exactly, once: the 10 independent components
g_ab (a <= b), their 40 first derivatives ∂_c g_ab and their 100 second
derivatives ∂_c ∂_d g_ab (c <= d). Nothing is simplified. Common
subexpressions of all 150 expressions are shared (``sympy.cse``) and printed
as one NumPy function that fills a preallocated (150, N) array. Parameters are
kernel arguments, so a parameter sweep compiles once. The size of the
derivatives is estimated before they are built (:mod:`.size`), and a metric
whose derivatives would be too large to build in reasonable time is refused.

Safety: the expressions reaching the printer contain only the internal symbols
``_c0.._c3`` and ``_p0..`` built by :mod:`auditor.metric.loader` and functions
from the whitelist of :mod:`auditor.metric.expr`; no user text or user name
reaches the generated source. :func:`_check_source` verifies this before the
source is compiled.

Layout of the raw output (see DEVELOPERS.md, "Array layout"): row
``GIDX[a, b]`` holds g_ab, ``DIDX[c, a, b]`` holds ∂_c g_ab, ``D2IDX[c, d, a, b]``
holds ∂_c ∂_d g_ab.
"""

from __future__ import annotations

from typing import Sequence

import sympy as sp
from sympy.printing.numpy import NumPyPrinter

from ..errors import MetricFileError
from .compiled import MetricKernel, ScalarKernel, _check_source, _compile
from .layout import D2IDX, DIDX, GIDX, N_RAW, PAIRS as _PAIRS
from .size import MAX_DERIVATIVE_NODES, DerivativeSizes, about

__all__ = ["MetricKernel", "ScalarKernel", "compile_metric", "compile_scalars",
           "GIDX", "DIDX", "D2IDX", "N_RAW", "smooth_rewrite"]


class StableTanh(sp.Function):
    """tanh whose derivative is sech² (SymPy's own is 1 − tanh², which loses all
    relative precision once |a| > ~5 and is exactly 0 beyond |a| ~ 19: the
    exponential tails of a tanh wall would vanish from the curvature)."""

    nargs = 1
    is_real = True

    def fdiff(self, argindex=1):
        return StableSech(self.args[0]) ** 2


class StableSech(sp.Function):
    """sech with derivative −sech·tanh, printed as 1/cosh (0 when cosh overflows)."""

    nargs = 1
    is_real = True

    def fdiff(self, argindex=1):
        return -StableSech(self.args[0]) * StableTanh(self.args[0])


class _KernelPrinter(NumPyPrinter):
    def _print_Integer(self, expr):
        # Beyond 2**53 a Python int would make NumPy build object arrays; a float
        # literal is what the double-precision kernel computes with anyway.
        if abs(int(expr)) > 2**53:
            return repr(float(expr))
        return super()._print_Integer(expr)

    def _print_Pow(self, expr, rational=False):
        # NumPy takes fast paths for the exponents 2, -1 and 1/2; other small
        # integer powers of a symbol (after CSE, most bases) would go through
        # pow() element by element, several times slower than the products
        # (each within a few ulps, as pow is).
        base, exp = expr.as_base_exp()
        if base.is_Symbol and exp.is_Integer and (3 <= abs(int(exp)) <= 6 or exp == -2):
            product = "*".join([self._print(base)] * abs(int(exp)))
            return f"({product})" if exp > 0 else f"(1/({product}))"
        return super()._print_Pow(expr, rational=rational)

    def _print_StableTanh(self, expr):
        return f"numpy.tanh({self._print(expr.args[0])})"

    def _print_StableSech(self, expr):
        return f"(1/numpy.cosh({self._print(expr.args[0])}))"


def smooth_rewrite(expr: sp.Expr) -> sp.Expr:
    """Rewrite functions so that NumPy evaluates them and their derivatives stably.

    tanh and sech become :class:`StableTanh` and :class:`StableSech`, whose
    derivatives stay products of bounded functions. SymPy prints coth, csch, ...
    through exponentials, which overflow to inf/inf for large arguments; 1/tanh
    and 1/sinh do not.
    """
    return expr.replace(sp.tanh, StableTanh).replace(sp.sech, StableSech) \
               .replace(sp.csch, lambda a: 1 / sp.sinh(a)) \
               .replace(sp.coth, lambda a: 1 / sp.tanh(a)) \
               .replace(sp.sec, lambda a: 1 / sp.cos(a)) \
               .replace(sp.csc, lambda a: 1 / sp.sin(a)) \
               .replace(sp.cot, lambda a: 1 / sp.tan(a))


def _generate(exprs: Sequence[sp.Expr], coord_syms, param_syms) -> str:
    allowed = set(coord_syms) | set(param_syms)
    for e in exprs:
        stray = e.free_symbols - allowed
        if stray:
            raise RuntimeError(f"unexpected symbols in kernel: {sorted(map(str, stray))}")
    temps = sp.numbered_symbols("_t")
    # No "basic" optimisations: they rewrite every expression (factor_terms) and
    # took most of the compile time (6x on the tanh-wall bubble, 20x on Kerr–Schild)
    # for kernels that evaluate no faster.
    replacements, reduced = sp.cse(list(exprs), symbols=temps)
    printer = _KernelPrinter({"fully_qualified_modules": True,
                              "allow_unknown_functions": False, "inline": True})
    lines = ["def kernel(x, p, out):"]
    for i, s in enumerate(coord_syms):
        lines.append(f"    {s.name} = x[{i}]")
    for i, s in enumerate(param_syms):
        lines.append(f"    {s.name} = p[{i}]")
    lines.append("    with numpy.errstate(all='ignore'):")
    for sym, val in replacements:
        lines.append(f"        {sym.name} = {printer.doprint(val)}")
    for k, val in enumerate(reduced):
        lines.append(f"        out[{k}] = {printer.doprint(val)}")
    lines.append("    return out")
    src = "\n".join(lines) + "\n"
    _check_source(src)
    return src


def compile_scalars(exprs: Sequence[sp.Expr], coord_syms, param_syms, *,
                    kind: str = "scalars") -> ScalarKernel:
    """Compile expressions (internal symbols only) to a vectorised kernel (cached)."""
    from .cache import cached_source
    exprs = list(exprs)
    src = cached_source(f"{kind}:{len(param_syms)}", exprs,
                        lambda: _generate([smooth_rewrite(e) for e in exprs], coord_syms,
                                          param_syms), _check_source)
    return ScalarKernel(src, len(exprs), _compile(src))


def metric_derivative_exprs(g: sp.MatrixBase, coord_syms, *,
                            limit: int = MAX_DERIVATIVE_NODES,
                            coordinates: Sequence[str] | None = None,
                            path: str | None = None) -> list[sp.Expr]:
    """The 150 raw expressions: g_ab, ∂_c g_ab, ∂_c ∂_d g_ab (layout above).

    The size of the derivatives is estimated before they are built
    (:mod:`.size`): that of the first derivatives from g, then that of the
    second derivatives from the first. If the first, or the first and second
    together, would exceed ``limit`` tree nodes, :class:`MetricFileError`
    (``path``, key ``metric``) names the component of g with the largest share,
    by the ``coordinates`` names (default: the internal symbols).
    """
    g = g.applyfunc(smooth_rewrite)
    comps = [g[a, b] for a, b in _PAIRS]
    sizes = DerivativeSizes(coord_syms)
    names = [s.name for s in coord_syms] if coordinates is None else list(coordinates)
    share = [sum(sizes.first(gab)) for gab in comps]
    _bound(share, limit, "first derivatives", names, path)
    first = [[sp.diff(gab, coord_syms[c]) for gab in comps] for c in range(4)]
    for k in range(10):
        share[k] += sum(sizes.first(first[c][k])[d] for c, d in _PAIRS)
    _bound(share, limit, "first and second derivatives", names, path)
    exprs = list(comps)
    for c in range(4):
        exprs.extend(first[c])
    for c, d in _PAIRS:
        exprs.extend(sp.diff(dg, coord_syms[d]) for dg in first[c])
    return exprs


def _bound(share: list[int], limit: int, what: str, names, path) -> None:
    """Refuse derivatives whose estimated size (``share``: per component, in
    the order of ``_PAIRS``) exceeds ``limit`` in total."""
    total = sum(share)
    if total <= limit:
        return
    k = max(range(len(share)), key=share.__getitem__)
    a, b = _PAIRS[k]
    part = "all" if share[k] == total else f"~{about(share[k], 0)} of them"
    raise MetricFileError(
        f"the {what} of g would have ~{about(total, limit)} operations, more than the "
        f"{limit} accepted ({part} from the component \"{names[a]} {names[b]}\"); "
        "write that component in a simpler form", path=path, key="metric")


def compile_metric(metric) -> MetricKernel:
    """Differentiate ``metric.g`` and compile the raw kernel (cached on disk).

    A cache hit skips differentiation and CSE entirely (see :mod:`.cache`).
    A metric whose derivatives would be too large to build is refused first
    (:func:`metric_derivative_exprs`).
    """
    from .cache import cached_source

    def build():
        exprs = metric_derivative_exprs(metric.g, metric.coord_symbols,
                                        coordinates=metric.coordinates, path=metric.path)
        return _generate(exprs, metric.coord_symbols, metric.param_symbols)

    src = cached_source(f"metric:{len(metric.param_symbols)}", [metric.g], build, _check_source)
    return MetricKernel(src, N_RAW, _compile(src))
