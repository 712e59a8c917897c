"""Reference noise curve for tests: an analytic fit to an advanced-detector design.

Ajith 2011, PRD 84, 084037, Eq. 4.7 (quoted from memory): the fit to the
zero-detuned high-power design noise curve of an advanced detector.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["design_psd_fit"]


def design_psd_fit(f: ArrayLike) -> NDArray[np.float64]:
    """One-sided noise PSD of the zero-detuned high-power design, 1/Hz.

    ``S_h(f) = 1e-49 [x^-4.14 - 5 x^-2 + 111 (1 - x^2 + x^4/2) / (1 + x^2/2)]``,
    ``x = f / 245.4 Hz`` (Ajith 2011, PRD 84, 084037, Eq. 4.7; from memory).
    Meaningful from about 10 Hz upward; ``f`` in Hz, any shape.
    """
    x = np.asarray(f, dtype=float) / 245.4
    return 1e-49 * (x**-4.14 - 5.0 * x**-2 + 111.0 * (1.0 - x**2 + 0.5 * x**4) / (1.0 + 0.5 * x**2))
