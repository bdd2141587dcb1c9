"""Exact curvature: symbolic derivatives, compiled kernels, batch evaluation."""

from .curvature import Curvature, curvature_from_raw
from .kernels import compile_metric, compile_scalars
from .points import DEFAULT_CHUNK, REASONS, Geometry, PointBatch

__all__ = ["Curvature", "curvature_from_raw", "compile_metric", "compile_scalars",
           "DEFAULT_CHUNK", "REASONS", "Geometry", "PointBatch"]
