"""Estimated size of derivatives, known before they are built.

Differentiation multiplies the size of an expression. The product rule turns a
product of n factors into n products of n − 1 factors, and those into n² products
again: the second derivatives of a product of 200 short factors have ~10⁷ parts,
and the kernel generator (common subexpression elimination, ``sympy.cse``) then
spends time in proportion. A metric file of two thousand characters can ask for
hours of symbolic work, so the size of the derivatives is estimated first and a
metric whose derivatives would exceed :data:`MAX_DERIVATIVE_NODES` is refused
before the work starts (:func:`auditor.geometry.kernels.metric_derivative_exprs`).

Sizes are SymPy tree nodes with a shared part counted each time it occurs, the
unit of ``MAX_EXPANDED_NODES`` in :mod:`auditor.metric.loader`. The estimate of
the nodes D_c(e) of ∂e/∂x^c follows the rules SymPy differentiates with
(``Add``, ``Mul``, ``Pow`` and ``Function._eval_derivative``), where N(e) is the
size of e and only the parts that depend on x^c contribute:

* x^c itself: 1; a number, a parameter or another coordinate: 0 (no derivative);
* a sum: 1 + Σ D_c(a_i);
* a product: one copy of the product for each factor a_i, with a_i replaced by
  its derivative: 1 + Σ (N(e) − N(a_i) + D_c(a_i));
* a power b**p, differentiated as b**p·(∂p·log b + ∂b·p/b): with p constant
  N(e) + N(p) + D_c(b) + 1; with b constant N(e) + N(b) + D_c(p) + 2; otherwise
  N(e) + D_c(p) + D_c(b) + 2 N(b) + N(p) + 7;
* a function f(a_1, ...): 1 + Σ (N(∂f/∂a_i) + D_c(a_i) + 1), where the partial
  derivative ∂f/∂a_i (cos a for sin a, ...) is built, which is cheap: it does not
  differentiate a_i;
* where a single part depends on x^c, the outer sum "1 + Σ" of these rules
  is that one term: one node fewer.

SymPy then merges like terms and numbers, so the result is usually smaller than
the estimate (up to about half for the second derivatives of a product, whose
terms come in equal pairs), never much larger; the work of building it is in
proportion to the estimate. The estimate costs time linear in the number of
distinct parts of e (shared parts are visited once).
"""

from __future__ import annotations

from typing import Sequence

import sympy as sp
from sympy.core.function import ArgumentIndexError

__all__ = ["MAX_DERIVATIVE_NODES", "DerivativeSizes", "about"]

#: Largest estimated size of all first and second derivatives of g together (140
#: expressions: 40 first, 100 second derivatives), in tree nodes. Kerr in
#: Cartesian Kerr–Schild form is estimated at ~420 000 and compiles in under a
#: minute on a shared 2-core machine; the largest sample metric, the tanh-wall
#: bubble, at ~12 700. Differentiation cost 0.01–1 ms per node depending on the
#: shape of the expressions (long products and sums of hundreds of distinct
#: exponentials are the slow end), so a metric just under the limit compiles in
#: a minute to several minutes, once (the kernel is cached).
MAX_DERIVATIVE_NODES = 1_000_000


class DerivativeSizes:
    """Sizes of expressions and estimated sizes of their first derivatives with
    respect to ``coords``; results are memoised over calls, so that expressions
    sharing parts (g and its first derivatives) cost their distinct parts once."""

    def __init__(self, coords: Sequence[sp.Symbol]):
        self.coords = tuple(coords)
        self._index = {s: i for i, s in enumerate(self.coords)}
        # id(expr) -> (nodes, coordinate bit mask, derivative sizes, expr); the
        # expression is kept so that its id is not reused while the memo lives.
        self._memo: dict[int, tuple] = {}
        self._nodes: dict[int, tuple[int, sp.Basic]] = {}

    def nodes(self, expr: sp.Basic) -> int:
        """Tree nodes of ``expr``, a shared part counted each time it occurs."""
        memo = self._nodes
        stack = [(expr, False)]
        while stack:
            e, ready = stack.pop()
            if id(e) in memo:
                continue
            if ready or not e.args:
                memo[id(e)] = (1 + sum(memo[id(a)][0] for a in e.args), e)
            else:
                stack.append((e, True))
                stack.extend((a, False) for a in e.args if id(a) not in memo)
        return memo[id(expr)][0]

    def first(self, expr: sp.Basic) -> tuple[int, ...]:
        """Estimated tree nodes of ∂expr/∂x^c for each coordinate c (0 where
        ``expr`` does not depend on x^c)."""
        memo = self._memo
        stack = [(expr, False)]
        while stack:
            e, ready = stack.pop()
            if id(e) in memo:
                continue
            if not e.args:
                memo[id(e)] = self._atom(e)
            elif ready:
                memo[id(e)] = self._combine(e, [memo[id(a)] for a in e.args])
            else:
                stack.append((e, True))
                stack.extend((a, False) for a in e.args if id(a) not in memo)
        return memo[id(expr)][2]

    def _atom(self, e):
        i = self._index.get(e)
        if i is None:
            return (1, 0, (0,) * len(self.coords), e)
        return (1, 1 << i, tuple(int(c == i) for c in range(len(self.coords))), e)

    def _combine(self, e, parts):
        n = 1 + sum(p[0] for p in parts)
        mask = 0
        for p in parts:
            mask |= p[1]
        sizes = []
        for c in range(len(self.coords)):
            bit = 1 << c
            if not mask & bit:
                sizes.append(0)
                continue
            if e.is_Add:
                terms = [p[2][c] for p in parts if p[1] & bit]
            elif e.is_Mul:
                terms = [n - p[0] + p[2][c] for p in parts if p[1] & bit]
            elif e.is_Pow:
                (nb, mb, db, _), (np_, mp, dp, _) = parts
                if not mp & bit:
                    terms = [n + np_ + db[c] + 1]
                elif not mb & bit:
                    terms = [n + nb + dp[c] + 2]
                else:
                    terms = [n + dp[c] + db[c] + 2 * nb + np_ + 7]
            else:
                terms = [self._partial(e, i, n) + p[2][c] + 1
                         for i, p in enumerate(parts, start=1) if p[1] & bit]
            sizes.append(terms[0] if len(terms) == 1 else 1 + sum(terms))
        return (n, mask, tuple(sizes), e)

    def _partial(self, e, i, n):
        """Nodes of ∂f/∂a_i for the function node ``e`` = f(a_1, ...)."""
        try:
            return self.nodes(e.fdiff(i))
        except ArgumentIndexError:      # no closed form: SymPy keeps a Derivative
            return n + 2


def about(n: int, limit: int) -> str:
    """``n`` to two significant digits (it is an estimate), or in full when the
    rounded figure would not show that it exceeds ``limit``."""
    rounded = int(float(f"{n:.2g}"))
    return str(rounded if rounded > limit else n)
