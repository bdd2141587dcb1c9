"""Sampled regions, chunked evaluation, violation regions and integrals."""

from .region import Grid

__all__ = ["Grid"]
