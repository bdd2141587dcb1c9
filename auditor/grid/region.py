"""The sampled grid of a ``[region]`` and its proper-volume weights.

Axes are sampled like :func:`numpy.linspace` (both ends included). The grid is
never materialised whole: :meth:`Grid.events` builds the events of one chunk of
flat indices at a time (C order over the sampled axes, in the order of the
file's coordinates).

Volume integrals use the trapezoid rule along each sampled spatial axis times
the proper volume element sqrt(det γ_ij) of the t = const slice, so
∫ f dV ≈ Σ f sqrt(det γ) Π_i w_i (common practice). They are defined when the
three spatial coordinates are sampled.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Grid"]


@dataclass(frozen=True)
class Grid:
    coordinates: tuple[str, ...]
    fixed: dict
    axis_names: tuple[str, ...]          # sampled coordinates, file order
    axis_values: tuple[np.ndarray, ...]

    @classmethod
    def from_region(cls, metric, region=None) -> "Grid":
        region = region or metric.region
        names = tuple(c for c in metric.coordinates if c in region.axes)
        values = tuple(np.linspace(*region.axes[c], region.points[c]) for c in names)
        return cls(tuple(metric.coordinates), dict(region.fixed), names, values)

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(len(v) for v in self.axis_values)

    @property
    def size(self) -> int:
        return int(np.prod(self.shape))

    @property
    def time_sampled(self) -> bool:
        return self.coordinates[0] in self.axis_names

    @property
    def spatial_sampled(self) -> bool:
        """All three spatial coordinates are sampled (volume integrals exist)."""
        return all(c in self.axis_names for c in self.coordinates[1:])

    def events(self, start: int, stop: int) -> np.ndarray:
        """Events (M,4) of flat indices start..stop-1."""
        idx = np.unravel_index(np.arange(start, stop), self.shape)
        x = np.empty((stop - start, 4))
        for mu, c in enumerate(self.coordinates):
            if c in self.axis_names:
                k = self.axis_names.index(c)
                x[:, mu] = self.axis_values[k][idx[k]]
            else:
                x[:, mu] = self.fixed[c]
        return x

    def event(self, flat: int) -> dict[str, float]:
        x = self.events(flat, flat + 1)[0]
        return {c: float(v) for c, v in zip(self.coordinates, x)}

    def coordinate_weights(self, start: int, stop: int) -> np.ndarray:
        """Trapezoid weights Π_i w_i over the sampled spatial axes (M,)."""
        idx = np.unravel_index(np.arange(start, stop), self.shape)
        w = np.ones(stop - start)
        for k, c in enumerate(self.axis_names):
            if c == self.coordinates[0]:
                continue
            vals = self.axis_values[k]
            h = np.diff(vals)
            wk = np.zeros(len(vals))
            wk[:-1] += h / 2
            wk[1:] += h / 2
            w *= wk[idx[k]]
        return w

    def time_index(self, start: int, stop: int) -> np.ndarray | None:
        """Index of the time sample of each flat index, or None if t is fixed."""
        if not self.time_sampled:
            return None
        k = self.axis_names.index(self.coordinates[0])
        return np.unravel_index(np.arange(start, stop), self.shape)[k]

    @property
    def n_times(self) -> int:
        if not self.time_sampled:
            return 1
        return len(self.axis_values[self.axis_names.index(self.coordinates[0])])
