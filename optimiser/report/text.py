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


def signed_fixed(x, nd: int = 3) -> str:
    """A number with its sign to ``nd`` decimals; one that rounds to zero is "0.000", never "-0.000" or "+0.000".

    >>> signed_fixed(0.5471), signed_fixed(-0.0002), signed_fixed(None)
    ('+0.547', '0.000', '-')
    """
    if x is None or not math.isfinite(x):
        return "-"
    text = f"{x:+.{nd}f}"
    return text if float(text) != 0 else f"{0:.{nd}f}"


def share_percent(x) -> str:
    """A share in % for a table: 3 significant figures, "<0.001" for a trace, "0" for none (no 8.63e-06).

    >>> share_percent(99.81), share_percent(8.6e-6), share_percent(0.0)
    ('99.8', '<0.001', '0')
    """
    if x is None or not math.isfinite(x):
        return "-"
    if x == 0:
        return "0"
    return "<0.001" if abs(x) < 1e-3 else fmt(x, 3)


def pH_text(pH: float) -> str:
    """A pH as a table shows it: a round value as it is, any other to 0.01 (the method's pH, as the procedure gives it).

    >>> pH_text(4.0), pH_text(10.1234), pH_text(10.1)
    ('4', '10.12', '10.10')
    """
    return f"{pH:.0f}" if float(pH).is_integer() else f"{pH:.2f}"


def short_name(name: str) -> str:
    """A catalogue display name without its parenthesis, for one-line tables: "Murexide (ammonium purpurate)" ->
    "Murexide", "cyanide (as KCN)" -> "cyanide".

    >>> short_name("nitric acid (pH set with HNO3 / NaOH; no complexing buffer)"), short_name("Xylenol orange")
    ('nitric acid', 'Xylenol orange')
    """
    return name.split(" (", 1)[0]
