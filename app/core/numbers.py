"""The number rule of every face (:mod:`pairlens.formatting`), pure so that the core's own
sentences (verdict reasons) write numbers as the pages and the report do."""

from __future__ import annotations

import math

__all__ = ["RULE", "finite", "fmt", "fmt_est", "fmt_p"]

RULE = ("Estimates of the measures have three decimals (0.823, 0.000). Other numbers between 0.001 and "
        "100,000 in size have three decimals too (12.500); smaller or larger ones have two significant "
        "digits in scientific notation (4.3×10⁻¹⁸). p- and q-values "
        "follow the same rule; a p-value below the smallest number the computer holds is written "
        "“< 10⁻³⁰⁰”. Counts are whole numbers (44 850). A missing value is “–”.")

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def finite(v) -> float | None:
    """``v`` as a float when it is a finite number, else None (None, NaN, infinities, text, booleans)."""
    if v is None or isinstance(v, bool):
        return None
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def fmt(v) -> str:
    """A number by the rule of :data:`RULE`.

    Examples
    --------
    >>> fmt(0.8224), fmt(-0.04), fmt(4.31e-18), fmt(None), fmt(0)
    ('0.822', '-0.040', '4.3×10⁻¹⁸', '–', '0.000')
    """
    x = finite(v)
    if x is None:
        return "–"
    a = abs(x)
    if a == 0.0 or 1e-3 <= a < 1e5:
        text = f"{x:.3f}"
        return "0.000" if text == "-0.000" else text
    mantissa, exponent = f"{x:.1e}".split("e")
    return f"{mantissa}×10{str(int(exponent)).translate(_SUPERSCRIPT)}"


def fmt_est(v) -> str:
    """An estimate of a measure: three decimals whatever its size ("0.000", never "7.0×10⁻⁴")."""
    x = finite(v)
    if x is None:
        return "–"
    if abs(x) >= 1e5:  # not a measure's estimate after all: the general rule
        return fmt(x)
    text = f"{x:.3f}"
    return "0.000" if text == "-0.000" else text


def fmt_p(v) -> str:
    """A p- or q-value: :func:`fmt`, except an underflowed zero, which is "< 10⁻³⁰⁰"."""
    x = finite(v)
    if x is None:
        return "–"
    if x == 0.0:
        return "< 10⁻³⁰⁰"
    return fmt(x)
