"""Number text shared by the window's tables and the report, so both write a number the same way."""

from __future__ import annotations

import math


def number_text(v: float, digits: int = 4, *, missing: str = "", unicode_minus: bool = False,
                fixed_below_one: bool = False) -> str:
    """Short text for a number: ``digits`` significant digits, exponent outside [1e-4, 1e6).

    Parameters
    ----------
    missing : str
        Text for NaN.
    unicode_minus : bool
        Write '−' (U+2212) instead of '-', as typeset text does.
    fixed_below_one : bool
        Below 1 in size, write ``digits`` decimals with trailing zeros dropped (tables line up
        better) instead of significant digits.
    """
    v = float(v)
    if math.isnan(v):
        return missing
    if math.isinf(v):
        return "∞" if v > 0 else "−∞"
    if v == 0:
        return "0"
    a = abs(v)
    if a >= 1e6 or a < 1e-4:
        text = f"{v:.{digits - 1}e}"
    elif fixed_below_one and a < 1:
        text = f"{v:.{digits}f}".rstrip("0").rstrip(".")
    else:
        text = f"{v:.{digits}g}"
    return text.replace("-", "−") if unicode_minus else text


def natural_key(text) -> tuple:
    """Sort key that orders the numbers inside labels by value: 'house 2' before 'house 10'."""
    import re

    parts = re.split(r"(\d+(?:\.\d+)?)", str(text))
    return tuple((0, float(p), "") if i % 2 else (1, 0.0, p.casefold()) for i, p in enumerate(parts) if p != "")
