"""Numbers written on charts: three significant figures without trailing zeros, as
Python's ``format(v, ".3g")`` writes them, but never in scientific notation.

Reference: the Python format specification mini-language ("g": general format,
insignificant trailing zeros removed; exponent notation when the exponent is below
−4 or not below the precision). Within the range where ``.3g`` writes no exponent the
texts must be equal; outside it ours stays a plain decimal of the same value.
"""

from __future__ import annotations

import math
import random

from shopapp.charts import Text
from shopapp.charts.bars import Bar, BarGroup, bar_figure
from shopapp.charts.circle_fit import ReadingPoint, circle_fit_figure
from shopapp.charts.polar import PolarVector, polar_figure
from shopapp.core.display import number


def test_trimmed_number_equals_python_g_format_where_that_has_no_exponent() -> None:
    rng = random.Random(11)
    for _ in range(2000):
        v = 10 ** rng.uniform(-4, 3) * rng.choice((1, -1))
        if abs(float(format(v, ".3g"))) >= 1000:  # rounds up into exponent notation
            continue
        assert number(v, trim=True) == format(v, ".3g"), v


def test_trimmed_number_never_has_an_exponent_and_keeps_the_value() -> None:
    for v in (1234.5, 18900.0, 1.5e7, 0.0000123, -0.00004567, 999.96):
        text = number(v, trim=True)
        assert "e" not in text.lower(), (v, text)
        # three significant figures: within half a unit of the third figure
        assert math.isclose(float(text), v, rel_tol=5e-3), (v, text)


def _texts(fig) -> list[str]:  # type: ignore[no-untyped-def]
    return [t.text for t in fig.items if isinstance(t, Text)]


def test_chart_labels_of_large_values_are_plain_numbers() -> None:
    # Before: ".3g" printed the outer ring of readings near 1500 as "1.5e+03".
    pts = [ReadingPoint(k * 45.0, 1200.0 + 100.0 * math.cos(math.radians(k * 45.0)))
           for k in range(8)]
    fig = circle_fit_figure(pts, method="amplitude", circle_radius=100.0,
                            unit_label="g·mm", title="Plane 1")
    ring = [t for t in _texts(fig) if "outer ring" in t]
    assert ring and "e+" not in ring[0] and "1500 g·mm" in ring[0]
    polar = polar_figure([PolarVector("initial", 23456.0, 0.0, "initial")], unit_label="g·mm")
    assert any("initial: 23456 g·mm" in t for t in _texts(polar))
    bars = bar_figure([BarGroup("a", [Bar(2_500_000.0)])], series=["g·mm"])
    assert "2500000" in _texts(bars) and not any("e+" in t for t in _texts(bars))
