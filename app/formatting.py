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

from .core.numbers import RULE, finite, fmt, fmt_est, fmt_p  # noqa: F401 (re-exported)


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
