"""Trends of a production line from its results store: control charts, drift detection,
capability against the design tolerance, projection and repeatability.

Computation only (numpy, scipy, pandas); the pictures are in fitkit/report/trend_plots.py.
"""

from .analysis import QuantityTrend, line_trends
from .phases import ChartSettings

__all__ = ["QuantityTrend", "line_trends", "ChartSettings"]
