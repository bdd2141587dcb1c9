"""Metric files: safe expressions, loading and validation, the Metric object."""

from .expr import FUNCTIONS, parse_expression
from .loader import load_metric, loads_metric, parse_overrides
from .model import Crew, Definition, Metric, Region

__all__ = ["FUNCTIONS", "parse_expression", "load_metric", "loads_metric",
           "parse_overrides", "Metric", "Region", "Crew", "Definition"]
