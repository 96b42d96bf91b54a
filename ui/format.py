"""How numbers and units are written on the pages.

Small values keep their digits: a density RMSEP of 0.0004 g/mL is shown as
"0.0004" (four significant digits), below 0.0001 in scientific notation
("4.123e-05"), never rounded to "0".
"""

from __future__ import annotations

import math

SIGNIFICANT = 4


def num(value, digits: int = SIGNIFICANT) -> str:
    """``value`` with ``digits`` significant digits; scientific below 1e-4 and from 1e6."""
    if value is None:
        return ""
    v = float(value)
    if not math.isfinite(v):
        return str(v)
    if v == 0:
        return "0"
    if abs(v) < 1e-4 or abs(v) >= 1e6:
        return f"{v:.{digits - 1}e}"
    return f"{v:.{digits}g}"


def sci(value, digits: int = 3) -> str:
    """Always scientific notation (Q residuals span decades)."""
    return "" if value is None else f"{float(value):.{digits - 1}e}"


def unit_of(unit: str | None) -> str:
    """An axis-title suffix: the property's unit, or "(no unit)" for dimensionless scales
    such as octane and cetane numbers."""
    return f" ({unit})" if unit else " (no unit)"
