"""The validated, immutable description of one spacetime (see DEVELOPERS.md).

A :class:`Metric` holds two symbolic views of g_ab:

* ``g_display``: in the user's names, with ``[define]`` names kept as symbols,
  for reports (the line element as the author wrote it);
* ``g``: fully expanded, in the internal symbols :attr:`Metric.coord_symbols`
  and :attr:`Metric.param_symbols`. Only these internal symbols, never user
  text or user names, reach code generation.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Mapping

if TYPE_CHECKING:
    import sympy as sp

__all__ = ["Metric", "Region", "Crew", "Definition", "MAX_FILE_BYTES"]

#: Largest metric file accepted, in bytes (a metric file is a page of text).
MAX_FILE_BYTES = 1_000_000


@dataclass(frozen=True)
class Definition:
    """One ``[define]`` entry: its name, source text, and SymPy forms."""

    name: str
    text: str
    display: sp.Expr      # in user symbols, earlier definitions kept as symbols
    expanded: sp.Expr     # in user symbols, definitions substituted


@dataclass(frozen=True)
class Region:
    """Where ``check`` and ``report`` audit.

    ``fixed`` maps fixed coordinates to values, ``axes`` maps sampled
    coordinates to (low, high), ``points`` gives samples per sampled axis.
    ``exclude`` is in internal symbols (points where it is positive are left out).
    """

    fixed: Mapping[str, float]
    axes: Mapping[str, tuple[float, float]]
    points: Mapping[str, int]
    exclude: sp.Expr | None = None
    exclude_text: str | None = None


@dataclass(frozen=True)
class Crew:
    """The ``[crew]`` table (lengths in metres, accelerations in standard g)."""

    body_length_m: float = 2.0
    frame: str = "eulerian"
    tidal_limit_g: float = 1.0
    start: Mapping[str, float] | None = None
    velocity: tuple[float, float, float] | None = None
    duration: float | None = None


@dataclass(frozen=True)
class Metric:
    """One spacetime with its parameters, region and crew."""

    name: str
    coordinates: tuple[str, str, str, str]
    parameters: Mapping[str, float]
    g: sp.ImmutableMatrix
    g_display: sp.ImmutableMatrix
    coord_symbols: tuple[sp.Symbol, ...]
    param_symbols: tuple[sp.Symbol, ...]
    user_symbols: Mapping[str, sp.Symbol]
    definitions: tuple[Definition, ...] = ()
    form: str = "line_element"
    metric_text: str = ""
    lapse: sp.Expr | None = None          # internal symbols; only for [metric.adm]
    length_m: float = 1.0
    summary: str = ""
    source: str = ""
    path: str = ""
    sha256: str = ""
    region: Region | None = None
    crew: Crew = field(default_factory=Crew)

    @property
    def parameter_values(self) -> tuple[float, ...]:
        """Parameter values in the order of :attr:`param_symbols`."""
        return tuple(float(self.parameters[n]) for n in self.parameters)

    def with_parameters(self, **values: float) -> "Metric":
        """A copy with some parameter values replaced (the symbolic g is shared)."""
        from dataclasses import replace
        unknown = set(values) - set(self.parameters)
        if unknown:
            from ..errors import UsageError
            raise UsageError(f"unknown parameter(s): {', '.join(sorted(unknown))}")
        params = dict(self.parameters)
        params.update({k: float(v) for k, v in values.items()})
        return replace(self, parameters=params)

    def to_internal(self, expr: sp.Expr) -> sp.Expr:
        """Rewrite an expression in user symbols with the internal symbols."""
        mapping = {}
        for i, c in enumerate(self.coordinates):
            mapping[self.user_symbols[c]] = self.coord_symbols[i]
        for i, p in enumerate(self.parameters):
            mapping[self.user_symbols[p]] = self.param_symbols[i]
        return expr.xreplace(mapping)
