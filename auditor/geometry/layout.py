"""Row layout of the raw metric kernel output (no SymPy needed to read it).

Row ``GIDX[a, b]`` holds g_ab (10 rows), ``DIDX[c, a, b]`` holds ∂_c g_ab (40
rows from 10), ``D2IDX[c, d, a, b]`` holds ∂_c ∂_d g_ab (100 rows from 50);
symmetric index pairs share a row. See DEVELOPERS.md, "Array layout".
"""

from __future__ import annotations

from itertools import combinations_with_replacement

import numpy as np

__all__ = ["PAIRS", "GIDX", "DIDX", "D2IDX", "N_RAW"]

PAIRS = list(combinations_with_replacement(range(4), 2))      # 10 (a <= b)

GIDX = np.zeros((4, 4), dtype=np.intp)
for _k, (_a, _b) in enumerate(PAIRS):
    GIDX[_a, _b] = GIDX[_b, _a] = _k
DIDX = np.zeros((4, 4, 4), dtype=np.intp)
D2IDX = np.zeros((4, 4, 4, 4), dtype=np.intp)
_row = 10
for _c in range(4):
    for _k, (_a, _b) in enumerate(PAIRS):
        DIDX[_c, _a, _b] = DIDX[_c, _b, _a] = _row + 10 * _c + _k
_row = 50
for _m, (_c, _d) in enumerate(PAIRS):
    for _k, (_a, _b) in enumerate(PAIRS):
        for (cc, dd) in {(_c, _d), (_d, _c)}:
            for (aa, bb) in {(_a, _b), (_b, _a)}:
                D2IDX[cc, dd, aa, bb] = _row + 10 * _m + _k
N_RAW = 150
