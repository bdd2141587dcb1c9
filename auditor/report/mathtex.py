"""The line element and the ``[define]`` entries typeset as mathematics.

SymPy writes LaTeX (:func:`sympy.latex`) of the metric in the user's symbols,
``[define]`` names kept (``Metric.g_display``); matplotlib's *mathtext* (a
subset of TeX, no TeX installation needed) draws it to SVG paths, which the PDF
embeds as vector graphics. Between the two:

* sums print their positive terms first (``1 − 2M/r``, not ``−2M/r + 1``);
* names of several letters print upright (``\\mathrm{envelope}``), so they do
  not read as products of one-letter symbols;
* the line element ds² = Σ_{a≤b} (2 − δ_ab) g_ab dx^a dx^b is split into its
  terms, and terms are packed into lines no wider than the text column
  (measured with the same font); a term too wide on its own is split at the
  top-level sum of its coefficient; what is still too wide is drawn at a
  smaller size, down to :data:`MIN_SIZE_PT`;
* constructs mathtext rejects are rewritten (``\\operatorname`` → ``\\mathrm``,
  ``\\left``/``\\right`` dropped, ``\\text`` → ``\\mathrm``); if it still fails
  the caller gets ``None`` and prints the expression as text.
"""

from __future__ import annotations

import base64
import io
import re
from dataclasses import dataclass

import sympy as sp
from sympy.printing.latex import LatexPrinter

__all__ = ["Equation", "typeset_line_element", "typeset_definition", "to_mathtext",
           "FONT_SIZE_PT", "MIN_SIZE_PT", "COLUMN_PT"]

#: Size of displayed equations, points.
FONT_SIZE_PT = 11.0
#: Smallest size an over-long equation line is shrunk to, points.
MIN_SIZE_PT = 7.5
#: Width available to an equation: the text column of templates/report.css
#: (A4, 170 mm) less a small indent, in points (1 mm = 72/25.4 pt).
COLUMN_PT = 160.0 * 72.0 / 25.4
_MATH_FAMILY = "cm"


@dataclass(frozen=True)
class Equation:
    """A typeset equation: SVG data URI, its text form, and its size in points."""

    uri: str | None
    text: str
    width_pt: float = 0.0
    height_pt: float = 0.0


class _Printer(LatexPrinter):
    """LaTeX printer that puts the positive terms of a sum first."""

    def _print_Add(self, expr, order=None):
        terms = list(self._as_ordered_terms(expr, order=order))
        pos = [t for t in terms if not t.could_extract_minus_sign()]
        neg = [t for t in terms if t.could_extract_minus_sign()]
        return super()._print_Add(sp.Add(*(pos + neg), evaluate=False), order="none")


_RUN = re.compile(r"(?<![\\A-Za-z])([A-Za-z]{2,})")


def _symbol_names(symbols) -> dict:
    """LaTeX of each user symbol, runs of letters set upright."""
    names = {}
    for s in symbols:
        tex = sp.latex(s)
        names[s] = _RUN.sub(r"\\,\\mathrm{\1}\\,", tex)
    return names


def _printer(metric) -> _Printer:
    return _Printer({"symbol_names": _symbol_names(metric.user_symbols.values()),
                     "mul_symbol": None})


def _display_fractions(tex: str) -> str:
    """``\\frac`` → ``\\dfrac`` where TeX would set a displayed fraction.

    Only fractions outside any super/subscript and outside another fraction
    are enlarged; nested ones stay in text style, as in a TeX display.
    """
    out, stack, i = [], [], 0
    pending = (-1, 0)          # (depth of the enlarged \frac, its groups still to open)
    while i < len(tex):
        ch = tex[i]
        if tex.startswith(r"\frac", i) and all(kind == "plain" for kind in stack):
            out.append(r"\dfrac")
            pending = (len(stack), 2)
            i += 5
            continue
        if ch == "{":
            if pending[1] and len(stack) == pending[0]:
                stack.append("frac")
                pending = (pending[0], pending[1] - 1)
            elif i > 0 and tex[i - 1] in "^_":
                stack.append("script")
            else:
                stack.append("plain")
        elif ch == "}" and stack:
            stack.pop()
        out.append(ch)
        i += 1
    return "".join(out)


def to_mathtext(tex: str) -> str | None:
    """A form of ``tex`` that mathtext parses, or None."""
    from matplotlib.mathtext import MathTextParser
    parser = MathTextParser("path")
    candidates = [_display_fractions(tex), tex]
    simple = tex.replace(r"\operatorname", r"\mathrm").replace(r"\text", r"\mathrm")
    candidates.append(simple)
    bare = re.sub(r"\\(left|right)\.", "", simple)          # invisible delimiters
    candidates.append(re.sub(r"\\(left|right)\s*", "", bare))
    for cand in candidates:
        try:
            parser.parse(f"${cand}$", dpi=72)
            return cand
        except (ValueError, RuntimeError):
            continue
    return None


def _width(tex: str, size: float) -> float:
    from matplotlib.font_manager import FontProperties
    from matplotlib.mathtext import MathTextParser
    prop = FontProperties(size=size, math_fontfamily=_MATH_FAMILY)
    return MathTextParser("path").parse(f"${tex}$", dpi=72, prop=prop).width


def _leading_minus(expr) -> bool:
    """Print ``expr`` as −(…)? Yes for negative products and for sums whose
    constant term is negative (−(1 − 2M/r), not (2M/r − 1))."""
    if isinstance(expr, sp.Add):
        const = [t for t in expr.args if t.is_number]
        return bool(const) and bool(const[0].is_negative)
    return expr.could_extract_minus_sign()


def _tokens(expr, p: _Printer, tail: str = "") -> list[tuple[str, str]]:
    """(sign, body) tokens of ``expr · tail``; a sum yields one token per term."""
    sign = "-" if _leading_minus(expr) else "+"
    if sign == "-":
        expr = -expr        # a number distributes over the terms of a sum, nothing more
    if expr == 1 and tail:
        return [(sign, tail)]
    body = p.doprint(expr)
    if isinstance(expr, sp.Add) and tail:
        body = r"\left(" + body + r"\right)"
    return [(sign, body + (r"\," + tail if tail else ""))]


def _split(expr, p: _Printer, tail: str) -> list[tuple[str, str]]:
    """A coefficient that is a sum, one token per term: (t1 ± t2 ± … ) tail."""
    terms = list(p._as_ordered_terms(expr))
    terms = [t for t in terms if not t.could_extract_minus_sign()] + \
        [t for t in terms if t.could_extract_minus_sign()]
    out = []
    for k, t in enumerate(terms):
        s, body = _tokens(t, p)[0]
        if k == 0:
            body, s = "(" + ("-" if s == "-" else "") + body, "+"
        if k == len(terms) - 1:
            body = body + r")\," + tail
        out.append((s, body))
    return out


def _pack(prefix: str, tokens, size: float, width: float) -> list[str]:
    """Greedy packing of tokens into lines of at most ``width`` points."""
    indent = _width(prefix, size) if prefix else 0.0
    lines, current = [], ""
    for k, (sign, body) in enumerate(tokens):
        if not current:
            piece = ("-" if sign == "-" else "") + body if k == 0 else f"{sign} {body}"
        else:
            piece = f" {sign} {body}"
        room = width - indent
        if current and _width(current + piece, size) > room:
            lines.append(current)
            current = f"{{}}{sign} {body}"
        else:
            current += piece
    if current:
        lines.append(current)
    return lines


def _render(prefix: str, lines: list[str], size: float) -> Equation | None:
    """SVG of ``prefix line0`` with the other lines aligned after the prefix."""
    import matplotlib
    from matplotlib.figure import Figure
    from matplotlib.font_manager import FontProperties
    from matplotlib.mathtext import MathTextParser

    parser = MathTextParser("path")
    prop = FontProperties(size=size, math_fontfamily=_MATH_FAMILY)
    texts = [(prefix + " " if prefix else "") + lines[0]] + lines[1:]
    dims = [parser.parse(f"${t}$", dpi=72, prop=prop) for t in texts]
    indent = _width(prefix + r"\;", size) if prefix else 0.0
    gap = 0.45 * size
    total_h = sum(d.height for d in dims) + gap * (len(dims) - 1)
    total_w = max(d.width + (indent if i else 0.0) for i, d in enumerate(dims))
    fig = Figure(figsize=((total_w + 4) / 72.0, (total_h + 4) / 72.0))
    y = total_h + 2
    for i, (t, d) in enumerate(zip(texts, dims)):
        y -= d.height - d.depth
        fig.text((2 + (indent if i else 0.0)) / (total_w + 4), y / (total_h + 4), f"${t}$",
                 fontproperties=prop, va="baseline", ha="left")
        y -= d.depth + gap
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "path", "svg.hashsalt": "auditor"}):
        fig.savefig(buf, format="svg", transparent=True)
    uri = "data:image/svg+xml;base64," + base64.b64encode(buf.getvalue()).decode("ascii")
    return Equation(uri=uri, text="", width_pt=total_w + 4, height_pt=total_h + 4)


def _typeset(prefix: str, tokens, text: str, width: float = COLUMN_PT) -> Equation:
    fixed = []
    for sign, body in tokens:
        m = to_mathtext(body)
        if m is None:
            return Equation(uri=None, text=text)
        fixed.append((sign, m))
    size = FONT_SIZE_PT
    while True:
        lines = _pack(prefix, fixed, size, width)
        widest = max(_width(l, size) for l in lines) + (_width(prefix, size) if prefix else 0)
        if widest <= width or size <= MIN_SIZE_PT:
            break
        size = max(MIN_SIZE_PT, size * 0.92)
    eq = _render(prefix, lines, size)
    return Equation(uri=eq.uri, text=text, width_pt=eq.width_pt, height_pt=eq.height_pt)


def typeset_line_element(metric, width: float = COLUMN_PT) -> Equation:
    """ds² = Σ_{a≤b} (2 − δ_ab) g_ab dx^a dx^b from ``metric.g_display``."""
    p = _printer(metric)
    names = _symbol_names([metric.user_symbols[c] for c in metric.coordinates])
    diffs = [r"\mathrm{d}" + names[metric.user_symbols[c]] for c in metric.coordinates]
    tokens = []
    g = metric.g_display
    for a in range(4):
        for b in range(a, 4):
            c = g[a, b] * (1 if a == b else 2)
            if c == 0:
                continue
            tail = f"{diffs[a]}^{{2}}" if a == b else rf"{diffs[a]}\,{diffs[b]}"
            term = _tokens(c, p, tail)
            if isinstance(c, sp.Add) and _width(term[0][1], FONT_SIZE_PT) > 0.8 * width:
                term = _split(c, p, tail)
            tokens.extend(term)
    text = metric.metric_text or str(g.tolist())
    return _typeset(r"\mathrm{d}s^{2} =", tokens, text, width)


def typeset_definition(metric, definition, width: float = COLUMN_PT) -> Equation:
    """``name = expression`` of one ``[define]`` entry, definitions kept as names."""
    p = _printer(metric)
    lhs = _symbol_names([metric.user_symbols[definition.name]])[metric.user_symbols[definition.name]]
    expr = definition.display
    if isinstance(expr, sp.Add):
        terms = list(p._as_ordered_terms(expr))
        terms = [t for t in terms if not t.could_extract_minus_sign()] + \
            [t for t in terms if t.could_extract_minus_sign()]
        tokens = [tok for t in terms for tok in _tokens(t, p)]
    else:
        tokens = _tokens(expr, p)
    return _typeset(lhs + " =", tokens, f"{definition.name} = {definition.text}", width)
