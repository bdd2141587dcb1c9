"""auditor: audit proposed spacetime metrics.

Exact curvature from symbolic derivatives compiled to numeric kernels, energy
conditions for all observers, exotic-matter regions and budgets, crew tidal
loads, and appendix-ready reports. Conventions: DEVELOPERS.md.
"""

__version__ = "0.1.0"

from .errors import AuditorError, InputError  # noqa: E402

__all__ = ["__version__", "AuditorError", "InputError", "load_metric", "loads_metric", "probe"]


def __getattr__(name):
    # Imported on first use: the loader needs SymPy, which a warm start avoids.
    if name in ("load_metric", "loads_metric"):
        from . import metric
        return getattr(metric, name)
    if name == "probe":
        from .probe import probe
        return probe
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
