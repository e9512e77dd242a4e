"""One way to write numbers on every face: web pages, the pair panel, the report.

The rule (also printed on the methods page, :data:`RULE`):

* a missing value is an en dash "–";
* an estimate of a measure (all of them lie within about [−1, 1]) has three
  decimals, always: 0.823, 0.000, −0.041;
* any other number whose size is between 0.001 and 100,000 has three decimals (0.823,
  −0.041, 12.500); a count is an integer with thin-space grouping (44 850);
* a smaller or larger non-zero number has two significant digits in scientific
  notation with a real exponent (4.3×10⁻¹⁸);
* p- and q-values follow the same rule, except that a p-value that underflowed
  to zero (smaller than the smallest double) is written "< 10⁻³⁰⁰";
* an interval is its two ends, each by the same rule: [0.822, 0.898].

``static/pairlens.js`` (``fmt``) and the report's script implement the same
rule for numbers formatted in the browser; ``tests/test_formatting.py``
compares them in Chromium.
"""

from __future__ import annotations

import json
import math

from markupsafe import Markup

__all__ = ["RULE", "fmt", "fmt_est", "fmt_p", "fmt_count", "fmt_interval", "fmt_share", "finite",
           "finite_or_null", "embed_json"]

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


def fmt_count(v) -> str:
    """A whole number with thin-space grouping: 44 850."""
    x = finite(v)
    if x is None:
        return "–"
    return f"{int(round(x)):,}".replace(",", "\u2009")


def fmt_interval(low, high) -> str:
    """``[low, high]`` with both ends by :func:`fmt`; "–" when either end is missing."""
    if finite(low) is None or finite(high) is None:
        return "–"
    return f"[{fmt(low)}, {fmt(high)}]"


def fmt_share(part, whole) -> str:
    """A count with its denominator: "689 of 930"."""
    return f"{fmt_count(part)} of {fmt_count(whole)}"


def finite_or_null(value):
    """``value`` with every non-finite float (NaN, +-inf) replaced by ``None``, through dicts and lists.

    JSON has no NaN or infinity; a pair whose fit overflows (a cell of 1e300, say) must still
    serialise, with the missing numbers shown as missing.
    """
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: finite_or_null(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite_or_null(v) for v in value]
    return value


def embed_json(value) -> Markup:
    """JSON for a ``<script type="application/json">`` block that no string can break out of.

    ``<``, ``>`` and ``&`` become ``\\u003c`` etc. (so ``</script>`` and ``<!--`` in a
    column name stay inert) and the line separators U+2028/2029 are escaped too.
    """
    try:
        text = json.dumps(value, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    except ValueError:  # a non-finite number (an overflowing fit): shown as missing
        text = json.dumps(finite_or_null(value), ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    text = (text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))
    return Markup(text)
