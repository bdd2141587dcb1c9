"""Exact curvature: symbolic derivatives, compiled kernels, batch evaluation."""

from .curvature import Curvature, curvature_from_raw
from .points import CHUNK_BYTES, REASONS, Geometry, PointBatch

__all__ = ["Curvature", "curvature_from_raw", "compile_metric", "compile_scalars",
           "CHUNK_BYTES", "REASONS", "Geometry", "PointBatch"]


def __getattr__(name):
    # The compilers need SymPy; importing them lazily keeps a warm start free of it.
    if name in ("compile_metric", "compile_scalars"):
        from . import kernels
        return getattr(kernels, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
