"""chirpcast's science library: from a strain segment and a noise spectrum to a posterior.

Arrays and dataclasses in, arrays and dataclasses out; files are read only in
:mod:`estimator.io`.
"""

from __future__ import annotations

from .errors import ConvergenceError, EstimatorError, InputError

__all__ = ["ConvergenceError", "EstimatorError", "InputError", "__version__"]

__version__ = "0.1.0"
