"""Step conditioning: edges, state levels, segments, noise and model-free metrics.

Entry point: ``analyse_steps(capture)`` -> StepAnalysis (fitkit.conditioning.analysis);
``render_text(analysis)`` gives the plain-text section of ``fitkit inspect``.
"""

from .analysis import StepAnalysis, analyse_steps, choose_channels, find_edges
from .edges import Edge
from .levels import StateLevels, state_levels
from .metrics import StepMetrics, step_metrics
from .noise import NoiseEstimate, estimate_noise
from .render import render_text
from .segment import StepSegment

__all__ = ["StepSegment", "StepAnalysis", "StepMetrics", "StateLevels", "NoiseEstimate", "Edge",
           "analyse_steps", "choose_channels", "find_edges", "render_text", "state_levels",
           "step_metrics", "estimate_noise"]
