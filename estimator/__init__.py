"""chirpcast's science library: from a strain segment and a noise spectrum to a posterior.

Arrays and dataclasses in, arrays and dataclasses out; files are read only in
:mod:`estimator.io`.
"""

from __future__ import annotations

__version__ = "0.1.0"

from .analysis import AnalysisResult, run_analysis
from .data import NoiseSpectrum, StrainSegment
from .errors import ConvergenceError, EstimatorError, InputError
from .io import read_psd, read_strain
from .settings import AnalysisSettings

__all__ = [
    "AnalysisResult",
    "AnalysisSettings",
    "ConvergenceError",
    "EstimatorError",
    "InputError",
    "NoiseSpectrum",
    "StrainSegment",
    "__version__",
    "read_psd",
    "read_strain",
    "run_analysis",
]
