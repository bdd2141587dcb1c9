"""Exact sums of float64 values, rounded once.

A region audit adds up millions of products (volumes, ∫ min(margin, 0) dV,
energies) chunk by chunk. A float sum depends on how the values are split into
chunks and in which order they are added; :class:`ExactSum` does not: it keeps
the exact sum and rounds it to the nearest double only when asked, so the
result is the correctly rounded sum whatever the chunk size, the number of
processes or the order of the chunks.

Each finite x is M · 2^(e − 53) with M an integer, |M| < 2^53 (``numpy.frexp``).
Split M = H · 2^26 + L with |H| < 2^27 and 0 ≤ L < 2^26: the sums of H and of L
over fewer than 2^26 values stay below 2^53 and are therefore exact in float64
(``numpy.bincount`` over exponent bins). The sums per exponent are then added as Python integers
in units of 2^−1126 (the smallest subnormal is 2^−1074 = 2^52 · 2^−1126) and
divided once; Python's int / int division is correctly rounded. Non-finite
values are added apart as floats (inf and nan propagate as in any float sum).
"""

from __future__ import annotations

import numpy as np

__all__ = ["ExactSum"]

_UNIT = 1126                  # totals are integers in units of 2^-_UNIT
_EXP_OFFSET, _EXP_SPAN = 1100, 2200   # frexp exponents lie in [-1073, 1024]
_PIECE = 1 << 22              # values per bincount: well under 2^26 (exactness above)
_LOW = (1 << 26) - 1


class ExactSum:
    """Exact running sums of float64 values, in ``groups`` independent totals."""

    def __init__(self, groups: int = 1):
        self.groups = int(groups)
        self._total = [0] * self.groups
        self._special = [0.0] * self.groups

    def add(self, values, groups=None) -> None:
        """Add ``values`` (any shape) to total 0, or each to total ``groups[i]``."""
        v = np.asarray(values, dtype=np.float64).ravel()
        g = None if groups is None else np.asarray(groups, dtype=np.int64).ravel()
        if g is not None and g.shape != v.shape:
            raise ValueError("values and groups differ in size")
        for a in range(0, v.size, _PIECE):
            self._add(v[a:a + _PIECE], None if g is None else g[a:a + _PIECE])

    def _add(self, v, g):
        if v.size == 0:
            return
        fin = np.isfinite(v)
        if not fin.all():
            gs = np.zeros(v.size, np.int64) if g is None else g
            for k, x in zip(gs[~fin].tolist(), v[~fin].tolist()):
                self._special[k] += x
            v = v[fin]
            g = None if g is None else g[fin]
        nz = v != 0.0
        v = v[nz]
        if v.size == 0:
            return
        mant, exp = np.frexp(v)
        M = (mant * 2.0 ** 53).astype(np.int64)          # exact: |mant| < 1
        key = exp.astype(np.int64) + _EXP_OFFSET
        if g is not None:
            key += g[nz] * _EXP_SPAN
        base = int(key.min())
        key -= base
        hi = np.bincount(key, weights=(M >> 26).astype(np.float64))
        lo = np.bincount(key, weights=(M & _LOW).astype(np.float64))
        used = np.flatnonzero((hi != 0.0) | (lo != 0.0))   # a zero sum adds nothing
        for k, h, l in zip((used + base).tolist(), hi[used].tolist(), lo[used].tolist()):
            grp, e = divmod(k, _EXP_SPAN)
            self._total[grp] += ((int(h) << 26) + int(l)) << (e - _EXP_OFFSET - 53 + _UNIT)

    def value(self, group: int = 0) -> float:
        """The sum of group ``group``, correctly rounded to a double."""
        total, special = self._total[group], self._special[group]
        try:
            x = total / (1 << _UNIT)
        except OverflowError:
            x = float("inf") if total > 0 else float("-inf")
        return x if special == 0.0 else x + special     # nan == 0.0 is False

    def values(self) -> list[float]:
        return [self.value(k) for k in range(self.groups)]
