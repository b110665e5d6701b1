"""The fitting engine: from step segments (or a capture) to a FitResult.

Public API:

* :func:`fit_capture` - find the steps in a capture and fit them;
* :func:`fit_segments` - fit segments that are already cut out;
* :func:`fit_model` - the generic least-squares core for any model function
  (used for NIST reference checks and for direct fits of component values).
"""

from .step_fit import fit_capture, fit_segments
from .least_squares import ModelFit, fit_model

__all__ = ["fit_capture", "fit_segments", "fit_model", "ModelFit"]
