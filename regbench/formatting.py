"""Numbers and word lists for people: the one home, so window, CLI and report write them alike.

Every layer that writes a number or a list of names for a person uses these:
:func:`number_text` for tables and plots, :func:`sentence_number` inside a
sentence, :data:`MISSING` for a number that is not there, :func:`percent` for
shares and :func:`join_words` for "a, b and c".  Plain-text renderings built
from them (the CLI's fit summary, stress tables, project inspection) live in
:mod:`regbench.sentences`.
"""

from __future__ import annotations

import math
import numbers
import re
from typing import Iterable

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
    else:
        text = f"{v:.{digits}g}"
    return text.replace("-", "−") if unicode_minus else text


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
    return f"{float(x):.{digits}g}"


def percent(x, decimals: int = 1) -> str:
    """A share as a percentage ('12.5%'); :data:`MISSING` when it is not a finite number."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return MISSING
    return MISSING if not math.isfinite(v) else f"{100 * v:.{decimals}f}%"


def join_words(items: Iterable[str], word: str = "and") -> str:
    """'a', 'a and b', 'a, b and c' (``word`` may be 'or')."""
    items = list(items)
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + f" {word} " + items[-1]


def natural_key(text) -> tuple:
    """Sort key that orders the numbers inside labels by value: 'house 2' before 'house 10'."""
    parts = re.split(r"(\d+(?:\.\d+)?)", str(text))
    return tuple((0, float(p), "") if i % 2 else (1, 0.0, p.casefold()) for i, p in enumerate(parts) if p != "")
