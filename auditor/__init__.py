"""auditor: audit proposed spacetime metrics.

Exact curvature from symbolic derivatives compiled to numeric kernels, energy
conditions for all observers, exotic-matter regions and budgets, crew tidal
loads, and appendix-ready reports. Conventions: DEVELOPERS.md.
"""

__version__ = "0.1.0"

from .errors import AuditorError, InputError  # noqa: E402
from .metric import load_metric, loads_metric  # noqa: E402
from .probe import probe  # noqa: E402

__all__ = ["__version__", "AuditorError", "InputError", "load_metric", "loads_metric", "probe"]
