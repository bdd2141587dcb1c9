"""Orthonormal tetrads and observer families."""

from .tetrads import FRAME_NAMES, auditing_frame, eulerian, principal, static, to_frame

__all__ = ["FRAME_NAMES", "auditing_frame", "eulerian", "principal", "static", "to_frame"]
