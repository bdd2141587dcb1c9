"""Metric files: safe expressions, loading and validation, the Metric object."""

from .model import Crew, Definition, Metric, Region

__all__ = ["FUNCTIONS", "parse_expression", "load_metric", "loads_metric",
           "parse_overrides", "Metric", "Region", "Crew", "Definition"]

_LAZY = {"FUNCTIONS": "expr", "parse_expression": "expr", "load_metric": "loader",
         "loads_metric": "loader", "parse_overrides": "loader"}


def __getattr__(name):
    # The parser and loader need SymPy; importing them on first use keeps a warm
    # start (auditor.warm) free of it.
    if name in _LAZY:
        import importlib
        return getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
