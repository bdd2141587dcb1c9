"""The safe arithmetic language of metric files and ``--at`` values.

User text is parsed with :func:`ast.parse` (which builds a syntax tree and runs
nothing) and the tree is walked against a whitelist; SymPy objects are built
directly from the accepted nodes. User text never reaches ``eval``, ``exec``,
``sympify``, ``parse_expr`` or ``lambdify``.

Accepted: numbers, declared names, ``pi``, ``+ - * / **``, unary ``+``/``-``,
parentheses and calls of the functions in :data:`FUNCTIONS`. Everything else
is an :class:`~auditor.errors.ExpressionError` that names the offending text
and its column.
"""

from __future__ import annotations

import ast
import difflib
import math
import re
from typing import Mapping

import sympy as sp

from ..errors import ExpressionError

__all__ = ["FUNCTIONS", "CONSTANTS", "MAX_LENGTH", "MAX_DEPTH", "MAX_EXPONENT", "MAX_LOG10",
           "MAX_DIGITS", "parse_expression", "is_valid_name", "suggest"]

#: Smooth functions offered by the language: name -> (SymPy function, arity).
#: Functions with kinks or jumps (abs, sign, min, max, floor, Heaviside) are not
#: offered: curvature needs a metric twice differentiable where it is audited.
FUNCTIONS: dict[str, tuple[object, int]] = {
    "sqrt": (sp.sqrt, 1), "exp": (sp.exp, 1), "log": (sp.log, 1),
    "sin": (sp.sin, 1), "cos": (sp.cos, 1), "tan": (sp.tan, 1),
    "cot": (sp.cot, 1), "sec": (sp.sec, 1), "csc": (sp.csc, 1),
    "asin": (sp.asin, 1), "acos": (sp.acos, 1), "atan": (sp.atan, 1),
    "atan2": (sp.atan2, 2),
    "sinh": (sp.sinh, 1), "cosh": (sp.cosh, 1), "tanh": (sp.tanh, 1),
    "coth": (sp.coth, 1), "sech": (sp.sech, 1), "csch": (sp.csch, 1),
    "asinh": (sp.asinh, 1), "acosh": (sp.acosh, 1), "atanh": (sp.atanh, 1),
}

#: Named constants of the language.
CONSTANTS: dict[str, sp.Expr] = {"pi": sp.pi}

#: Longest accepted expression, in characters (a metric is a page, not a book).
MAX_LENGTH = 20_000
#: Deepest accepted nesting of operations (keeps SymPy's recursion bounded).
MAX_DEPTH = 60
#: Largest accepted |exponent| when the exponent is a plain number: 10**400
#: already overflows a double, and exact SymPy powers of huge exponents would
#: exhaust time and memory.
MAX_EXPONENT = 256

#: Largest accepted size of a constant, as a power of ten: a double holds up to
#: about 1.8e308, and a margin leaves room for the arithmetic of the kernels.
MAX_LOG10 = 300
#: Longest accepted run of digits in a number literal.
MAX_DIGITS = 100

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_LONG_DIGITS = re.compile(r"(?<![A-Za-z_0-9])[0-9](?:_?[0-9]){%d,}" % MAX_DIGITS)

_BINOPS = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_NOT_REAL_HINT = ("check square roots, logarithms, inverse functions and fractional powers "
                  "of negative constants")
#: Left-associative operators whose chains (a + b - c ...) are built iteratively.
_CHAIN_OPS = (ast.Add, ast.Sub, ast.Mult, ast.Div)
_REFUSED_OPS = {
    ast.BitXor: ("'^' is not a power here", "use '**' for powers"),
    ast.FloorDiv: ("'//' (floor division) is not offered", "use '/'"),
    ast.Mod: ("'%' (remainder) is not offered", None),
    ast.MatMult: ("'@' is not offered", None),
    ast.BitAnd: ("'&' is not offered", None),
    ast.BitOr: ("'|' is not offered", None),
    ast.LShift: ("'<<' is not offered", None),
    ast.RShift: ("'>>' is not offered", None),
}


def is_valid_name(name: str) -> bool:
    """An ASCII identifier that is not a dunder name."""
    return bool(_NAME.match(name)) and not (name.startswith("__") or name.endswith("__"))


def suggest(word: str, candidates) -> str | None:
    """The closest candidate to ``word``, or None.

    Candidates are those :func:`difflib.get_close_matches` finds, ranked by
    edit distance counting a swap of two neighbouring letters as one edit
    (Damerau 1964); on a tie a candidate with the same letters (a swap) wins,
    so ``tahn`` suggests ``tanh`` rather than ``tan``.
    """
    pool = list(dict.fromkeys(str(c) for c in candidates))
    found = difflib.get_close_matches(word, pool, n=5, cutoff=0.6)
    if not found:
        return None
    ratio = {c: difflib.SequenceMatcher(None, word, c).ratio() for c in found}
    return min(found, key=lambda c: (_osa_distance(word, c), sorted(c) != sorted(word),
                                     -ratio[c]))


def _osa_distance(a: str, b: str) -> int:
    # Optimal-string-alignment distance: insertions, deletions, substitutions
    # and swaps of adjacent characters each cost one.
    prev2, prev = None, list(range(len(b) + 1))
    for i in range(1, len(a) + 1):
        cur = [i] + [0] * len(b)
        for j in range(1, len(b) + 1):
            cost = 0 if a[i - 1] == b[j - 1] else 1
            cur[j] = min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + cost)
            if i > 1 and j > 1 and a[i - 1] == b[j - 2] and a[i - 2] == b[j - 1]:
                cur[j] = min(cur[j], prev2[j - 2] + 1)
        prev2, prev = prev, cur
    return prev[len(b)]


def parse_expression(text: str, names: Mapping[str, sp.Expr], *,
                     path: str | None = None, key: str | None = None,
                     unavailable: Mapping[str, tuple[str, str | None]] | None = None) -> sp.Expr:
    """Parse ``text`` into a SymPy expression.

    ``names`` maps every declared name (coordinates, parameters, definitions) to
    the SymPy object it stands for. ``unavailable`` maps names that exist but
    may not be used here (a definition further down, a differential outside the
    line element) to the (message, hint) of the error that using them raises.
    ``path`` and ``key`` only label errors.
    """
    text_in = text

    def fail(message, column=None, hint=None):
        raise ExpressionError(message, text=text_in, column=column, path=path, key=key, hint=hint)

    if not isinstance(text, str):
        raise ExpressionError(f"expected an expression string, got {type(text).__name__} {text!r}",
                              path=path, key=key)
    if not text.strip():
        fail("empty expression")
    if len(text) > MAX_LENGTH:
        fail(f"expression is {len(text)} characters long, more than the {MAX_LENGTH} accepted")
    if "\x00" in text:
        fail("expression contains a NUL character", text.index("\x00"))
    for i, ch in enumerate(text):
        if ord(ch) > 127:
            fail(f"non-ASCII character {ch!r}", i, "names and operators are ASCII only")
    if "#" in text:
        fail("'#' is not allowed in an expression", text.index("#"),
             "a comment goes after the closing quote of the TOML string")
    # Line breaks and tabs are spaces (a long line element may span the lines
    # of a TOML multi-line string); one character for one keeps the columns.
    text = "".join(" " if ch.isspace() else ch for ch in text)
    # Python refuses integer literals of more than 4300 digits with a message
    # about its own internals; refuse long digit runs first, with ours.
    long_digits = _LONG_DIGITS.search(text)
    if long_digits:
        fail(f"number with more than {MAX_DIGITS} digits", long_digits.start(),
             "write large or small numbers with an exponent, like 1e-30")
    # A cheap bracket-depth check before the parser, whose own recursion is
    # limited: deep nesting is refused with our message, not a RecursionError.
    depth = 0
    for i, ch in enumerate(text):
        if ch in "([{":
            depth += 1
            if depth > MAX_DEPTH:
                fail(f"brackets nested deeper than {MAX_DEPTH}", i)
        elif ch in ")]}":
            depth -= 1
    try:
        tree = ast.parse(text.strip(), mode="eval")
    except SyntaxError as exc:
        col = (exc.offset - 1) if exc.offset else None
        lead = len(text) - len(text.lstrip())
        hint = None
        if "^" in text:
            hint = "use '**' for powers"
        fail(f"syntax error ({exc.msg})", None if col is None else col + lead, hint)
    except (RecursionError, MemoryError, ValueError) as exc:
        fail(f"expression is too deeply nested or has too many terms in a row to be parsed "
             f"({type(exc).__name__})", None, "split it with [define] helpers")
    lead = len(text) - len(text.lstrip())
    expr = _Builder(text, names, fail, lead,
                    {} if unavailable is None else unavailable).build(tree.body, 0)
    if expr.has(sp.I, sp.zoo, sp.oo, sp.nan) or expr.has(-sp.oo):
        fail("expression has a constant part that is not a finite real number",
             None, "check square roots and logarithms of negative or zero constants")
    if expr.has(sp.Abs, sp.sign, sp.Heaviside, sp.DiracDelta, sp.Piecewise, sp.Min, sp.Max,
                sp.floor, sp.ceiling):
        fail("expression simplifies to a function with a kink (sqrt(x**2) is |x|), which "
             "curvature cannot differentiate", None,
             "write the quantity without the square root of a square, e.g. x instead of "
             "sqrt(x**2)")
    return expr


class _Builder:
    def __init__(self, text, names, fail, lead, unavailable):
        self.text = text
        self.names = names
        self.fail = fail
        self.lead = lead
        self.unavailable = unavailable

    def col(self, node):
        off = getattr(node, "col_offset", None)
        return None if off is None else off + self.lead

    def build(self, node, depth):
        if depth > MAX_DEPTH:
            self.fail(f"expression nested deeper than {MAX_DEPTH}", self.col(node))
        method = getattr(self, "_" + type(node).__name__, None)
        if method is None:
            self.fail(f"{_describe(node)} is not allowed", self.col(node),
                      "only numbers, names, + - * / **, parentheses and the listed functions are")
        return method(node, depth)

    def checked(self, value, node):
        """``value`` if it is not a constant, or a finite real constant of a
        size a double can hold; otherwise an error pointing at ``node``.

        Every part of ``value`` has passed this check already, so evaluating it
        to 20 digits is cheap (mpmath with arguments of at most 1e300).
        """
        if value.free_symbols:
            # The numeric coefficients SymPy gathered (10**200*x*10**200 is
            # 10**400*x) must fit in a double too.
            for part in (value, *value.args):
                if part.is_Add or part.is_Mul:
                    for number in part.args:
                        if number.is_Rational and number != 0 and \
                                _log10_abs(number) > MAX_LOG10:
                            self.fail(f"number too large (beyond 1e{MAX_LOG10})", self.col(node))
            return value
        if value.is_Rational:
            if value != 0 and _log10_abs(value) > MAX_LOG10:
                self.fail(f"number too large (beyond 1e{MAX_LOG10})", self.col(node))
            return value
        shown = _short(ast.get_source_segment(self.text.strip(), node) or str(value))
        if value.has(sp.zoo, sp.oo, sp.nan) or value.has(-sp.oo):
            self.fail(f"'{shown}' is not a finite number", self.col(node),
                      "check logarithms of zero and poles of constants")
        if value.has(sp.I):
            self.fail(f"'{shown}' is not a real number", self.col(node), _NOT_REAL_HINT)
        try:
            approx = value.evalf(20)
            re_part, im_part = approx.as_real_imag()
        except (ArithmeticError, ValueError, TypeError, RecursionError) as exc:
            self.fail(f"the constant '{shown}' cannot be evaluated ({type(exc).__name__})",
                      self.col(node))
        if im_part != 0:
            self.fail(f"'{shown}' is not a real number", self.col(node), _NOT_REAL_HINT)
        if not re_part.is_Number or not re_part.is_finite:
            self.fail(f"'{shown}' is not a finite number", self.col(node),
                      "check logarithms of zero and poles of constants")
        if abs(re_part) > sp.Float(10) ** MAX_LOG10:
            self.fail(f"number too large (beyond 1e{MAX_LOG10})", self.col(node))
        return value

    # -- leaves -----------------------------------------------------------------
    def _Constant(self, node, depth):
        value = node.value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            what = "a string" if isinstance(value, str) else repr(value)
            self.fail(f"{what} is not a number", self.col(node))
        if isinstance(value, float) and not math.isfinite(value):
            self.fail("a non-finite number is not allowed", self.col(node))
        if isinstance(value, int):
            if abs(value) > 10**30:
                self.fail("integer literal too large (more than 30 digits)", self.col(node))
            return sp.Integer(value)
        # Exact rational from the literal's own digits: '0.1' is 1/10, not
        # the nearest double.
        src = ast.get_source_segment(self.text.strip(), node)
        try:
            number = sp.Rational(src.replace("_", "")) if src else sp.Rational(repr(value))
        except (TypeError, ValueError):
            number = sp.Rational(value)
        if number != 0 and abs(number) < sp.Rational(1, 10**300):
            # Below 1e-300 a double cannot hold it faithfully (and 1e-400 reads as 0.0).
            self.fail("number too small (below 1e-300 in size)", self.col(node),
                      "write 0 if zero is meant")
        return self.checked(number, node)

    def _Name(self, node, depth):
        name = node.id
        if name.startswith("__") or name.endswith("__"):
            self.fail(f"dunder name '{name}' is not allowed", self.col(node))
        if name in self.names:
            return self.names[name]
        if name in CONSTANTS:
            return CONSTANTS[name]
        if name in self.unavailable:
            message, hint = self.unavailable[name]
            self.fail(message, self.col(node), hint)
        lname = name.lower()
        if lname in ("nan", "inf", "infinity"):
            self.fail(f"'{name}' is not a finite number", self.col(node))
        if name in FUNCTIONS:
            self.fail(f"function '{name}' used without an argument", self.col(node),
                      f"write {name}(...)")
        close = suggest(name, list(self.names) + list(CONSTANTS))
        self.fail(f"unknown name '{name}'", self.col(node),
                  f"did you mean '{close}'?" if close else "declare it under [parameters] or [define]")

    # -- operators --------------------------------------------------------------
    def _BinOp(self, node, depth):
        op = type(node.op)
        if op in _REFUSED_OPS:
            msg, hint = _REFUSED_OPS[op]
            self.fail(msg, self.col(node.left) if op is not ast.BitXor else _op_col(self, node), hint)
        if op not in _BINOPS:
            self.fail(f"operator {op.__name__} is not allowed", self.col(node))
        if op is ast.Pow:
            return self._power(node, depth)
        # A run such as a - b + c*d/e is a left-leaning chain as deep as it is
        # long; walk it iteratively, so that long sums are not "nested deep".
        chain = []
        left = node
        while isinstance(left, ast.BinOp) and type(left.op) in _CHAIN_OPS:
            chain.append(left)
            left = left.left
        acc = self.build(left, depth + 1)
        run, kind = [acc], None
        for link in reversed(chain):
            lop = type(link.op)
            right = self.build(link.right, depth + 1)
            now = "sum" if lop in (ast.Add, ast.Sub) else "product"
            if kind is not None and now != kind:
                run = [self.checked(_collapse(kind, run), link)]
            kind = now
            if lop is ast.Sub:
                right = -right
            elif lop is ast.Div:
                if right == 0:
                    self.fail("division by zero", self.col(link.right))
                right = sp.Pow(right, -1)
            run.append(right)
        return self.checked(_collapse(kind, run), node)

    def _power(self, node, depth):
        left = self.build(node.left, depth + 1)
        right = self.build(node.right, depth + 1)
        # Bound plain-number exponents before SymPy evaluates anything.
        if right.is_Number:
            if left.is_Number and left != 0 and \
                    abs(float(sp.log(abs(left), 10)) * float(right)) > MAX_LOG10:
                self.fail(f"number too large or too small (beyond 1e{MAX_LOG10})", self.col(node))
            if abs(right) > MAX_EXPONENT:
                self.fail(f"exponent {_short(str(right), 24)} is too large "
                          f"(at most {MAX_EXPONENT} in size)", self.col(node.right))
            if left == 0 and right.is_negative:
                self.fail("zero to a negative power", self.col(node))
        elif not left.free_symbols:
            if left.is_Number and not right.free_symbols:
                self.fail("exponent is not a plain number", self.col(node.right))
            if left.is_negative:
                self.fail(f"negative constant '{_short(str(left))}' to a non-constant power "
                          "is not a real number", self.col(node))
            if left == 0:
                self.fail("zero to a non-constant power is undefined where the power is not "
                          "positive", self.col(node), "write 0 if zero is meant")
        return self.checked(left ** right, node)

    def _UnaryOp(self, node, depth):
        if isinstance(node.op, ast.USub):
            return -self.build(node.operand, depth + 1)
        if isinstance(node.op, ast.UAdd):
            return self.build(node.operand, depth + 1)
        self.fail(f"{_describe(node)} is not allowed", self.col(node))

    def _Call(self, node, depth):
        if not isinstance(node.func, ast.Name):
            self.fail(f"{_describe(node.func)} cannot be called", self.col(node),
                      "only the listed functions can be called, by name")
        fname = node.func.id
        if fname.startswith("__") or fname.endswith("__"):
            self.fail(f"dunder name '{fname}' is not allowed", self.col(node))
        if fname not in FUNCTIONS:
            close = suggest(fname, FUNCTIONS)
            hint = f"did you mean '{close}'?" if close else \
                "available: " + " ".join(sorted(FUNCTIONS))
            if fname in self.names or fname in CONSTANTS:
                self.fail(f"'{fname}' is not a function", self.col(node))
            self.fail(f"unknown function '{fname}'", self.col(node), hint)
        if node.keywords:
            self.fail(f"keyword arguments are not allowed in {fname}()", self.col(node))
        for a in node.args:
            if isinstance(a, ast.Starred):
                self.fail(f"unpacking with '*' is not allowed in {fname}()", self.col(a))
        func, arity = FUNCTIONS[fname]
        if len(node.args) != arity:
            self.fail(f"{fname}() takes {arity} argument{'s' if arity > 1 else ''}, "
                      f"got {len(node.args)}", self.col(node))
        args = [self.build(a, depth + 1) for a in node.args]
        return self.checked(func(*args), node)


def _collapse(kind, items):
    return sp.Add(*items) if kind == "sum" else sp.Mul(*items)


def _log10_abs(q: sp.Rational) -> float:
    # log10 |p/q| of an exact rational without converting it to a double.
    return math.log10(abs(int(q.p))) - math.log10(int(q.q))


def _short(text: str, limit: int = 60) -> str:
    flat = " ".join(text.split())
    return flat if len(flat) <= limit else flat[: limit - 3] + "..."


def _op_col(builder, node):
    # Column of a binary operator: the first operator character after the left operand.
    end = getattr(node.left, "end_col_offset", None)
    if end is None:
        return builder.col(node)
    stripped = builder.text.strip()
    for i in range(end, len(stripped)):
        if stripped[i] not in " \t)":
            return i + builder.lead
    return builder.col(node)


def _describe(node) -> str:
    kinds = {
        ast.Attribute: "attribute access", ast.Subscript: "subscripting",
        ast.Lambda: "a lambda", ast.IfExp: "a conditional expression",
        ast.ListComp: "a comprehension", ast.SetComp: "a comprehension",
        ast.DictComp: "a comprehension", ast.GeneratorExp: "a generator expression",
        ast.Compare: "a comparison", ast.BoolOp: "'and'/'or'", ast.List: "a list",
        ast.Tuple: "a tuple", ast.Dict: "a dict", ast.Set: "a set",
        ast.JoinedStr: "an f-string", ast.NamedExpr: "an assignment expression",
        ast.Await: "await", ast.Yield: "yield", ast.Starred: "unpacking",
        ast.Slice: "a slice",
    }
    for k, v in kinds.items():
        if isinstance(node, k):
            return v
    if isinstance(node, ast.UnaryOp):
        return {ast.Not: "'not'", ast.Invert: "'~'"}.get(type(node.op), "this operator")
    return type(node).__name__
