"""Step conditioning: edges, state levels, segments, noise and model-free metrics."""

from .segment import StepSegment

__all__ = ["StepSegment"]
