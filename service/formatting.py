"""Number formatting for the HTML report: every displayed number is turned into text here.

Intervals are quoted the way measurements usually are (common practice): the
uncertainty to two significant figures and the median to the same decimal place,
e.g. ``1.19754 +0.00012 −0.00011``, and a value with a 1-sigma width likewise,
``24.19 ± 0.76``. Negative numbers use the typographic minus
sign U+2212, not the hyphen.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = [
    "MINUS",
    "decimals_for",
    "format_fixed",
    "format_interval",
    "format_percent",
    "format_significant",
    "format_uncertain",
    "format_value",
]

#: The minus sign shown for negative numbers (U+2212).
MINUS = "\u2212"


def format_fixed(value: float, decimals: int) -> str:
    """``value`` with ``decimals`` decimal places and a typographic minus."""
    text = f"{value:.{decimals}f}"
    return MINUS + text[1:] if text.startswith("-") else text


def format_significant(value: float, digits: int = 4) -> str:
    """Shortest readable form with ``digits`` significant figures (``1.2×10^-5``)."""
    if not math.isfinite(value):
        return "n/a"
    if value == 0.0:
        return "0"
    text = f"{value:.{digits}g}"
    if "e" in text:
        mantissa, exponent = text.split("e")
        text = f"{mantissa}×10^{int(exponent)}"
    return text.replace("-", MINUS)


def decimals_for(width: float) -> int:
    """Decimal places that give ``width`` (> 0) two significant figures (0 to 12)."""
    width = float(f"{width:.10g}")  # 0.0999999999 from 1.2 - 1.1 counts as 0.1
    return min(12, max(0, 1 - math.floor(math.log10(width))))


def format_interval(
    median: float, lower: float, upper: float, *, decimals: int | None = None
) -> dict[str, str | int]:
    """Format a median and its credible bounds for display.

    Parameters
    ----------
    median, lower, upper
        The median and the bounds of the credible interval.
    decimals
        Decimal places; by default those giving the narrower side of the interval
        two significant figures (common practice), or 4 significant figures of the
        median when the interval has no width.

    Returns
    -------
    ``median``, ``minus`` (``−0.00011``), ``plus`` (``+0.00012``), ``lower``,
    ``upper`` as strings, and the ``decimals`` used.
    """
    values = (median, lower, upper)
    if not all(isinstance(v, int | float) and math.isfinite(v) for v in values):
        na = "n/a"
        return {"median": na, "minus": na, "plus": na, "lower": na, "upper": na, "decimals": 0}
    minus, plus = median - lower, upper - median
    if decimals is None:
        widths = [w for w in (minus, plus) if w > 0.0]
        if widths:
            decimals = decimals_for(min(widths))
        elif median != 0.0:
            decimals = min(12, max(0, 3 - math.floor(math.log10(abs(median)))))
        else:
            decimals = 0
    return {
        "median": format_fixed(median, decimals), "minus": MINUS + f"{abs(minus):.{decimals}f}",
        "plus": "+" + f"{abs(plus):.{decimals}f}", "lower": format_fixed(lower, decimals),
        "upper": format_fixed(upper, decimals), "decimals": decimals,
    }


def format_uncertain(value: float | None, sigma: float | None) -> dict[str, str]:
    """A value and its 1-sigma width, the width to two significant figures (common practice).

    The value is given to the same decimal place as the width, ``24.19`` and
    ``0.76``. Without a usable width (missing, zero or not finite) the width is
    ``"n/a"`` and the value has 4 significant figures.

    Returns
    -------
    ``value`` and ``sigma`` as strings.
    """
    if value is None or not math.isfinite(value):
        return {"value": "n/a", "sigma": "n/a"}
    if sigma is None or not math.isfinite(sigma) or sigma <= 0.0:
        return {"value": format_significant(value), "sigma": "n/a"}
    decimals = decimals_for(sigma)
    shown = round(value, decimals) or 0.0  # no "−0" for a value that rounds to zero
    return {"value": format_fixed(shown, decimals), "sigma": f"{sigma:.{decimals}f}"}


def format_percent(p: float) -> str:
    """A probability as a whole percentage, ``"> 99%"`` and ``"< 1%"`` at the ends."""
    if not math.isfinite(p):
        return "n/a"
    if p >= 0.995:
        return "> 99%"
    if p < 0.005:
        return "< 1%"
    return f"{100.0 * p:.0f}%"


def format_value(value: Any) -> str:
    """A setting or record value as text: ``—`` for none, yes/no, exact floats, lists."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        if not math.isfinite(value):
            return str(value)
        text = f"{value:.0f}" if value.is_integer() and abs(value) < 1e15 else repr(value)
        return text.replace("-", MINUS)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(format_value(v) for v in value) + "]"
    return str(value)
