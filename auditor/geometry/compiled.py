"""Compiling generated kernel source, after checking it (no SymPy needed).

Used for freshly generated source and for source read back from the kernel
cache alike: :func:`_check_source` refuses anything but our own names before
:func:`_compile` runs it.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import cached_property
from typing import Callable, Sequence

import numpy as np

__all__ = ["ScalarKernel", "MetricKernel", "kernel_from_source"]

_ALLOWED_NAME = re.compile(r"^(_c[0-3]|_p\d+|_t\d+|out|numpy|x|p|kernel)$")
_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z_0-9]*(?:\.[A-Za-z_][A-Za-z_0-9]*)?")
_NUMPY_ATTRS = {"sqrt", "exp", "log", "sin", "cos", "tan", "arcsin", "arccos", "arctan",
                "arctan2", "sinh", "cosh", "tanh", "arcsinh", "arccosh", "arctanh", "pi", "e",
                "errstate", "empty", "float64"}


def _check_source(src: str) -> None:
    """Refuse generated source that holds anything but our own names.

    Every identifier must be an internal symbol, a CSE temporary, ``numpy``
    or one of the whitelisted NumPy attributes. A guard against a future change
    letting a user name through: it fails loudly instead of compiling.
    """
    if not src.isascii():
        raise RuntimeError("generated source holds non-ASCII characters")
    # The one string literal the generator writes is 'ignore' (numpy.errstate):
    # with it removed, no quote, escape or comment character may remain (a
    # plain scan, stricter than tokenizing and a fraction of its time).
    rest = src.replace("'ignore'", "")
    for ch in ("'", '"', "\\", "#"):
        if ch in rest:
            raise RuntimeError(f"generated source holds a string literal or a {ch!r}")
    for tok in set(_IDENTIFIER.findall(src)):
        if tok in ("def", "return", "with", "for", "in", "None", "range", "all", "ignore"):
            continue
        if tok.startswith("numpy."):
            if tok[6:] not in _NUMPY_ATTRS:
                raise RuntimeError(f"generated source uses numpy.{tok[6:]}")
            continue
        if tok == "e":      # exponent of a float literal like 1e-3 (no name starts with a digit)
            continue
        if not _ALLOWED_NAME.match(tok):
            raise RuntimeError(f"generated source holds an unexpected name {tok!r}")


def _compile(src: str) -> Callable:
    namespace: dict = {"numpy": np, "__builtins__": {}}
    code = compile(src, "<auditor-kernel>", "exec")
    exec(code, namespace)  # noqa: S102 - source built from internal symbols only, checked above
    return namespace["kernel"]


@dataclass(frozen=True)
class ScalarKernel:
    """Vectorised evaluation of a list of expressions in the internal symbols."""

    source: str
    n_out: int
    _fn: Callable

    def __call__(self, x: np.ndarray, params: Sequence[float]) -> np.ndarray:
        """``x`` is (4, N) coordinates; returns (n_out, N) float64."""
        x = np.asarray(x, dtype=np.float64)
        out = np.empty((self.n_out, x.shape[1]), dtype=np.float64)
        p = np.asarray(params, dtype=np.float64)
        self._fn(x, p, out)
        return out


_CONSTANT_ROW = re.compile(r"^ +out\[(\d+)\] = (-?\d+(?:\.\d*)?(?:e-?\d+)?)$", re.M)


@dataclass(frozen=True)
class MetricKernel(ScalarKernel):
    """The raw kernel of one metric: g, ∂g and ∂∂g (150 rows)."""

    @cached_property
    def constant_rows(self) -> np.ndarray:
        """(150,) float: the value of each row the kernel fills with one number
        at every event (an entry or derivative that is identically constant,
        such as ∂_t g of a static metric), NaN for the others."""
        rows = np.full(self.n_out, np.nan)
        for k, v in _CONSTANT_ROW.findall(self.source):
            rows[int(k)] = float(v)
        return rows


def kernel_from_source(source: str, n_out: int, cls=ScalarKernel) -> ScalarKernel:
    """Check and compile stored kernel source (raises RuntimeError if refused)."""
    _check_source(source)
    return cls(source, n_out, _compile(source))
