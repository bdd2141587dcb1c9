"""A deliberately naive reference for the curvature engine.

Plain SymPy loops over index values, written straight from the MTW formulas
(Misner, Thorne & Wheeler 1973, chapters 8 and 14 — chapter numbers from
memory; the formulas are those of published-checks.md, "Conventions"):

    Γ^a_bc  = ½ g^ad (∂_b g_dc + ∂_c g_db − ∂_d g_bc)
    R^a_bcd = ∂_c Γ^a_bd − ∂_d Γ^a_bc + Γ^a_ce Γ^e_bd − Γ^a_de Γ^e_bc
    R_bd    = R^a_bad,  R = g^bd R_bd,  G_ab = R_ab − ½ R g_ab
    K       = R_abcd R^abcd = R^ab_cd R^cd_ab

It shares no code with :mod:`auditor.geometry`: the route is different
(mixed-index Riemann from derivatives of Γ, where the package assembles
R_abcd from second derivatives of g and products of Γ), nothing is compiled,
and evaluation is done at 30 significant digits with mpmath so the reference
carries no round-off at double precision. Only small metrics are used with it.
"""

from __future__ import annotations

from dataclasses import dataclass

import mpmath
import numpy as np
import sympy as sp

__all__ = ["NaiveCurvature", "naive_curvature", "Evaluator", "evaluate",
           "diffgeom_curvature"]

DIGITS = 30


@dataclass
class NaiveCurvature:
    """Symbolic tensors as nested lists (index order as in the formulas)."""

    coords: tuple
    g: sp.Matrix
    ginv: sp.Matrix
    christoffel: list        # Γ[a][b][c] = Γ^a_bc
    riemann_up: list         # R[a][b][c][d] = R^a_bcd
    ricci: list              # R[b][d]
    ricci_scalar: sp.Expr
    einstein: list           # G[a][b]
    kretschmann: sp.Expr | None

    @property
    def riemann(self) -> list:
        """R_abcd = g_ae R^e_bcd (built on demand: large for non-diagonal metrics)."""
        n = 4
        return [[[[sum(self.g[a, e] * self.riemann_up[e][b][c][d] for e in range(n)
                       if self.g[a, e] != 0)
                   for d in range(n)] for c in range(n)] for b in range(n)] for a in range(n)]


def naive_curvature(g: sp.Matrix, coords, *, kretschmann: bool = True) -> NaiveCurvature:
    """Every tensor above by explicit loops (no simplification beyond cancel in g^-1)."""
    n = 4
    g = sp.Matrix(g)
    ginv = g.inv().applyfunc(sp.cancel)
    x = list(coords)
    gam = [[[sp.S.Zero] * n for _ in range(n)] for _ in range(n)]
    for a in range(n):
        for b in range(n):
            for c in range(b, n):
                s = sp.S.Zero
                for d in range(n):
                    if ginv[a, d] == 0:
                        continue
                    s += ginv[a, d] * (sp.diff(g[d, c], x[b]) + sp.diff(g[d, b], x[c])
                                       - sp.diff(g[b, c], x[d]))
                gam[a][b][c] = s / 2
                gam[a][c][b] = gam[a][b][c]
    dgam = {}   # ∂_c Γ^a_bd, each derivative taken once

    def d_gam(a, b, d, c):
        key = (a, min(b, d), max(b, d), c)
        if key not in dgam:
            dgam[key] = sp.diff(gam[a][b][d], x[c])
        return dgam[key]

    rup = [[[[sp.S.Zero] * n for _ in range(n)] for _ in range(n)] for _ in range(n)]
    for a in range(n):
        for b in range(n):
            for c in range(n):
                for d in range(c + 1, n):      # R^a_bdc = −R^a_bcd; R^a_bcc = 0
                    s = d_gam(a, b, d, c) - d_gam(a, b, c, d)
                    for e in range(n):
                        s += gam[a][c][e] * gam[e][b][d] - gam[a][d][e] * gam[e][b][c]
                    rup[a][b][c][d] = s
                    rup[a][b][d][c] = -s
    ricci = [[sum(rup[a][b][a][d] for a in range(n)) for d in range(n)] for b in range(n)]
    rs = sum(ginv[b, d] * ricci[b][d] for b in range(n) for d in range(n))
    ein = [[ricci[a][b] - rs * g[a, b] / 2 for b in range(n)] for a in range(n)]
    kr = None
    if kretschmann:
        # K = R^ab_cd R^cd_ab with R^ab_cd = g^be R^a_ecd (the same sum as
        # R_abcd R^abcd, with fewer products)
        mixed = [[[[sum(ginv[b, e] * rup[a][e][c][d] for e in range(n) if ginv[b, e] != 0)
                    for d in range(n)] for c in range(n)] for b in range(n)] for a in range(n)]
        kr = sum(mixed[a][b][c][d] * mixed[c][d][a][b]
                 for a in range(n) for b in range(n) for c in range(n) for d in range(n))
    return NaiveCurvature(tuple(coords), g, ginv, gam, rup, ricci, rs, ein, kr)


class Evaluator:
    """Numeric evaluation of named trees of SymPy expressions, 30 digits.

    ``trees`` maps a name to a nested list of expressions (or one expression).
    ``symbols`` are the coordinates and parameters, in the order the values will
    be given. ``functions`` maps an undefined function application such as
    ``F(t, x, y, z)`` to its explicit expression: ``F`` and each of its
    derivatives in the trees become placeholders whose values are the matching
    derivatives of the explicit expression at the point (the chain rule applied
    by SymPy to the small explicit expression, not to the whole tensor).
    Everything is translated to mpmath once (one function for all trees); calls
    then cost little and return a dict of float arrays of the trees' shapes.
    """

    def __init__(self, trees, symbols, functions=None, cse=False):
        self.names, self.shapes, sizes, flat = [], [], [], []
        for name, tree in trees.items():
            f, shape = _flatten(tree)
            self.names.append(name)
            self.shapes.append(shape)
            sizes.append(len(f))
            flat.extend(f)
        self.bounds = np.cumsum([0] + sizes)
        self.symbols = list(symbols)
        holders, explicit = [], []
        if functions:
            flat = [_undo_subs(sp.sympify(e)) for e in flat]
            for applied, expr in functions.items():
                derivs = set()
                for e in flat:
                    derivs |= {d for d in e.atoms(sp.Derivative) if d.expr == applied}
                repl = {}
                for d in sorted(derivs, key=sp.default_sort_key):
                    h = sp.Symbol(f"_h{len(holders)}")
                    repl[d] = h
                    holders.append(h)
                    explicit.append(sp.diff(expr, *d.variable_count))
                flat = [e.xreplace(repl) for e in flat]   # derivatives first
                h = sp.Symbol(f"_h{len(holders)}")
                holders.append(h)
                explicit.append(expr)
                flat = [e.xreplace({applied: h}) for e in flat]
        self._explicit = sp.lambdify(self.symbols, explicit, modules="mpmath") \
            if explicit else None
        self._fn = sp.lambdify(self.symbols + holders, flat, modules="mpmath", cse=cse)

    def __call__(self, values) -> dict:
        with mpmath.workdps(DIGITS):
            args = [mpmath.mpf(repr(float(v))) for v in values]
            if self._explicit is not None:
                args = args + list(self._explicit(*args))
            vals = self._fn(*args)
            out = np.array([float(v) for v in vals], dtype=float)
        return {name: out[lo:hi].reshape(shape) for name, shape, lo, hi in
                zip(self.names, self.shapes, self.bounds[:-1], self.bounds[1:])}


def evaluate(expr_tree, symbols, values, functions=None) -> np.ndarray:
    """One-off evaluation of one tree with :class:`Evaluator`."""
    return Evaluator({"value": expr_tree}, symbols, functions)(values)["value"]


def _flatten(tree):
    if isinstance(tree, (list, tuple)):
        parts = [_flatten(t) for t in tree]
        flat = [e for p, _ in parts for e in p]
        return flat, (len(tree),) + parts[0][1]
    if isinstance(tree, sp.MatrixBase):
        return _flatten(tree.tolist())
    return [sp.sympify(tree)], ()


def diffgeom_curvature(g: sp.Matrix, coords):
    """Riemann R^a_bcd from ``sympy.diffgeom``, and Ricci R_bd contracted from it.

    SymPy's ``metric_to_Riemann_components`` returns
    R[ρ][σ][μ][ν] = ∂_μ Γ^ρ_νσ − ∂_ν Γ^ρ_μσ + Γ^ρ_μλ Γ^λ_νσ − Γ^ρ_νλ Γ^λ_μσ,
    i.e. R^ρ_σμν in the MTW convention (read from the SymPy source,
    sympy/diffgeom/diffgeom.py). ``metric_to_Ricci_components`` is the same
    contraction R_σν = R^ρ_σρν but recomputes the Riemann tensor, so it is done
    here from the one Riemann array to halve the cost. Results are in the plain
    symbols ``coords`` (diffgeom's base scalar fields are replaced).
    """
    from sympy.diffgeom import (CoordSystem, Manifold, Patch, TensorProduct,
                                metric_to_Riemann_components)
    manifold = Manifold("M", 4)
    patch = Patch("P", manifold)
    cs = CoordSystem("C", patch, list(coords))
    fields = cs.base_scalars()
    forms = cs.base_oneforms()
    to_fields = dict(zip(coords, fields))
    metric = sp.S.Zero
    for a in range(4):
        for b in range(4):
            gab = sp.sympify(g[a, b])
            if gab != 0:
                metric += gab.xreplace(to_fields) * TensorProduct(forms[a], forms[b])
    back = dict(zip(fields, coords))
    riem = metric_to_Riemann_components(metric)
    riem = [[[[_undo_subs(sp.sympify(riem[a, b, c, d]).xreplace(back)) for d in range(4)]
              for c in range(4)] for b in range(4)] for a in range(4)]
    ricci = [[sum(riem[a][b][a][d] for a in range(4)) for d in range(4)] for b in range(4)]
    return riem, ricci


def _undo_subs(e):
    """Turn the ``Subs(Derivative(F(.., _xi, ..), _xi), _xi, x)`` objects that
    ``sympy.diffgeom`` produces back into plain derivatives."""
    return e.doit() if e.has(sp.Subs) else e
