"""Numbers and word lists for people: the one home, so window, CLI and report write them alike.

Every layer that writes a number or a list of names for a person uses these:
:func:`number_text` for tables and plots, :func:`sentence_number` inside a
sentence, :func:`plain_number` for a value a person may copy (a constant, a
coefficient of a combination, an α), :func:`rough_number` for a left-over or a
share, :func:`count_text` for "3 rows", :func:`tick_text` for a plot axis,
:data:`MISSING` for a number that is not there, :func:`percent` for shares and
:func:`join_words` for "a, b and c".  Plain-text renderings built
from them (the CLI's fit summary, stress tables, project inspection) live in
:mod:`regbench.sentences`.
"""

from __future__ import annotations

import math
import numbers
import re
from typing import Iterable, Optional

import numpy as np

#: The mark for a number that is not there (NaN, ±inf where no value applies, no result yet).
MISSING = "—"


def number_text(v: float, digits: int = 4, *, missing: str = MISSING, unicode_minus: bool = False,
                fixed_below_one: bool = False) -> str:
    """Short text for a number: ``digits`` significant digits, exponent outside [1e-4, 1e6).

    Parameters
    ----------
    missing : str
        Text for NaN (default :data:`MISSING`).
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
        if text == "-0":  # a small negative rounded away keeps no sign: "-0" reads as a typo
            text = "0"
    else:
        text = _significant(v, digits)
    return text.replace("-", "−") if unicode_minus else text


def _significant(v: float, digits: int) -> str:
    """``digits`` significant digits without an exponent; a number of more integer digits keeps them
    all (150, not '1.5e+02'; 123456, not '1.235e+05'): Python's 'g' turns to an exponent as soon as
    the integer part is longer than ``digits``."""
    a = abs(v)
    if a < 1:
        return f"{v:.{digits}g}"
    decimals = max(digits - int(math.floor(math.log10(a))) - 1, 0)
    text = f"{v:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text


def cell_text(v, digits: int = 4) -> str:
    """A table cell: numbers as :func:`number_text` (fixed decimals below 1), yes/no, text as is."""
    if v is None:
        return ""
    if isinstance(v, bool) or type(v).__name__ in ("bool_", "bool"):  # numpy names its bool either way
        return "yes" if v else "no"
    if isinstance(v, numbers.Integral):
        return str(int(v))
    if isinstance(v, numbers.Real):
        return number_text(v, digits, fixed_below_one=True)
    return str(v)


def sentence_number(x, digits: int = 3) -> str:
    """A number inside a sentence: ``digits`` significant digits; 'undefined' when it is not finite."""
    if x is None or not math.isfinite(float(x)):
        return "undefined"
    if x == 0:
        return "0"
    x = float(x)
    return _significant(x, digits) if 1 <= abs(x) < 1e6 else f"{x:.{digits}g}"


def percent(x, decimals: int = 1) -> str:
    """A share as a percentage ('12.5%'); :data:`MISSING` when it is not a finite number."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return MISSING
    return MISSING if not math.isfinite(v) else f"{100 * v:.{decimals}f}%"


def plain_number(v: float) -> str:
    """A number as a person writes it: up to 4 significant digits, no exponent between
    1e-4 and 1e12 (30, not '3e+01'; 100,000,000 with thousands separated).

    A number that is round up to round-off at up to 6 significant digits is
    written that way (0.4999999999999999 -> '0.5', 273.15000000000043 -> '273.15').
    """
    v = float(v)
    if v == 0 or not np.isfinite(v):
        return "0" if v == 0 else str(v)
    a = abs(v)
    if 1e4 <= a < 1e12:
        return f"{v:,.0f}"
    if 1e-4 <= a < 1e4:
        for digits in range(1, 7):
            text = np.format_float_positional(v, precision=digits, unique=False, fractional=False, trim="-")
            if abs(float(text) - v) <= 1e-9 * a:
                return text
        return np.format_float_positional(v, precision=4, unique=False, fractional=False, trim="-")
    mant, exp = f"{v:.3e}".split("e")
    mant = mant.rstrip("0").rstrip(".")
    return f"{mant}e{int(exp)}"


def rough_number(v: float) -> str:
    """A left-over or share: two significant digits, positional between 1e-3 and 1e4."""
    v = float(v)
    if v == 0:
        return "0"
    if 1e-3 <= abs(v) < 1e4:
        return np.format_float_positional(v, precision=2, unique=False, fractional=False, trim="-")
    mant, exp = f"{v:.1e}".split("e")
    mant = mant.rstrip("0").rstrip(".")
    return f"{mant}e{int(exp)}"


def count_text(v, noun: str) -> str:
    """'1 row', '1,200 rows', '12.5 observations' (a count of weighted observations need not be whole)."""
    v = float(v)
    text = f"{v:,.0f}" if v == round(v) else f"{v:,.4g}"
    return f"{text} {noun}{'' if v == 1 else 's'}"


def size_text(n_bytes) -> str:
    """A memory size for people: '500 MB', '1.5 GB', '800 kB' (powers of 1,000, as the budget is typed)."""
    v = float(n_bytes)
    for unit, scale in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if v >= scale:
            return f"{v / scale:.3g} {unit}"
    return f"{v:.0f} B"


def tick_text(v: float) -> str:
    """An axis tick: four significant digits, a one-decimal exponent outside [1e-3, 1e4)."""
    if v == 0:
        return "0"
    a = abs(v)
    if a >= 1e4 or a < 1e-3:
        return f"{v:.1e}"
    return f"{v:.4g}"


def join_words(items: Iterable[str], word: str = "and", most: Optional[int] = None) -> str:
    """'a', 'a and b', 'a, b and c' (``word`` may be 'or'); beyond ``most`` items, the first ``most``
    and how many more ('a, b, c and 997 more'), so a sentence about a wide table stays a sentence."""
    items = list(items)
    if most is not None and len(items) > most + 1:
        return ", ".join(items[:most]) + f" {word} {len(items) - most:,} more"
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + f" {word} " + items[-1]


def natural_key(text) -> tuple:
    """Sort key that orders the numbers inside labels by value: 'house 2' before 'house 10'."""
    parts = re.split(r"(\d+(?:\.\d+)?)", str(text))
    return tuple((0, float(p), "") if i % 2 else (1, 0.0, p.casefold()) for i, p in enumerate(parts) if p != "")
