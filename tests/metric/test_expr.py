"""The safe arithmetic language of metric files (docs: metric-format.md, "Expressions").

Reference values are exact arithmetic worked by hand or Python's ``math``
module (IEEE double, correctly rounded to within an ulp or two for these
functions), never the parser's own tables.
"""

from __future__ import annotations

import math

import pytest
import sympy as sp

from auditor.errors import ExpressionError, MetricFileError
from auditor.metric.expr import (FUNCTIONS, MAX_DEPTH, MAX_EXPONENT, is_valid_name,
                                 parse_expression, suggest)

X, Y, Z, T = (sp.Symbol(n, real=True) for n in ("x", "y", "z", "t"))
NAMES = {"x": X, "y": Y, "z": Z, "t": T}


def parse(text, names=NAMES, **kw):
    return parse_expression(text, names, **kw)


def error(text, names=NAMES, **kw) -> ExpressionError:
    with pytest.raises(ExpressionError) as info:
        parse_expression(text, names, **kw)
    return info.value


# -- numbers --------------------------------------------------------------------

@pytest.mark.parametrize("text, exact", [
    ("0.1", sp.Rational(1, 10)),
    ("1e-3", sp.Rational(1, 1000)),
    ("2.5e2", sp.Integer(250)),
    ("0.1 + 0.2", sp.Rational(3, 10)),          # not 0.30000000000000004
    ("1/3", sp.Rational(1, 3)),
    ("0.125", sp.Rational(1, 8)),
    ("7", sp.Integer(7)),
    ("1.5E-2", sp.Rational(3, 200)),
])
def test_numbers_are_exact_rationals(text, exact):
    value = parse(text)
    assert value.is_Rational and value == exact


def test_decimal_literal_keeps_its_digits_not_the_nearest_double():
    # The double nearest 0.1 is 3602879701896397/36028797018963968 (IEEE 754).
    assert parse("0.1") != sp.Rational(3602879701896397, 36028797018963968)
    assert parse("0.1*x") == X / 10


# -- precedence and unary minus --------------------------------------------------

@pytest.mark.parametrize("text, value", [
    ("2 + 3*4", 14), ("(2 + 3)*4", 20), ("2**3**2", 512), ("(2**3)**2", 64),
    ("-2**2", -4), ("(-2)**2", 4), ("2**-1", sp.Rational(1, 2)), ("8/4/2", 1),
    ("8 - 4 - 2", 2), ("2*3**2", 18), ("-3 - -3", 0), ("+5", 5), ("--5", 5),
    ("2*-3", -6), ("1 - 2 + 3 - 4", -2), ("12/3*2", 8), ("2**2**-1", sp.sqrt(2)),
])
def test_operator_precedence(text, value):
    assert parse(text) == value


def test_unary_minus_binds_looser_than_power():
    assert parse("-x**2") == -(X**2)
    assert parse("-x**2").subs(X, 3) == -9
    assert parse("(-x)**2").subs(X, 3) == 9
    assert parse("x**-2") == 1 / X**2
    assert parse("-x**-2*y") == -Y / X**2


def test_left_associativity_of_long_chains():
    assert parse("x - y - z - t") == X - Y - Z - T
    assert parse("x/y/z/t") == X / (Y * Z * T)
    assert parse("x/y*z") == X * Z / Y
    assert parse("x - y + z*t/x - 2") == X - Y + Z * T / X - 2


def test_a_long_sum_is_not_deep_nesting():
    # 1000 terms in a row are one level of nesting, not 1000 (a metric written out
    # in full can have many terms).
    text = " + ".join(f"{k}*x**{k % 5}" for k in range(1, 1001))
    expected = sum(sp.Integer(k) * X ** (k % 5) for k in range(1, 1001))
    assert sp.expand(parse(text) - expected) == 0


def test_nesting_limit_is_exact():
    ok = "sin(" * MAX_DEPTH + "x" + ")" * MAX_DEPTH
    assert parse(ok).has(sp.sin)
    too_deep = "sin(" * (MAX_DEPTH + 1) + "x" + ")" * (MAX_DEPTH + 1)
    assert "nested deeper than 60" in error(too_deep).reason
    assert parse("(" * MAX_DEPTH + "x" + ")" * MAX_DEPTH) == X


# -- functions --------------------------------------------------------------------

def _sec(v):
    return 1 / math.cos(v)


#: name -> (SymPy class of name(x), reference from ``math``, sample arguments).
ONE_ARGUMENT = {
    "sqrt": (sp.Pow, math.sqrt, (0.25, 2.0, 7.5)),
    "exp": (sp.exp, math.exp, (-1.5, 0.3, 2.0)),
    "log": (sp.log, math.log, (0.2, 1.5, 10.0)),
    "sin": (sp.sin, math.sin, (-0.7, 0.3, 2.0)),
    "cos": (sp.cos, math.cos, (-0.7, 0.3, 2.0)),
    "tan": (sp.tan, math.tan, (-0.7, 0.3, 1.2)),
    "cot": (sp.cot, lambda v: 1 / math.tan(v), (-0.7, 0.3, 1.2)),
    "sec": (sp.sec, _sec, (-0.7, 0.3, 1.2)),
    "csc": (sp.csc, lambda v: 1 / math.sin(v), (-0.7, 0.3, 1.2)),
    "asin": (sp.asin, math.asin, (-0.9, 0.1, 0.5)),
    "acos": (sp.acos, math.acos, (-0.9, 0.1, 0.5)),
    "atan": (sp.atan, math.atan, (-3.0, 0.1, 5.0)),
    "sinh": (sp.sinh, math.sinh, (-1.5, 0.3, 2.0)),
    "cosh": (sp.cosh, math.cosh, (-1.5, 0.3, 2.0)),
    "tanh": (sp.tanh, math.tanh, (-1.5, 0.3, 2.0)),
    "coth": (sp.coth, lambda v: 1 / math.tanh(v), (-1.5, 0.3, 2.0)),
    "sech": (sp.sech, lambda v: 1 / math.cosh(v), (-1.5, 0.3, 2.0)),
    "csch": (sp.csch, lambda v: 1 / math.sinh(v), (-1.5, 0.3, 2.0)),
    "asinh": (sp.asinh, math.asinh, (-1.5, 0.3, 2.0)),
    "acosh": (sp.acosh, math.acosh, (1.1, 2.0, 9.0)),
    "atanh": (sp.atanh, math.atanh, (-0.9, 0.1, 0.5)),
}

#: The minimum table of metric-format.md, "Expressions".
DOCUMENTED = "sqrt exp log sin cos tan asin acos atan atan2 sinh cosh tanh asinh acosh atanh sech"


def test_documented_functions_are_offered():
    assert set(DOCUMENTED.split()) <= set(FUNCTIONS)
    assert set(FUNCTIONS) == set(ONE_ARGUMENT) | {"atan2"}


@pytest.mark.parametrize("name", sorted(ONE_ARGUMENT))
def test_each_function_builds_the_right_sympy_function(name):
    cls, reference, samples = ONE_ARGUMENT[name]
    built = parse(f"{name}(x)")
    assert isinstance(built, cls), (name, built, type(built))
    if name == "sqrt":
        assert built == sp.Pow(X, sp.Rational(1, 2))
    for v in samples:
        got = float(built.subs(X, sp.Float(v, 30)).evalf(30))
        # 4 ulp: the math module is within ~1 ulp, SymPy's 30-digit value rounds once.
        assert got == pytest.approx(reference(v), rel=4 * 2.0**-52, abs=0), (name, v)


def test_atan2_takes_two_arguments_in_y_x_order():
    built = parse("atan2(y, x)")
    assert built == sp.atan2(Y, X)
    for y, x in [(1.0, 2.0), (-1.0, -1.0), (2.0, -0.5), (0.0, -3.0)]:
        got = float(built.subs({Y: y, X: x}).evalf(30))
        assert got == pytest.approx(math.atan2(y, x), rel=4 * 2.0**-52, abs=0)
    assert error("atan2(y)").reason == "atan2() takes 2 arguments, got 1"
    assert error("atan2(y, x, z)").reason == "atan2() takes 2 arguments, got 3"
    assert error("sin(x, y)").reason == "sin() takes 1 argument, got 2"
    assert error("sqrt()").reason == "sqrt() takes 1 argument, got 0"


@pytest.mark.parametrize("name", ["abs", "Abs", "sign", "min", "max", "floor", "ceiling",
                                  "Heaviside", "Piecewise", "sympify", "getattr", "print"])
def test_functions_with_kinks_and_builtins_are_not_offered(name):
    exc = error(f"{name}(x)")
    assert exc.reason == f"unknown function '{name}'"


def test_pi_is_the_exact_constant():
    assert parse("pi") is sp.pi
    assert parse("2*pi") == 2 * sp.pi
    assert parse("sin(pi/6)") == sp.Rational(1, 2)      # exact: SymPy knows sin(pi/6)
    assert error("pi(1)").reason == "'pi' is not a function"
    assert error("e").reason == "unknown name 'e'"       # only pi is a named constant
    assert error("E").reason == "unknown name 'E'"
    assert error("I").reason == "unknown name 'I'"


# -- names --------------------------------------------------------------------------

def test_names_are_the_real_symbols_given():
    assert parse("x") is X
    assert parse("x").is_real is True
    # For real x SymPy folds sqrt(x**2) to |x|, a kink the language refuses.
    assert "function with a kink" in error("sqrt(x**2)").reason
    assert sp.conjugate(parse("x*y + t")) == X * Y + T


def test_function_name_without_call():
    exc = error("sin + x")
    assert exc.reason == "function 'sin' used without an argument" and exc.hint == "write sin(...)"


def test_calling_a_name():
    assert error("x(2)").reason == "'x' is not a function"


def test_unavailable_names_give_their_own_message():
    exc = error("2*later", unavailable={"later": ("'later' is defined below", "move it up")})
    assert (exc.reason, exc.hint, exc.column) == ("'later' is defined below", "move it up", 2)


@pytest.mark.parametrize("word, candidates, expected", [
    ("tahn", FUNCTIONS, "tanh"),      # a swap of two letters beats a deletion
    ("sinn", FUNCTIONS, "sin"),
    ("aton2", FUNCTIONS, "atan2"),
    ("sigam", ["sigma", "v", "R"], "sigma"),
    ("parmeters", ["parameters", "define"], "parameters"),
    ("q", ["t", "x", "y", "z"], None),
    ("wibble", FUNCTIONS, None),
])
def test_suggestions(word, candidates, expected):
    assert suggest(word, candidates) == expected


@pytest.mark.parametrize("name, valid", [
    ("x", True), ("r_s", True), ("_a", True), ("theta2", True), ("2x", False),
    ("__class__", False), ("__x", False), ("x__", False), ("a-b", False), ("", False),
    ("\u0430", False), ("x y", False),
])
def test_valid_names(name, valid):
    assert is_valid_name(name) is valid


# -- where errors point -------------------------------------------------------------

@pytest.mark.parametrize("text, column, char", [
    ("x + tahn(y)", 4, "t"),
    ("x + y^2", 5, "^"),
    ("sin(x) + y[0]", 9, "y"),
    ("  x + q", 6, "q"),
    ("x  +  q", 6, "q"),
    ("(x +\n q)", 6, "q"),
    ("x*(y + __z)", 7, "_"),
    ("1/(x - x)", 3, "x"),
    ("sqrt(x) + 1e999", 10, "1"),
    ("x + f'{y}'", 4, "f"),
    ("x + (y := 2)", 5, "y"),
    ("x + * y", 4, "*"),
    ("x + y.real", 4, "y"),
    ("x + \u0430", 4, "\u0430"),
    ("t*x # comment", 4, "#"),
    ("exp(x) + asin(3)", 9, "a"),
    ("x**300", 3, "3"),
])
def test_error_column_points_at_the_offending_character(text, column, char):
    exc = error(text)
    assert exc.column == column, (exc.column, str(exc))
    assert text[column] == char
    shown, caret = exc.caret_line().split("\n")
    assert caret == " " * column + "^"
    assert shown[column] == (char if not char.isspace() else " ")
    assert f"at column {column + 1} of" in str(exc)


def test_caret_of_a_long_expression_shows_the_part_around_the_column():
    text = "x" + " + x" * 200 + " + q"
    exc = error(text)
    assert exc.column == len(text) - 1
    shown, caret = exc.caret_line().split("\n")
    assert shown.endswith("+ q") and shown.startswith("...")
    assert len(caret) - 1 == len(shown) - 1 and caret.endswith("^")
    assert len(shown) <= 110


def test_error_message_names_file_key_text_and_hint():
    exc = error("x^2", path="bubble.toml", key="define.f")
    assert isinstance(exc, MetricFileError)
    assert str(exc) == ("bubble.toml: [define.f] '^' is not a power here at column 2 of 'x^2' "
                        "(use '**' for powers)")
    assert exc.located == "'^' is not a power here at column 2 of 'x^2' (use '**' for powers)"
    assert (exc.path, exc.key, exc.text, exc.column) == ("bubble.toml", "define.f", "x^2", 1)


def test_line_breaks_are_spaces():
    assert parse("x +\n  y") == X + Y
    assert parse("(x +\r\n\ty)\n") == X + Y


# -- bounds ---------------------------------------------------------------------------

def test_exponent_limit_is_exact():
    assert parse(f"x**{MAX_EXPONENT}") == X**MAX_EXPONENT
    assert parse(f"x**-{MAX_EXPONENT}") == X**-MAX_EXPONENT
    assert error(f"x**{MAX_EXPONENT + 1}").reason == \
        f"exponent {MAX_EXPONENT + 1} is too large (at most {MAX_EXPONENT} in size)"


def test_size_of_numbers_is_bounded_at_1e300():
    assert parse("(1e2)**149") == sp.Integer(10) ** 298
    assert "beyond 1e300" in error("(1e2)**151").reason
    assert parse("1e150*1e150") == sp.Integer(10) ** 300
    assert error("1e150*1e151").reason == "number too large (beyond 1e300)"
    assert parse("1e300") == sp.Integer(10) ** 300
    assert error("1e301").reason == "number too large (beyond 1e300)"
    assert error("1e200*1e200*x").reason == "number too large (beyond 1e300)"
    assert error("exp(691)").reason == "number too large (beyond 1e300)"   # e^691 = 1.1e300
    assert parse("exp(690)") == sp.exp(690)                               # e^690 = 4.2e299


@pytest.mark.parametrize("text", ["sqrt(-1)", "log(-2)", "asin(2)", "acosh(0)", "(-8)**(1/3)",
                                  "(-2)**0.5", "atanh(3)", "acos(-1.5)"])
def test_constants_must_be_real(text):
    assert error(f"x + {text}").reason == f"'{text}' is not a real number"


@pytest.mark.parametrize("text", ["log(0)", "tan(pi/2)", "atanh(1)", "cot(0)", "sec(pi/2)"])
def test_constants_must_be_finite(text):
    assert error(f"x + {text}").reason == f"'{text}' is not a finite number"


@pytest.mark.parametrize("text, reason", [
    ("x//2", "'//' (floor division) is not offered"),
    ("x % 2", "'%' (remainder) is not offered"),
    ("x @ y", "'@' is not offered"),
    ("x & y", "'&' is not offered"),
    ("x | y", "'|' is not offered"),
    ("x << 1", "'<<' is not offered"),
    ("not x", "'not' is not allowed"),
    ("~x", "'~' is not allowed"),
    ("x and y", "'and'/'or' is not allowed"),
    ("[x]", "a list is not allowed"),
    ("(x, y)", "a tuple is not allowed"),
    ("{x: y}", "a dict is not allowed"),
    ("{x}", "a set is not allowed"),
    ("[i for i in x]", "a comprehension is not allowed"),
    ("(i for i in x)", "a generator expression is not allowed"),
    ("1j", "1j is not a number"),
    ("None", "None is not a number"),
    ("...", "Ellipsis is not a number"),
    ("b'x'", "b'x' is not a number"),
    ("", "empty expression"),
    ("   ", "empty expression"),
    ("x\x00", "expression contains a NUL character"),
    ("0**-1", "zero to a negative power"),
    ("2**pi", "exponent is not a plain number"),
])
def test_refused_constructs(text, reason):
    assert error(text).reason == reason


def test_a_non_string_is_refused():
    exc = error(3.5)
    assert exc.reason == "expected an expression string, got float 3.5"
