"""Hostile and malformed metric files and command-line values.

Every case pins the whole one-line message (file, key, offending text and
column), and is run twice: through the library, which must raise the project's
own :class:`~auditor.errors.InputError` subclass, and through the command line,
which must print exactly one ``auditor: error:`` line on stderr, exit with code
2 and write no output file (docs: cli-contract.md, "Exit codes").

The second half shows that user text never reaches Python's evaluator: while a
file is loaded, ``eval``, ``exec``, ``compile`` (except to a syntax tree),
``sympify`` of a string and ``parse_expr`` are replaced by functions that fail
loudly, and payloads that would leave a file behind if they ran leave none.
"""

from __future__ import annotations

import ast
import builtins
import contextlib
import importlib
import json
import os
import re
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest
import sympy
import sympy.parsing.sympy_parser as sympy_parser

from auditor import cli
from auditor.errors import ExpressionError, InputError, MetricFileError, UsageError
from auditor.metric import load_metric, loads_metric, parse_expression, parse_overrides
from auditor.metric.expr import MAX_LENGTH
from auditor.probe import parse_event

SYMPIFY_MODULE = importlib.import_module("sympy.core.sympify")
SAMPLES_DIR = Path(__file__).resolve().parents[2] / "sample_metrics"

CART_AT = "t=0,x=1,y=0,z=0"
SPH_AT = "t=0,r=3,theta=pi/2,phi=0"


def q(text: str) -> str:
    """``text`` as a TOML basic string (JSON string escapes are valid TOML)."""
    return json.dumps(text)


HEAD = 'name = "Hostile-input base"\ncoordinates = ["t", "x", "y", "z"]\n'
PARAMS = "[parameters]\nv = 0.5\nsigma = 8.0\nR = 1.0\n"
WALL = "(tanh(sigma*(x + R)) - tanh(sigma*(x - R))) / (2*tanh(sigma*R))"
LINE = "-dt**2 + (dx - v*f*dt)**2 + dy**2 + dz**2"


def with_define(expr: str) -> str:
    """The base file with ``[define] f`` replaced by ``expr``."""
    return HEAD + PARAMS + f"[define]\nf = {q(expr)}\n[metric]\nline_element = {q(LINE)}\n"


def with_line(line: str) -> str:
    """The base file with ``[metric] line_element`` replaced by ``line``."""
    return HEAD + PARAMS + f"[define]\nf = {q(WALL)}\n[metric]\nline_element = {q(line)}\n"


def with_tail(tail: str) -> str:
    """The valid base file followed by ``tail`` (more tables)."""
    return with_define(WALL) + tail


BASE = with_define(WALL)
SPH_HEAD = 'name = "Spherical base"\ncoordinates = ["t", "r", "theta", "phi"]\n' \
           "[parameters]\nM = 1.0\n"
SPH_DIAGONAL = '"theta theta" = "r**2"\n"phi phi" = "r**2*sin(theta)**2"\n'
REGION = "[region]\nt = 0.0\nx = [-1.0, 1.0]\ny = 0.0\nz = 0.0\n"
CREW_OK = "start = { t = 0.0, x = 0.0, y = 0.0, z = 0.0 }\nvelocity = [0.0, 0.0, 0.0]\n" \
          "duration = 1.0\n"
AVAILABLE = ("acos acosh asin asinh atan atan2 atanh cos cosh cot coth csc csch exp log sec "
             "sech sin sinh sqrt tan tanh")
ONLY = "(only numbers, names, + - * / **, parentheses and the listed functions are)"
NOT_REAL = ("(check square roots, logarithms, inverse functions and fractional powers of "
            "negative constants)")
EVERY_TERM = "every term must be of degree exactly two, like dx**2 or dt*dx"
TOP_FIRST = ("in TOML a key belongs to the last [table] above it, so put top-level keys "
             "before the first [table]")


@dataclass(frozen=True)
class Case:
    id: str
    content: str | bytes          # the metric file
    message: str                  # the whole message; "{path}" stands for the file
    error: type = MetricFileError  # the exact class raised
    at: str = CART_AT             # --at
    sets: tuple[str, ...] = ()    # --set values
    regex: bool = False           # ``message`` is a regular expression

    def expected(self, path: Path) -> str:
        if self.regex:
            return self.message.replace("{path}", re.escape(str(path)))
        return self.message.replace("{path}", str(path))

    def matches(self, message: str, path: Path) -> bool:
        if self.regex:
            return re.fullmatch(self.expected(path), message) is not None
        return message == self.expected(path)


def D(expr, message, error=ExpressionError, **kw):
    """A case whose hostile text is the expression of ``[define] f``."""
    return dict(content=with_define(expr), message=message, error=error, **kw)


CASES = [
    # -- code injection -------------------------------------------------------
    Case("import-system", **D(
        "__import__('os').system('x')",
        "{path}: [define.f] attribute access cannot be called at column 1 of "
        "'__import__('os').system('x')' (only the listed functions can be called, by name)")),
    Case("subclasses-walk", **D(
        "().__class__.__bases__[0].__subclasses__()",
        "{path}: [define.f] attribute access cannot be called at column 1 of "
        "'().__class__.__bases__[0].__subclasses__()' (only the listed functions can be "
        "called, by name)")),
    Case("eval-call", **D(
        'eval("1")',
        f"{{path}}: [define.f] unknown function 'eval' at column 1 of 'eval(\"1\")' "
        f"(available: {AVAILABLE})")),
    Case("exec-call", **D(
        'exec("import os")',
        f"{{path}}: [define.f] unknown function 'exec' at column 1 of 'exec(\"import os\")' "
        f"(available: {AVAILABLE})")),
    Case("open-passwd", **D(
        "open('/etc/passwd')",
        f"{{path}}: [define.f] unknown function 'open' at column 1 of 'open('/etc/passwd')' "
        f"(available: {AVAILABLE})")),
    Case("lambda", **D(
        "lambda: x",
        f"{{path}}: [define.f] a lambda is not allowed at column 1 of 'lambda: x' {ONLY}")),
    Case("dunder-name", **D(
        "x + __builtins__",
        "{path}: [define.f] dunder name '__builtins__' is not allowed at column 5 of "
        "'x + __builtins__'")),
    Case("dunder-call", **D(
        "2*__import__('os')",
        "{path}: [define.f] dunder name '__import__' is not allowed at column 3 of "
        "'2*__import__('os')'")),
    Case("attribute", **D(
        "x.real + 1",
        f"{{path}}: [define.f] attribute access is not allowed at column 1 of 'x.real + 1' {ONLY}")),
    Case("subscript", **D(
        "sin(x) + y[0]",
        f"{{path}}: [define.f] subscripting is not allowed at column 10 of 'sin(x) + y[0]' {ONLY}")),
    # -- names and functions ---------------------------------------------------
    Case("unknown-function-tahn", **D(
        "tahn(sigma*x)",
        "{path}: [define.f] unknown function 'tahn' at column 1 of 'tahn(sigma*x)' "
        "(did you mean 'tanh'?)")),
    Case("unknown-name-sigam", **D(
        "1 - sigam*x",
        "{path}: [define.f] unknown name 'sigam' at column 5 of '1 - sigam*x' "
        "(did you mean 'sigma'?)")),
    Case("caret-power", **D(
        "x^2",
        "{path}: [define.f] '^' is not a power here at column 2 of 'x^2' (use '**' for powers)")),
    Case("keyword-argument", **D(
        "sin(x=1)",
        "{path}: [define.f] keyword arguments are not allowed in sin() at column 1 of 'sin(x=1)'")),
    Case("starred-argument", **D(
        "atan2(*x)",
        "{path}: [define.f] unpacking with '*' is not allowed in atan2() at column 7 of "
        "'atan2(*x)'")),
    Case("atan2-arity", **D(
        "atan2(y)",
        "{path}: [define.f] atan2() takes 2 arguments, got 1 at column 1 of 'atan2(y)'")),
    Case("comparison", **D(
        "x < 1",
        f"{{path}}: [define.f] a comparison is not allowed at column 1 of 'x < 1' {ONLY}")),
    Case("f-string", **D(
        "f'{x}'",
        f"{{path}}: [define.f] an f-string is not allowed at column 1 of 'f'{{x}}'' {ONLY}")),
    Case("walrus", **D(
        "(y := 1) + x",
        f"{{path}}: [define.f] an assignment expression is not allowed at column 2 of "
        f"'(y := 1) + x' {ONLY}")),
    Case("conditional", **D(
        "x if y else z",
        f"{{path}}: [define.f] a conditional expression is not allowed at column 1 of "
        f"'x if y else z' {ONLY}")),
    Case("string-literal", **D(
        "'abc'", "{path}: [define.f] a string is not a number at column 1 of ''abc''")),
    Case("boolean-literal", **D(
        "True*x", "{path}: [define.f] True is not a number at column 1 of 'True*x'")),
    Case("cyrillic-a", **D(
        "\u0430*x",
        "{path}: [define.f] non-ASCII character '\u0430' at column 1 of '\u0430*x' "
        "(names and operators are ASCII only)")),
    Case("comment-hides-terms", **D(
        "x # + y",
        "{path}: [define.f] '#' is not allowed in an expression at column 3 of 'x # + y' "
        "(a comment goes after the closing quote of the TOML string)")),
    Case("newline-statement", **D(
        "x\n__import__('os')",
        "{path}: [define.f] syntax error (invalid syntax) at column 3 of "
        "'x __import__('os')'")),
    # -- numbers out of range --------------------------------------------------
    Case("huge-power-tower", **D(
        "9**9**9",
        "{path}: [define.f] number too large or too small (beyond 1e300) at column 1 of "
        "'9**9**9'")),
    Case("huge-power-of-power", **D(
        "(10**200)**200",
        "{path}: [define.f] number too large or too small (beyond 1e300) at column 1 of "
        "'(10**200)**200'")),
    Case("huge-product", **D(
        "10**200*10**200*x",
        "{path}: [define.f] number too large (beyond 1e300) at column 1 of '10**200*10**200*x'")),
    Case("huge-exp-tower", **D(
        "exp(exp(exp(100)))",
        "{path}: [define.f] number too large (beyond 1e300) at column 5 of 'exp(exp(exp(100)))'")),
    Case("nan-literal", **D(
        "nan", "{path}: [define.f] 'nan' is not a finite number at column 1 of 'nan'")),
    Case("inf-literal", **D(
        "-inf", "{path}: [define.f] 'inf' is not a finite number at column 2 of '-inf'")),
    Case("overflowing-literal", **D(
        "1e999", "{path}: [define.f] a non-finite number is not allowed at column 1 of '1e999'")),
    Case("complex-root", **D(
        "(-8)**(1/3)*x",
        f"{{path}}: [define.f] '(-8)**(1/3)' is not a real number at column 1 of "
        f"'(-8)**(1/3)*x' {NOT_REAL}")),
    Case("complex-asin", **D(
        "x + asin(2)",
        f"{{path}}: [define.f] 'asin(2)' is not a real number at column 5 of 'x + asin(2)' "
        f"{NOT_REAL}")),
    Case("negative-base-symbolic-power", **D(
        "(-1)**x",
        "{path}: [define.f] negative constant '-1' to a non-constant power is not a real "
        "number at column 1 of '(-1)**x'")),
    Case("log-zero", **D(
        "x*log(0)",
        "{path}: [define.f] 'log(0)' is not a finite number at column 3 of 'x*log(0)' "
        "(check logarithms of zero and poles of constants)")),
    Case("division-by-zero", **D(
        "x/(y - y)", "{path}: [define.f] division by zero at column 4 of 'x/(y - y)'")),
    Case("long-digit-run", **D(
        "1" * 5000,
        r"{path}: \[define\.f\] number with more than 100 digits at column 1 of '1{117}\.\.\.' "
        r"\(write large or small numbers with an exponent, like 1e-30\)", regex=True)),
    # -- size limits -------------------------------------------------------------
    Case("500-parentheses", **D(
        "(" * 500 + "x" + ")" * 500,
        r"{path}: \[define\.f\] brackets nested deeper than 60 at column 61 of '\({117}\.\.\.'",
        regex=True)),
    Case("200-nested-sin", **D(
        "sin(" * 200 + "x" + ")" * 200,
        r"{path}: \[define\.f\] brackets nested deeper than 60 at column 244 of "
        r"'(sin\(){29}s\.\.\.'", regex=True)),
    Case("500-unary-minus", **D(
        "-" * 500 + "x",
        r"{path}: \[define\.f\] expression nested deeper than 60 at column 62 of '-{117}\.\.\.'",
        regex=True)),
    Case("too-long", **D(
        "x+" * (MAX_LENGTH // 2) + "x",
        r"{path}: \[define\.f\] expression is 20001 characters long, more than the 20000 "
        r"accepted in '(x\+){58}x\.\.\.'", regex=True)),
    Case("definitions-doubling",
         content=HEAD + "[define]\na0 = \"x\"\n"
                 + "".join(f'a{k} = "sin(a{k - 1}) + cos(a{k - 1})"\n' for k in range(1, 31))
                 + '[metric]\nline_element = "-dt**2 + (1 + a30**2)*dx**2 + dy**2 + dz**2"\n',
         message=r"{path}: \[define\.(a1[0-9])\] '\1' has \d+ operations once definitions are "
                 r"substituted, more than the 20000 accepted \(a definition used n times is "
                 r"copied n times\)", regex=True),
    Case("definitions-nested-200-deep",
         content=HEAD + "[define]\na0 = \"x\"\n"
                 + "".join(f'a{k} = "{"sin(" * 10}a{k - 1}{")" * 10}"\n' for k in range(1, 21))
                 + '[metric]\nline_element = "-dt**2 + (1 + a20**2)*dx**2 + dy**2 + dz**2"\n',
         message="{path}: [define.a12] 'a12' is nested 121 deep once definitions are "
                 "substituted, more than the 120 accepted"),
    # -- the line element ---------------------------------------------------------
    Case("line-degree-1", content=with_line(LINE + " + dx"),
         message="{path}: [metric.line_element] term of degree 1 in the differentials (dx) in "
                 f"'{LINE} + dx'; {EVERY_TERM}"),
    Case("line-degree-3", content=with_line(LINE + " + x*dx*dy*dz"),
         message="{path}: [metric.line_element] term of degree 3 in the differentials "
                 f"(dx*dy*dz*x) in '{LINE} + x*dx*dy*dz'; {EVERY_TERM}"),
    Case("line-degree-0", content=with_line("1 + " + LINE),
         message="{path}: [metric.line_element] term of degree 0 in the differentials (1) in "
                 f"'1 + {LINE}'; {EVERY_TERM}"),
    Case("line-degree-256", content=with_line("(dt + dx + dy + dz)**256"),
         message="{path}: [metric.line_element] term of degree up to 256 in the differentials "
                 f"in '(dt + dx + dy + dz)**256'; {EVERY_TERM}"),
    Case("differential-in-function",
         content=with_line("-dt**2 + sin(dx)**2 + dy**2 + dz**2"),
         message="{path}: [metric.line_element] the line element is not a polynomial in the "
                 "differentials dt, dx, dy, dz (a differential inside a function or a "
                 "denominator, or to a non-integer power?) in '-dt**2 + sin(dx)**2 + dy**2 + "
                 "dz**2'"),
    Case("differential-in-define", **D(
        "dx*2",
        "{path}: [define.f] differential 'dx' outside the line element at column 1 of 'dx*2' "
        "(differentials may appear only in [metric].line_element)")),
    # -- components --------------------------------------------------------------
    Case("duplicate-component",
         content=SPH_HEAD + '[metric.components]\n"t t" = "-(1 - 2*M/r)"\n'
                 '"t r" = "0"\n"r t" = "0"\n"r r" = "1/(1 - 2*M/r)"\n' + SPH_DIAGONAL,
         message="{path}: [metric.components.\"r t\"] component 'r t' duplicates 't r': give "
                 "each pair once", at=SPH_AT),
    Case("component-not-coordinate",
         content=SPH_HEAD + '[metric.components]\n"t t" = "-1"\n"r rr" = "1"\n' + SPH_DIAGONAL,
         message="{path}: [metric.components.\"r rr\"] 'rr' in component key 'r rr' is not a "
                 "coordinate; did you mean 'r'?", at=SPH_AT),
    # -- coordinates and names -----------------------------------------------------
    Case("three-coordinates",
         content='name = "m"\ncoordinates = ["t", "x", "y"]\n[metric]\n'
                 'line_element = "-dt**2 + dx**2 + dy**2"\n',
         message="{path}: [coordinates] expected exactly 4 coordinate names (time first), got 3"),
    Case("duplicate-coordinate",
         content='name = "m"\ncoordinates = ["t", "x", "x", "z"]\n[metric]\n'
                 'line_element = "-dt**2 + dx**2 + dz**2"\n',
         message="{path}: [coordinates] coordinate 'x' is listed twice"),
    Case("coordinates-string",
         content='name = "m"\ncoordinates = "t x y z"\n[metric]\nline_element = "-dt**2"\n',
         message="{path}: [coordinates] expected a list of 4 coordinate names, e.g. "
                 "[\"t\", \"x\", \"y\", \"z\"]"),
    Case("parameter-and-define",
         content=HEAD + PARAMS + '[define]\nR = "2*sigma"\nf = "1"\n[metric]\n'
                 f"line_element = {q(LINE)}\n",
         message="{path}: [define.R] 'R' is declared twice (already a parameter)"),
    Case("parameter-shadows-sin",
         content=HEAD + "[parameters]\nsin = 1.0\n[metric]\n"
                 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [parameters.sin] parameter 'sin' shadows the function sin(); choose "
                 "another name"),
    Case("parameter-shadows-pi",
         content=HEAD + "[parameters]\npi = 3.0\n[metric]\n"
                 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [parameters.pi] parameter 'pi' shadows the constant pi; choose "
                 "another name"),
    Case("parameter-shadows-dx",
         content=HEAD + "[parameters]\ndx = 0.1\n[metric]\n"
                 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [parameters.dx] parameter 'dx' looks like the differential of "
                 "coordinate 'x'; choose another name"),
    Case("parameter-cyrillic-name",
         content=HEAD + '[parameters]\n"\u0430" = 1.0\n[metric]\n'
                 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [parameters.\u0430] '\u0430' is not a valid name (ASCII letters, "
                 "digits and '_', not starting with a digit, no dunder names)"),
    Case("parameter-dunder-name",
         content=HEAD + "[parameters]\n__class__ = 1.0\n[metric]\n"
                 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [parameters.__class__] '__class__' is not a valid name (ASCII "
                 "letters, digits and '_', not starting with a digit, no dunder names)"),
    Case("define-uses-later",
         content=HEAD + PARAMS + '[define]\nf = "g*2"\ng = "x"\n[metric]\n'
                 f"line_element = {q(LINE)}\n",
         message="{path}: [define.f] 'g' is defined below 'f' in [define] at column 1 of "
                 "'g*2' (a definition may use only those above it; move 'g' above 'f')",
         error=ExpressionError),
    # -- files and TOML ------------------------------------------------------------
    Case("empty-file", content="",
         message="{path}: file is empty; a metric file needs at least name, coordinates and "
                 "[metric]"),
    Case("non-utf8", content=b'name = "caf\xe9"\n',
         message="{path}: not UTF-8 text (byte 11)"),
    Case("invalid-toml", content='name = "m"\ncoordinates = ["t" "x"]\n',
         message=r"{path}: not valid TOML: .+ \(at line 2, column 20\)", regex=True),
    Case("toml-nested-arrays", content="a = " + "[" * 5000 + "]" * 5000 + "\n",
         message=r"{path}: not valid TOML: .+", regex=True),
    Case("name-number",
         content='name = 3\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
                 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [name] expected a string, got an integer 3"),
    Case("parameter-string", content=HEAD + '[parameters]\nv = "0.5"\n[metric]\n'
                                     f"line_element = {q('-dt**2 + dx**2 + dy**2 + dz**2')}\n",
         message="{path}: [parameters.v] expected a number, got a string '0.5'"),
    Case("parameter-boolean", content=HEAD + "[parameters]\nv = true\n[metric]\n"
                                      f"line_element = {q('-dt**2 + dx**2 + dy**2 + dz**2')}\n",
         message="{path}: [parameters.v] expected a number, got a boolean True"),
    Case("parameter-nan", content=HEAD + "[parameters]\nv = nan\n[metric]\n"
                                  f"line_element = {q('-dt**2 + dx**2 + dy**2 + dz**2')}\n",
         message="{path}: [parameters.v] expected a finite number, got nan"),
    Case("points-float", content=with_tail(REGION + "points = 2.5\n"),
         message="{path}: [region.points] expected an integer number of samples, got a "
                 "number 2.5"),
    Case("points-boolean", content=with_tail(REGION + "points = true\n"),
         message="{path}: [region.points] expected an integer number of samples, got a "
                 "boolean True"),
    Case("points-one", content=with_tail(REGION + "points = 1\n"),
         message="{path}: [region.points] at least 2 samples per sampled axis, got 1"),
    Case("points-table-not-axis", content=with_tail(REGION + "points = { y = 9 }\n"),
         message="{path}: [region.points.y] 'y' is not a sampled axis; sampled axes: x"),
    Case("unknown-top-level-key",
         content=BASE.replace("[parameters]", "[parmeters]"),
         message="{path}: [parmeters] unknown key 'parmeters' in the top level; did you mean "
                 "'parameters'?"),
    Case("unknown-units-key", content=with_tail("[units]\nlenght_m = 100.0\n"),
         message="{path}: [units.lenght_m] unknown key 'lenght_m' in [units]; did you mean "
                 "'length_m'?"),
    Case("top-level-key-after-table",
         content='name = "m"\n[parameters]\nv = 0.5\ncoordinates = ["t", "x", "y", "z"]\n'
                 '[metric]\nline_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message=f"{{path}}: [coordinates] missing required key 'coordinates'; it is under "
                 f"[parameters]: {TOP_FIRST}"),
    Case("line-element-at-top",
         content=HEAD + 'line_element = "-dt**2 + dx**2 + dy**2 + dz**2"\n',
         message="{path}: [line_element] 'line_element' belongs under [metric], not the top "
                 "level"),
    Case("line-element-under-region",
         content=with_tail(REGION + 'line_element = "-dt**2"\n'),
         message="{path}: [region.line_element] 'line_element' belongs under [metric], not "
                 "[region]"),
    Case("lapse-under-metric",
         content=with_define(WALL) + 'lapse = "1"\n',
         message="{path}: [metric.lapse] 'lapse' belongs under [metric.adm], not [metric]"),
    Case("both-line-and-components",
         content=with_tail('[metric.components]\n"t t" = "-1"\n'),
         message="{path}: [metric] give exactly one of line_element, [metric.components] or "
                 "[metric.adm] (found line_element, components)"),
    Case("adm-shift-two",
         content=HEAD + '[metric.adm]\nlapse = "1"\nshift = ["0.5", "0"]\nspatial = "identity"\n',
         message="{path}: [metric.adm.shift] shift must be a list of 3 expressions (upper "
                 "index, in the order of the spatial coordinates)"),
    Case("adm-not-symmetric",
         content=HEAD + '[metric.adm]\nlapse = "1"\nshift = ["0", "0", "0"]\n'
                 'spatial = [["1", "x/10", "0"], ["y/10", "1", "0"], ["0", "0", "1"]]\n',
         message="{path}: [metric.adm.spatial] spatial metric is not symmetric: [0][1] = "
                 "'x/10' but [1][0] = 'y/10'; write the same expression in both places"),
    # -- region and crew -----------------------------------------------------------
    Case("region-low-equals-high",
         content=with_tail("[region]\nt = 0.0\nx = [1.0, 1.0]\ny = 0.0\nz = 0.0\n"),
         message="{path}: [region.x] low must be below high, got [1, 1]"),
    Case("region-missing-coordinate",
         content=with_tail("[region]\nt = 0.0\nx = [-1.0, 1.0]\ny = 0.0\n"),
         message="{path}: [region.z] coordinate 'z' is neither fixed nor sampled; give "
                 "z = value or z = [low, high]"),
    Case("region-exclude-lambda",
         content=with_tail(REGION + 'exclude = "(lambda: 1)()"\n'),
         message="{path}: [region.exclude] a lambda cannot be called at column 1 of "
                 "'(lambda: 1)()' (only the listed functions can be called, by name)",
         error=ExpressionError),
    Case("crew-speed-of-light",
         content=with_tail("[crew]\nstart = { t = 0.0, x = 0.0, y = 0.0, z = 0.0 }\n"
                           "velocity = [0.6, 0.8, 0.0]\nduration = 1.0\n"),
         message="{path}: [crew.velocity] |velocity| = 1 is not below 1 (the speed of light)"),
    Case("crew-start-missing-coordinate",
         content=with_tail("[crew]\nstart = { t = 0.0, x = 0.0, y = 0.0 }\n"
                           "velocity = [0.0, 0.0, 0.0]\nduration = 1.0\n"),
         message="{path}: [crew.start] start event lacks coordinate 'z'"),
    Case("crew-start-injection",
         content=with_tail("[crew]\nstart = { t = \"__import__('os')\", x = 0.0, y = 0.0, "
                           "z = 0.0 }\nvelocity = [0.0, 0.0, 0.0]\nduration = 1.0\n"),
         message="{path}: [crew.start.t] dunder name '__import__' is not allowed at column 1 "
                 "of '__import__('os')'", error=ExpressionError),
    Case("crew-unknown-frame", content=with_tail('[crew]\nframe = "eulerain"\n'),
         message="{path}: [crew.frame] unknown frame 'eulerain'; choose one of eulerian, static "
                 "(did you mean 'eulerian'?)"),
    # -- command line --------------------------------------------------------------
    Case("set-unknown-parameter", content=BASE, sets=("sigam=4",), error=UsageError,
         message="--set sigam: no parameter named 'sigam' in {path}; did you mean 'sigma'?"),
    Case("set-injection", content=BASE, sets=("v=__import__('os')",), error=UsageError,
         message="--set v: dunder name '__import__' is not allowed at column 1 of "
                 "'__import__('os')'"),
    Case("set-without-value", content=BASE, sets=("v",), error=UsageError,
         message="--set expects NAME=VALUE, got 'v'"),
    Case("at-missing-coordinate", content=BASE, at="t=0,x=1,y=0", error=UsageError,
         message="--at: give every coordinate; missing z"),
    Case("at-unknown-coordinate", content=BASE, at="t=0,x=1,y=0,zz=0", error=UsageError,
         message="--at: 'zz' is not a coordinate of 'Hostile-input base'; did you mean 'z'?"),
    Case("at-bad-expression", content=BASE, at="t=0,x=1,y=0,z=open('f')", error=UsageError,
         message=f"--at z: unknown function 'open' at column 1 of 'open('f')' "
                 f"(available: {AVAILABLE})"),
    Case("at-uses-coordinate", content=BASE, at="t=0,x=1,y=0,z=x", error=UsageError,
         message="--at z: coordinate 'x' cannot be used in a value of --at at column 1 of 'x' "
                 "(values may use numbers, pi and the parameters)"),
    Case("at-not-finite", content=BASE, at="t=0,x=1,y=0,z=1e999", error=UsageError,
         message="--at z: a non-finite number is not allowed at column 1 of '1e999'"),
]

assert len({c.id for c in CASES}) == len(CASES)


def write(tmp_path: Path, case: Case) -> Path:
    path = tmp_path / "hostile.toml"
    data = case.content if isinstance(case.content, bytes) else case.content.encode("utf-8")
    path.write_bytes(data)
    return path


def load_and_probe_event(path: Path, case: Case):
    """What the CLI does before any geometry: load with overrides, parse --at."""
    metric = load_metric(path, overrides=parse_overrides(case.sets))
    return parse_event(metric, case.at)


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_library_raises_pinned_input_error(case, tmp_path):
    path = write(tmp_path, case)
    with pytest.raises(InputError) as info:
        load_and_probe_event(path, case)
    exc = info.value
    assert type(exc) is case.error, f"{type(exc).__name__}: {exc}"
    message = str(exc)
    assert "\n" not in message
    assert case.matches(message, path), f"\n got: {message}\nwant: {case.expected(path)}"


def run_cli(argv, capsys):
    try:
        code = cli.main(argv)
    except SystemExit as stop:  # argparse errors leave through SystemExit
        code = stop.code
    return code, *capsys.readouterr()


def probe_argv(path: Path, case: Case, json_path: Path) -> list[str]:
    argv = ["probe", str(path), "--at", case.at, "--json", str(json_path)]
    for item in case.sets:
        argv += ["--set", item]
    return argv


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_cli_prints_one_line_and_exits_2(case, tmp_path, capsys):
    path = write(tmp_path, case)
    json_path = tmp_path / "out.json"
    code, out, err = run_cli(probe_argv(path, case, json_path), capsys)
    assert code == 2, err
    assert out == ""
    assert err.count("\n") == 1 and err.endswith("\n"), err
    assert err.startswith("auditor: error: ")
    assert "Traceback" not in err
    line = err[len("auditor: error: "):-1]
    if case.regex:
        assert case.matches(line, path), line
    else:
        assert line == " ".join(case.expected(path).split())
    assert not json_path.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["hostile.toml"]  # no partial file


@pytest.mark.parametrize("case_id", ["import-system", "huge-exp-tower", "non-utf8",
                                     "set-unknown-parameter", "at-missing-coordinate"])
def test_cli_subprocess_exit_code_and_no_traceback(case_id, tmp_path):
    """The real process: exit status 2, one stderr line, no traceback, no file."""
    case = next(c for c in CASES if c.id == case_id)
    path = write(tmp_path, case)
    json_path = tmp_path / "out.json"
    proc = subprocess.run([sys.executable, "-m", "auditor", *probe_argv(path, case, json_path)],
                          capture_output=True, text=True, timeout=120,
                          env={**os.environ, "AUDITOR_DEBUG": ""})
    assert proc.returncode == 2, proc.stderr
    assert proc.stdout == ""
    assert proc.stderr.count("\n") == 1 and proc.stderr.startswith("auditor: error: ")
    assert "Traceback" not in proc.stderr
    assert not json_path.exists()


def test_comma_inside_atan2_in_at_works(tmp_path, capsys):
    """Commas inside brackets do not split --at (docs: cli-contract.md, probe)."""
    path = tmp_path / "flat_spherical.toml"
    path.write_text('name = "Flat, spherical"\ncoordinates = ["t", "r", "th", "ph"]\n'
                    "[metric.components]\n"
                    '"t t" = "-1"\n"r r" = "1"\n"th th" = "r**2"\n"ph ph" = "r**2*sin(th)**2"\n')
    metric = load_metric(path)
    event = parse_event(metric, "t=0, r=2, th=atan2(1,2), ph=atan2(-1, 1)")
    assert event == pytest.approx({"t": 0.0, "r": 2.0, "th": 0.4636476090008061,
                                   "ph": -0.7853981633974483}, abs=1e-15)
    json_path = tmp_path / "out.json"
    code, out, err = run_cli(["probe", str(path), "--at", "t=0,r=2,th=atan2(1,2),ph=0",
                              "--json", str(json_path)], capsys)
    assert code == 0, err
    written = json.loads(json_path.read_text())
    assert written["point"]["th"] == pytest.approx(0.4636476090008061, abs=1e-15)
    # g_th,th = r^2 = 4 and g_ph,ph = r^2 sin^2(th) = 4/5 at th = atan(1/2)
    assert written["g"][2][2] == pytest.approx(4.0, rel=1e-14)
    assert written["g"][3][3] == pytest.approx(4.0 / 5.0, rel=1e-14)


def test_argparse_usage_errors_are_one_line(tmp_path, capsys):
    path = tmp_path / "base.toml"
    path.write_text(BASE)
    for argv, fragment in [
        (["probe", str(path), "--at", CART_AT, "--points", "x"], "invalid int value: 'x'"),
        (["probe", str(path)], "the following arguments are required: --at"),
        (["probe", str(path), "--at", CART_AT, "--points", "1"], "--points must be at least 2"),
        (["probe", str(tmp_path / "missing.toml"), "--at", CART_AT], "cannot read file"),
        (["probe", str(tmp_path), "--at", CART_AT], "is a directory"),
    ]:
        code, out, err = run_cli(argv, capsys)
        assert code == 2, (argv, err)
        assert err.count("\n") == 1 and err.startswith("auditor: error: ") and fragment in err


# -- user text never reaches an evaluator ------------------------------------------

class Evaluated(BaseException):
    """Raised by the traps below; a BaseException, so no ``except Exception`` hides it."""


@contextlib.contextmanager
def evaluation_trapped(monkeypatch):
    """Replace every way of running text as code by a trap, for the duration."""
    real_compile, real_sympify = builtins.compile, sympy.sympify

    def trap(name):
        def refuse(*args, **kwargs):
            raise Evaluated(f"{name} called with {args[:1]!r}")
        return refuse

    def compile_to_tree_only(source, filename, mode, flags=0, *args, **kwargs):
        if not flags & ast.PyCF_ONLY_AST:
            raise Evaluated(f"compile called on {source!r}")
        return real_compile(source, filename, mode, flags, *args, **kwargs)

    def sympify_without_strings(a, *args, **kwargs):
        if isinstance(a, str):
            raise Evaluated(f"sympify called on {a!r}")
        return real_sympify(a, *args, **kwargs)

    with monkeypatch.context() as m:
        m.setattr(builtins, "eval", trap("eval"))
        m.setattr(builtins, "exec", trap("exec"))
        m.setattr(builtins, "compile", compile_to_tree_only)
        m.setattr(sympy, "sympify", sympify_without_strings)
        m.setattr(SYMPIFY_MODULE, "sympify", sympify_without_strings)
        m.setattr(sympy_parser, "parse_expr", trap("parse_expr"))
        m.setattr(sympy_parser, "eval_expr", trap("eval_expr"))
        m.setattr(sympy, "parse_expr", trap("parse_expr"), raising=False)
        m.setattr(sympy, "lambdify", trap("lambdify"))
        yield


SAMPLE_FILES = sorted(SAMPLES_DIR.glob("*.toml"))

THREE_FORMS = [
    BASE,
    SPH_HEAD + '[metric.components]\n"t t" = "-(1 - 2*M/r)"\n"r r" = "1/(1 - 2*M/r)"\n'
    + SPH_DIAGONAL + "[region]\nt = 0.0\nr = [3.0, 6.0]\ntheta = 1.0\nphi = 0.0\n"
    + 'exclude = "2.2*M - r"\n',
    HEAD + PARAMS + f"[define]\nf = {q(WALL)}\n"
    '[metric.adm]\nlapse = "1"\nshift = ["-v*f", "0", "0"]\nspatial = "identity"\n'
    + REGION + "[crew]\n" + CREW_OK,
]


@pytest.fixture(scope="module")
def warmed_up():
    """Load each form once without traps, so that lazy imports (which run module
    code through exec) happen before the traps are set."""
    for text in THREE_FORMS:
        loads_metric(text)
    for path in SAMPLE_FILES:
        load_metric(path)
    with contextlib.suppress(InputError):
        loads_metric(with_line("-dt**2 + sin(dx)**2 + dy**2 + dz**2"))


@pytest.mark.parametrize("path", SAMPLE_FILES, ids=[p.stem for p in SAMPLE_FILES])
def test_samples_load_without_evaluating_text(path, warmed_up, monkeypatch):
    with evaluation_trapped(monkeypatch):
        metric = load_metric(path)
    assert metric.g.shape == (4, 4)


@pytest.mark.parametrize("index", range(len(THREE_FORMS)))
def test_three_forms_load_without_evaluating_text(index, warmed_up, monkeypatch):
    with evaluation_trapped(monkeypatch):
        metric = loads_metric(THREE_FORMS[index])
    assert metric.form == ("line_element", "components", "adm")[index]


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_hostile_files_fail_without_evaluating_text(case, tmp_path, warmed_up, monkeypatch):
    path = write(tmp_path, case)
    with evaluation_trapped(monkeypatch):
        with pytest.raises(InputError):
            load_and_probe_event(path, case)


def test_the_traps_do_fire(monkeypatch):
    """The test above can fail: with the traps set, evaluating text is caught."""
    with evaluation_trapped(monkeypatch):
        for attempt in (lambda: eval("1"), lambda: exec("x = 1"), lambda: sympy.sympify("x"),
                        lambda: sympy_parser.parse_expr("x"), lambda: compile("1", "<s>", "eval")):
            with pytest.raises(Evaluated):
                attempt()
        assert isinstance(ast.parse("x + 1", mode="eval"), ast.Expression)


PAYLOAD = "__import__('pathlib').Path({canary!r}).touch()"


@pytest.mark.parametrize("where", ["define", "line_element", "component", "lapse", "exclude",
                                   "crew_start", "at", "set"])
def test_payloads_leave_no_trace(where, tmp_path, capsys):
    """A payload that would create a file if it ever ran creates none."""
    canary = tmp_path / "canary"
    payload = PAYLOAD.format(canary=str(canary))
    at, sets = CART_AT, []
    if where == "define":
        text = with_define(payload)
    elif where == "line_element":
        text = with_line(f"{payload}*dx**2 - dt**2 + dy**2 + dz**2")
    elif where == "component":
        text = HEAD + f'[metric.components]\n"t t" = "-1"\n"x x" = {q(payload)}\n'
    elif where == "lapse":
        text = HEAD + f'[metric.adm]\nlapse = {q(payload)}\nshift = ["0", "0", "0"]\n' \
                      'spatial = "identity"\n'
    elif where == "exclude":
        text = with_tail(REGION + f"exclude = {q(payload)}\n")
    elif where == "crew_start":
        text = with_tail(f"[crew]\nstart = {{ t = {q(payload)}, x = 0.0, y = 0.0, z = 0.0 }}\n"
                         "velocity = [0.0, 0.0, 0.0]\nduration = 1.0\n")
    elif where == "at":
        text, at = BASE, f"t=0,x=1,y=0,z={payload}"
    else:
        text, sets = BASE, ["--set", f"v={payload}"]
    path = tmp_path / "payload.toml"
    path.write_text(text)
    code, out, err = run_cli(["probe", str(path), "--at", at, *sets], capsys)
    assert code == 2 and err.startswith("auditor: error: ") and err.count("\n") == 1, err
    assert not canary.exists()


def test_direct_parser_calls_on_hostile_text_are_expression_errors(warmed_up, monkeypatch):
    """parse_expression itself, on each hostile expression above, raises
    ExpressionError and never evaluates."""
    names = {n: sympy.Symbol(n, real=True) for n in ("t", "x", "y", "z", "v", "sigma", "R")}
    texts = [tomllib_define(c.content) for c in CASES
             if isinstance(c.content, str) and c.error is ExpressionError
             and tomllib_define(c.content) is not None]
    assert len(texts) >= 30
    for text in texts:
        with evaluation_trapped(monkeypatch):
            with pytest.raises(ExpressionError):
                parse_expression(text, names, path="f.toml", key="define.f")


def tomllib_define(content: str) -> str | None:
    """The ``[define] f`` text of a case file, if it has one that is not the wall."""
    import tomllib
    try:
        doc = tomllib.loads(content)
    except tomllib.TOMLDecodeError:
        return None
    f = doc.get("define", {}).get("f")
    return None if f in (None, WALL) else f
