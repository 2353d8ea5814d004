"""Numbers a person reads: a few significant digits, a floor for tiny values, no exponents.

Data columns of CSV files keep full precision; this is for the window, the HTML report and
CSV comment lines.
"""

from __future__ import annotations

import math

FLOOR = 1e-4
"""Magnitudes below this (and above 0) are shown as "< 0.0001"."""


def format_number(x: float | None, digits: int = 3, floor: float = FLOOR, signed: bool = False) -> str:
    """Text for one number: ``digits`` significant digits, "< 0.0001" below the floor,
    thousands separated above 1000, "undefined" for NaN or None.

    Parameters
    ----------
    x
        The value.
    digits
        Significant digits (at least 1).
    floor
        Smallest magnitude shown as a number.
    signed
        Put "+" before positive values (changes, drifts).

    Returns
    -------
    str
        E.g. ``0.0123``, ``< 0.0001``, ``12,345``, ``undefined``.
    """
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "undefined"
    x = float(x)
    if math.isinf(x):
        return "infinite" if x > 0 else "minus infinite"
    if x == 0:
        return "0"
    a = abs(x)
    if a < floor:
        return f"< {floor:g}" if x > 0 else f"> -{floor:g}"
    if a >= 1000:
        return f"{x:+,.0f}" if signed else f"{x:,.0f}"
    decimals = max(0, digits - 1 - math.floor(math.log10(a)))
    text = f"{x:.{decimals}f}"
    text = text.rstrip("0").rstrip(".") if "." in text else text
    return f"+{text}" if signed and x > 0 else text
