"""The one number format of the report (PDF and LaTeX).

Every number the report prints goes through :func:`number_parts`, so the PDF,
the LaTeX table and the tests agree digit for digit with the JSON:

* :data:`SIG_DIGITS` = 4 significant digits, rounded half-even by Python's
  ``format`` (``'g'`` rules), trailing zeros dropped (``0.5``, ``64``);
* plain decimal notation for 10⁻³ ≤ |v| < 10⁴ (after rounding), otherwise a mantissa times a
  power of ten (``−6.797 × 10⁴⁴``), written with Unicode superscripts in the
  PDF and ``\\times 10^{44}`` in LaTeX;
* a true minus sign (U+2212) in the PDF;
* missing or non-finite values (JSON ``null``) print as an em dash;
* a margin within its round-off tolerance prints as ``0 ± tol`` (tolerance to
  2 digits): it is zero as far as the arithmetic can tell (saturated);
* counts are exact integers, grouped in threes by a thin space from 10 000 on;
* fractions of audited events print as percentages, ``format_number(100 f)`` + " %"
  (a fraction below one that would round to 100 prints as "> 99.99 %").
"""

from __future__ import annotations

import math

__all__ = ["SIG_DIGITS", "MISSING", "number_parts", "format_number", "format_percent",
           "format_count", "format_point", "latex_number", "format_margin", "latex_margin"]

#: Significant digits of every printed non-integer number.
SIG_DIGITS = 4
#: Printed for a missing or non-finite value.
MISSING = "\u2014"
MINUS = "\u2212"
_SUPER = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")
#: Plain notation inside [_LOW, _HIGH).
_LOW, _HIGH = 1e-3, 1e4


def _finite(v) -> float | None:
    if v is None or isinstance(v, bool):
        return None
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def number_parts(v, digits: int = SIG_DIGITS) -> tuple[bool, str, int | None] | None:
    """(negative, mantissa, exponent or None) of ``v`` rounded to ``digits``.

    None for a missing or non-finite value. The exponent is chosen after
    rounding, so 9999.5 prints as 10⁴, not 10000.
    """
    f = _finite(v)
    if f is None:
        return None
    if f == 0.0:
        return (False, "0", None)
    neg, a = f < 0, abs(f)
    text = f"{a:.{digits - 1}e}"               # d.ddde±XX, correctly rounded
    mant, exp = text.split("e")
    exp = int(exp)
    if _LOW <= float(text) < _HIGH:
        plain = f"{float(text):.{digits}g}"
        if "e" not in plain:
            return (neg, plain, None)
    mant = mant.rstrip("0").rstrip(".") if "." in mant else mant
    return (neg, mant, exp)


def format_number(v, digits: int = SIG_DIGITS) -> str:
    """The PDF form of a number (see module docstring)."""
    parts = number_parts(v, digits)
    if parts is None:
        return MISSING
    neg, mant, exp = parts
    sign = MINUS if neg else ""
    if exp is None:
        return sign + mant
    if mant == "1":
        return f"{sign}10{str(exp).translate(_SUPER)}"
    return f"{sign}{mant} × 10{str(exp).translate(_SUPER)}"


def latex_number(v, digits: int = SIG_DIGITS) -> str:
    """The LaTeX (math mode, with $...$) form of the same rounded number."""
    parts = number_parts(v, digits)
    if parts is None:
        return "---"
    neg, mant, exp = parts
    sign = "-" if neg else ""
    if exp is None:
        return f"${sign}{mant}$"
    if mant == "1":
        return f"${sign}10^{{{exp}}}$"
    return f"${sign}{mant}\\times 10^{{{exp}}}$"


def _within(value, tol) -> bool:
    v, t = _finite(value), _finite(tol)
    return v is not None and t is not None and abs(v) <= t


def format_margin(value, tol=None, digits: int = SIG_DIGITS) -> str:
    """A margin: ``0 ± tol`` where it is zero within its round-off tolerance
    (saturated: its digits are round-off), else :func:`format_number`."""
    if _within(value, tol):
        return "0 ± " + format_number(tol, 2)
    return format_number(value, digits)


def latex_margin(value, tol=None, digits: int = SIG_DIGITS) -> str:
    """The LaTeX form of :func:`format_margin`."""
    if _within(value, tol):
        return "$0 \\pm " + latex_number(tol, 2)[1:]
    return latex_number(value, digits)


def format_percent(fraction, digits: int = SIG_DIGITS) -> str:
    """A fraction of events as a percentage: ``format_number(100 f)`` + " %"."""
    f = _finite(fraction)
    if f is None:
        return MISSING
    text = format_number(100.0 * f, digits)
    if f < 1.0 and text == "100":        # not every event: never print a rounded 100 %
        text = "> " + format_number(100.0 - 10.0 ** (2 - digits), digits)
    return text + "\u2009%"


def format_count(n) -> str:
    """An exact count; thin-space groups of three from 10 000 on."""
    if n is None:
        return MISSING
    n = int(n)
    s = str(abs(n))
    if len(s) > 4:
        groups = []
        while s:
            groups.insert(0, s[-3:])
            s = s[:-3]
        s = "\u2009".join(groups)
    return (MINUS if n < 0 else "") + s


def format_point(point: dict | None, only=None) -> str:
    """``x = 0.2, y = −0.4`` for the coordinates in ``only`` (all if None)."""
    if not point:
        return MISSING
    keys = [k for k in point if only is None or k in only]
    return ", ".join(f"{k} = {format_number(point[k])}" for k in keys)
