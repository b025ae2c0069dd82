"""Numbers as text without an exponent: the one algorithm behind every number shown.

:mod:`shopapp.core.display` builds the pages', CSV's and PDFs' formatting on
:func:`figures`; the pure numerics use :func:`short` in their messages and
warnings (they sit below ``core`` and cannot import it). ``format(v, "g")``
prints 1 234 567 as ``1.23457e+06`` and 12 345 with ``.3g`` as ``1.23e+04``; a
shop reads neither.
"""

from __future__ import annotations

import math

HUGE = 1e15  # beyond any quantity a balancing shop measures (g·mm², rpm, g)
TINY = 1e-9  # below any quantity a balancing shop measures; 1e-300 would print 300 zeros


def figures(value: float, sig: int = 3, *, trim: bool = False) -> str:
    """``value`` with ``sig`` significant figures and never an exponent.

    Numbers of ``sig`` digits or more before the point print as whole numbers
    (18 900 is ``18900``, not ``1.89e+04``); smaller ones get the decimals the
    figures need (``12.3``, ``0.00123``). ``trim`` drops trailing zeros after the
    point. NaN and infinity print as ``nan``/``inf``/``-inf`` (messages about
    such input name them; pages never reach here with them).
    """
    v = float(value)
    if not math.isfinite(v):
        return str(v)
    if v == 0:
        return "0"
    mag = abs(v)
    if mag >= HUGE:
        # Only hostile or broken input gets here (1e300 would print 301 digits).
        return f"more than {HUGE:.0f}" if v > 0 else f"less than -{HUGE:.0f}"
    if mag < TINY:
        return f"less than {TINY:.9f}" if v > 0 else f"more than -{TINY:.9f}"
    if mag >= 10 ** (sig - 1):
        return f"{v:.0f}"
    decimals = max(0, sig - 1 - math.floor(math.log10(mag)))
    text = f"{v:.{decimals}f}"
    return text.rstrip("0").rstrip(".") if trim and "." in text else text


def short(value: float, sig: int = 6) -> str:
    """What ``f"{value:g}"`` meant to print, without its exponent (``1234567``, ``0.25``)."""
    return figures(value, sig, trim=True)


def p_text(p_value: float) -> str:
    """A test's p-value as ``p = 0.023`` (two significant figures) or ``p < 0.001``
    (never an exponent; tiny p-values are reported as a bound)."""
    return "p < 0.001" if p_value < 0.001 else f"p = {figures(p_value, 2, trim=True)}"
