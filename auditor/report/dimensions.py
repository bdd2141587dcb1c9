"""Physical dimensions of coordinates and parameters, read off the metric.

In geometric units (G = c = 1) every quantity has the dimension L^k of a power
of length. The metric fixes k for the coordinates and parameters: every term
g_ab dx^a dx^b of ds² has dimension L²; the terms of a sum share one dimension;
the argument of exp, log, a trigonometric or hyperbolic function, and a
non-constant exponent, are dimensionless; atan2(y, x) needs dim y = dim x
(dimensional analysis; common practice). These rules give linear equations in
the unknown exponents, solved exactly (:meth:`sympy.Matrix.rref`). An exponent
the equations leave free, or a system without solution, is reported as
unknown (None) and the report then prints the value without a unit.

With L = ``length_m`` metres, a parameter of dimension L^k has the SI value
value · L^k in m^k (``auditor.units.length_m`` for k = 1).
"""

from __future__ import annotations

import sympy as sp

__all__ = ["infer_dimensions", "unit_label"]

_SUPER = str.maketrans("0123456789-/", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻ᐟ")


class _Unknown(Exception):
    """An expression outside the rules (the dimensions stay unknown)."""


class _Solver:
    def __init__(self, metric):
        self.metric = metric
        self.defs = {d.name: d for d in metric.definitions}
        self.free = [metric.user_symbols[c] for c in metric.coordinates] + \
            [metric.user_symbols[p] for p in metric.parameters]
        self.index = {s: i for i, s in enumerate(self.free)}
        self.rows: list[tuple[list, sp.Rational]] = []   # coefficients . k = constant
        self.memo: dict = {}

    def form(self, coeffs=None, const=0):
        v = [sp.Integer(0)] * len(self.free)
        for i, c in (coeffs or {}).items():
            v[i] = sp.Rational(c)
        return v, sp.Rational(const)

    def equal(self, a, b):
        (va, ca), (vb, cb) = a, b
        row = [x - y for x, y in zip(va, vb)]
        if any(row) or cb != ca:
            self.rows.append((row, cb - ca))

    def dim(self, e):
        if e.is_number:
            return self.form()
        if e.is_Symbol:
            if e in self.index:
                return self.form({self.index[e]: 1})
            name = next((n for n, s in self.metric.user_symbols.items() if s == e), None)
            if name in self.defs:
                if name not in self.memo:
                    self.memo[name] = self.dim(self.defs[name].display)
                return self.memo[name]
            raise _Unknown(str(e))
        if e.is_Add:
            first = self.dim(e.args[0])
            for t in e.args[1:]:
                self.equal(first, self.dim(t))
            return first
        if e.is_Mul:
            v, c = self.form()
            for f in e.args:
                fv, fc = self.dim(f)
                v = [x + y for x, y in zip(v, fv)]
                c = c + fc
            return v, c
        if e.is_Pow:
            base, expo = e.args
            if expo.is_Rational:
                bv, bc = self.dim(base)
                return [x * expo for x in bv], bc * expo
            self.equal(self.dim(expo), self.form())
            self.equal(self.dim(base), self.form())
            return self.form()
        if isinstance(e, sp.Abs):
            return self.dim(e.args[0])
        if isinstance(e, sp.atan2):
            self.equal(self.dim(e.args[0]), self.dim(e.args[1]))
            return self.form()
        if isinstance(e, sp.Function):
            for a in e.args:
                self.equal(self.dim(a), self.form())
            return self.form()
        raise _Unknown(type(e).__name__)

    def solve(self) -> dict:
        g = self.metric.g_display
        two = self.form(const=2)
        for a in range(4):
            for b in range(a, 4):
                if g[a, b] == 0:
                    continue
                v, c = self.dim(g[a, b])
                v = list(v)
                v[a] += 1
                v[b] += 1
                self.equal((v, c), two)
        n = len(self.free)
        if not self.rows:
            return {s: None for s in self.free}
        aug = sp.Matrix([r + [c] for r, c in self.rows])
        rref, pivots = aug.rref()
        if n in pivots:                       # 0 = 1: inconsistent
            return {s: None for s in self.free}
        out = {s: None for s in self.free}
        for row, col in enumerate(pivots):
            others = [j for j in range(n) if j != col and rref[row, j] != 0]
            if not others:
                out[self.free[col]] = rref[row, n]
        return out


def infer_dimensions(metric) -> dict[str, sp.Rational | None]:
    """Exponent k of L^k for each coordinate and parameter name (None: unknown)."""
    solver = _Solver(metric)
    try:
        found = solver.solve()
    except _Unknown:
        found = {s: None for s in solver.free}
    names = list(metric.coordinates) + list(metric.parameters)
    return {n: found[s] for n, s in zip(names, solver.free)}


def unit_label(k, base: str = "L") -> str:
    """``L``, ``L⁻²``, ``m^{1/2}``-style label of L^k; '' for k = 0; None → '?'."""
    if k is None:
        return "?"
    k = sp.Rational(k)
    if k == 0:
        return ""
    if k == 1:
        return base
    return base + str(k).translate(_SUPER)
