"""Which part of the sampled grid a figure shows.

A region samples one to four coordinates. Figures show at most two of them:

* one sampled axis: the whole line;
* two: the whole plane (a spatial axis horizontal; time, if sampled, vertical,
  as in a spacetime diagram);
* three or four: planes of the first two sampled spatial axes (or a spatial
  axis and time), the other axes held at a grid index: the middle of each
  held axis, and — when it differs — the index of the figure's focus event
  (the worst point of the quantity shown). Time, when sampled and held, is
  held at the focus event's time in both planes.

Arrays are flat in the grid's C order (``AuditResult.maps``); :meth:`Plane.take`
reshapes with the grid shape and cuts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Plane", "display_axes", "planes"]


@dataclass(frozen=True)
class Plane:
    """A line (``v is None``) or plane of the grid, other axes held fixed."""

    h: int                       # grid axis shown horizontally
    v: int | None                # grid axis shown vertically (None: a line plot)
    held: tuple                  # ((grid axis, index), ...)
    role: str                    # "whole", "middle" or "focus"

    def take(self, flat: np.ndarray, shape: tuple) -> np.ndarray:
        """The (v, h) array of this plane (or the 1-D line) from a flat map."""
        arr = np.asarray(flat).reshape(shape)
        index = [slice(None)] * len(shape)
        for axis, i in self.held:
            index[axis] = i
        cut = arr[tuple(index)]
        kept = [k for k in range(len(shape)) if k not in dict(self.held)]
        if self.v is None:
            return cut
        # kept axes are in grid order; put v first, h second
        return cut if kept.index(self.v) == 0 else cut.T

    def contains(self, flat_index: int, shape: tuple) -> bool:
        idx = np.unravel_index(flat_index, shape)
        return all(idx[a] == i for a, i in self.held)


def display_axes(axis_names, time_name) -> tuple[int, int | None, list[int]]:
    """(horizontal, vertical or None, held) grid-axis indices."""
    n = len(axis_names)
    spatial = [k for k, a in enumerate(axis_names) if a != time_name]
    time = [k for k, a in enumerate(axis_names) if a == time_name]
    if n == 1:
        return 0, None, []
    if len(spatial) >= 2:
        h, v = spatial[0], spatial[1]
    else:
        h, v = spatial[0], time[0]
    return h, v, [k for k in range(n) if k not in (h, v)]


def planes(axis_names, time_name, shape, focus: int | None) -> list[Plane]:
    """The middle plane and, if different, the plane through ``focus``."""
    h, v, held = display_axes(axis_names, time_name)
    if not held:
        return [Plane(h, v, (), "whole")]
    fidx = np.unravel_index(focus, shape) if focus is not None else None
    middle, through = [], []
    for a in held:
        mid = shape[a] // 2
        if axis_names[a] == time_name and fidx is not None:
            mid = int(fidx[a])
        middle.append((a, mid))
        through.append((a, int(fidx[a]) if fidx is not None else mid))
    out = [Plane(h, v, tuple(middle), "middle")]
    if tuple(through) != tuple(middle):
        out.append(Plane(h, v, tuple(through), "focus"))
    return out
