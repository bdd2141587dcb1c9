"""Crew safety: tidal loads, sourced limits, worldlines."""

from .limits import CAUTION, Limit, WHOLE_BODY_LIMITS, tidal_levels
from .tidal import peak_accel_g, tidal_eigen, tidal_tensor

__all__ = ["CAUTION", "Limit", "WHOLE_BODY_LIMITS", "tidal_levels", "peak_accel_g",
           "tidal_eigen", "tidal_tensor"]
