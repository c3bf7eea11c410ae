"""Numbers as they read in sentences: significant digits, percentages, p-values."""

from __future__ import annotations

import math


def fmt(value: float | None, digits: int = 3) -> str:
    """A number for a sentence: significant digits, no trailing noise; '—' when missing."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    if value == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(value)))
    decimals = max(0, digits - 1 - magnitude)
    return f"{value:,.{decimals}f}"


def fmt_p(p: float | None) -> str:
    """A p-value as people read it: 'p = 0.034', 'p < 0.001'."""
    if p is None or (isinstance(p, float) and not math.isfinite(p)):
        return "p = —"
    if p < 0.001:
        return "p < 0.001"
    return f"p = {p:.3f}"


def percent(value: float | None, decimals: int = 0) -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "—"
    return f"{100 * value:.{decimals}f} %"
