"""How numbers read in a report: significant figures, signs, ranges (no chemistry here)."""
from __future__ import annotations

import math


def fmt(x, sig: int = 3) -> str:
    """A number with ``sig`` significant figures for the report ('-' when missing).

    >>> fmt(0.012345), fmt(12345.6), fmt(None)
    ('0.0123', '12346', '-')
    """
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    x = float(x)
    if abs(x) < 1e-9:
        return "0"
    return f"{x:.{sig}g}" if abs(x) < 10 ** sig else f"{x:.0f}"


def signed(x, sig: int = 3) -> str:
    """A number with its sign ('+0.5', '-0.37')."""
    return "-" if x is None else ("+" if x > 0 else "") + fmt(x, sig)


def range_text(r) -> str:
    """A window as 'low to high', or that there is none."""
    return "none within the target" if not r else f"{r[0]:.2f} to {r[1]:.2f}"
