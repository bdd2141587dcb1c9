"""Exact sums of float64 values, rounded once.

A region audit adds up millions of products (volumes, ∫ min(margin, 0) dV,
energies) chunk by chunk. A float sum depends on how the values are split into
chunks and in which order they are added; :class:`ExactSum` does not: it keeps
the exact sum and rounds it to the nearest double only when asked, so the
result is the correctly rounded sum whatever the chunk size, the number of
processes or the order of the chunks.

Each finite x is M · 2^(e − 53) with M an integer, |M| < 2^53 (``numpy.frexp``).
Split M = H · 2^26 + L with |H| < 2^27 and 0 ≤ L < 2^26: the sums of H and of L
over fewer than 2^26 values stay below 2^53 and are therefore exact in float64.
They are kept per exponent bin (``numpy.bincount``) in two float arrays across
calls (for up to 64 totals; with more, each call's bins are added at once);
every 2^25 values, and when a sum is asked for, the bins are added as Python
integers in units of 2^−1126 (the smallest subnormal is 2^−1074 =
2^52 · 2^−1126) and the total is divided once; Python's int / int division is
correctly rounded. Non-finite values are added apart as floats (inf and nan
propagate as in any float sum). The binning runs in the compiled loops of
:mod:`auditor.native` where they are built (the same operations).
"""

from __future__ import annotations

import numpy as np

from . import native

__all__ = ["ExactSum"]

_UNIT = 1126                  # totals are integers in units of 2^-_UNIT
_EXP_OFFSET, _EXP_SPAN = 1100, 2200   # frexp exponents lie in [-1073, 1024]
_FLUSH_AT = 1 << 25           # values per bin sum: under 2^26 (exactness above)
_BINNED_TOTALS = 64           # totals whose bins are kept across calls


class ExactSum:
    """Exact running sums of float64 values, in ``groups`` independent totals."""

    def __init__(self, groups: int = 1):
        self.groups = int(groups)
        self._total = [0] * self.groups
        self._special = [0.0] * self.groups
        # Σ H and Σ L per (group, exponent), kept across calls for up to
        # _BINNED_TOTALS totals (2.2 MiB); with more, each call's bins go
        # straight into the integers (memory stays proportional to the totals).
        binned = self.groups <= _BINNED_TOTALS
        self._hi = np.zeros(self.groups * _EXP_SPAN) if binned else None
        self._lo = np.zeros(self.groups * _EXP_SPAN) if binned else None
        self._pending = 0                                # values in the bins since the flush

    def add(self, values, groups=None) -> None:
        """Add ``values`` (any shape) to total 0, or each to total ``groups[i]``."""
        v = np.asarray(values, dtype=np.float64).ravel()
        g = None if groups is None else np.asarray(groups, dtype=np.int64).ravel()
        if g is not None and g.shape != v.shape:
            raise ValueError("values and groups differ in size")
        if g is not None and g.size and (g.min() < 0 or g.max() >= self.groups):
            raise ValueError(f"group numbers must lie in [0, {self.groups})")
        for a in range(0, v.size, _FLUSH_AT):
            self._add(v[a:a + _FLUSH_AT], None if g is None else g[a:a + _FLUSH_AT])

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
        if v.size == 0:
            return
        if self._hi is None:
            self._to_integers(*self._bins(v, g))
            return
        if self._pending + v.size > _FLUSH_AT:
            self._flush()
        self._pending += v.size                          # zeros counted too: a bound
        if native.available():      # the same bins, value by value in compiled code
            native.exact_bins(v, g, self._hi, self._lo, _EXP_OFFSET, _EXP_SPAN)
            return
        hi, lo, base = self._bins(v, g)
        self._hi[base:base + hi.size] += hi
        self._lo[base:base + lo.size] += lo

    @staticmethod
    def _bins(v, g):
        """Σ H and Σ L of the nonzero values per bin, bins base, base + 1, ..."""
        nz = v != 0.0
        if not nz.all():
            v = v[nz]
            g = None if g is None else g[nz]
        if v.size == 0:
            return np.zeros(0), np.zeros(0), 0
        mant, exp = np.frexp(v)
        # M = mant · 2^53 is an integer; H = floor(M / 2^26), L = M − H · 2^26, all
        # exact in float64 (scalings by powers of two, floor, an exact difference)
        hi = np.floor(mant * 2.0 ** 27)
        lo = mant * 2.0 ** 53 - hi * 2.0 ** 26
        key = exp + _EXP_OFFSET
        if g is not None:
            key = key + g * _EXP_SPAN
        base = int(key.min())
        key -= base
        return np.bincount(key, weights=hi), np.bincount(key, weights=lo), base

    def _to_integers(self, hi, lo, base) -> np.ndarray:
        """Add bin sums (bins base, base + 1, ...) to the Python-integer totals;
        returns the indices of the bins that were not zero."""
        used = np.flatnonzero((hi != 0.0) | (lo != 0.0))   # a zero sum adds nothing
        for k, h, l in zip((used + base).tolist(), hi[used].tolist(), lo[used].tolist()):
            grp, e = divmod(k, _EXP_SPAN)
            self._total[grp] += ((int(h) << 26) + int(l)) << (e - _EXP_OFFSET - 53 + _UNIT)
        return used

    def _flush(self) -> None:
        """Move the kept bin sums into the Python-integer totals."""
        if self._hi is None or self._pending == 0:
            return
        used = self._to_integers(self._hi, self._lo, 0)
        self._hi[used] = 0.0
        self._lo[used] = 0.0
        self._pending = 0

    def value(self, group: int = 0) -> float:
        """The sum of group ``group``, correctly rounded to a double."""
        self._flush()
        total, special = self._total[group], self._special[group]
        try:
            x = total / (1 << _UNIT)
        except OverflowError:
            x = float("inf") if total > 0 else float("-inf")
        return x if special == 0.0 else x + special     # nan == 0.0 is False

    def values(self) -> list[float]:
        return [self.value(k) for k in range(self.groups)]
