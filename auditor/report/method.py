"""Settings of the computation quoted in the report's method appendix.

These are the code's own constants (read from the modules that use them, so
the appendix cannot drift from the code), not results; results come from the
JSON (:mod:`.model`).
"""

from __future__ import annotations

from .numbers import MISSING, format_count, format_number

__all__ = ["method_view"]


def _const(module: str, name: str):
    import importlib
    try:
        return getattr(importlib.import_module(module), name)
    except (ImportError, AttributeError):
        return None


def _num(v):
    return MISSING if v is None else format_number(v)


def _count(v):
    return MISSING if v is None else format_count(v)


def method_view(j: dict, result) -> dict:
    """Formatted constants for the method appendix."""
    from .. import units
    crew = j.get("crew")
    return {
        "tol_factor": _num(_const("auditor.conditions.stress", "TOL_FACTOR")),
        "margin_factor": _num(_const("auditor.conditions.stress", "MARGIN_FACTOR")),
        "refine_levels": _count(_const("auditor.audit", "REFINE_LEVELS")),
        "refine_per_axis": _count(_const("auditor.audit", "REFINE_PER_AXIS")),
        "max_regions": _count(_const("auditor.audit", "MAX_REGIONS")),
        "cross_points": _count(_const("auditor.audit", "CROSS_CHECK_POINTS")),
        "cross_dirs": _count(_const("auditor.audit", "CROSS_CHECK_DIRECTIONS")),
        "rtol": _num(_const("auditor.crew.worldline", "RTOL")),
        "atol": _num(_const("auditor.crew.worldline", "ATOL")),
        "drift": _num(_const("auditor.crew.worldline", "DRIFT_LIMIT")),
        "samples": _count(_const("auditor.crew.worldline", "SAMPLES")),
        # constants at the digits of their definitions (c, g_n exact; G CODATA 2018)
        "c": format_number(units.C_M_S, 9), "G": format_number(units.G_SI, 5),
        "g_n": format_number(units.G_STANDARD_M_S2, 6),
        "crew": crew is not None,
        "frame": j["tidal"]["frame"],
    }
