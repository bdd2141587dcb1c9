"""Energy conditions on orthonormal-frame stress-energy tensors.

Kernels (all vectorised over a batch of points, input T of shape (N, 4, 4),
lower-index orthonormal-frame components; see DEVELOPERS.md "Conventions"):

* :mod:`.margins` — exact NEC/WEC/SEC margins (trust-region secular
  equation) and the DEC margin (global search with exact refinement);
* :mod:`.hawking_ellis` — Hawking–Ellis type from the Jordan structure of
  T^a_b;
* :mod:`.sampled` — sampled minima over a finite observer set, the
  cross-check of the exact margins.
"""

from .hawking_ellis import TYPE_NAMES, classify
from .margins import (Margins, all_margins, dec_lower_bound, dec_margin, nec_margin,
                      sec_margin, wec_margin)
from .sampled import SampledMargins, fibonacci_directions, sampled_margins

__all__ = [
    "Margins",
    "SampledMargins",
    "TYPE_NAMES",
    "all_margins",
    "classify",
    "dec_lower_bound",
    "dec_margin",
    "fibonacci_directions",
    "nec_margin",
    "sampled_margins",
    "sec_margin",
    "wec_margin",
]
