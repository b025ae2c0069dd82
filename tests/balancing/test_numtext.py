"""Numbers as text without an exponent (shopapp.balancing.numtext).

Reference: Python's own ``format(v, ".{sig}g")`` (the C library's rounding to
significant figures), read back as a float — the same value, never its exponent.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from shopapp.balancing.numtext import figures, short
from shopapp.core.display import number

# Within the magnitudes spelt out as digits (TINY..HUGE; outside them the text names a bound,
# see test_absurd_magnitudes_are_named_not_spelt_out).
finite = st.floats(min_value=-1e12, max_value=1e12, allow_nan=False, allow_infinity=False
                   ).filter(lambda v: v == 0 or abs(v) >= 1e-9)


@given(finite, st.integers(min_value=1, max_value=6))
def test_figures_never_print_an_exponent_and_keep_the_value(v: float, sig: int) -> None:
    text = figures(v, sig)
    assert "e" not in text.lower()
    if v == 0 or abs(v) >= 10 ** (sig - 1):
        assert float(text) == pytest.approx(round(v), abs=0.5)  # whole numbers print whole
    else:
        # the same significant figures Python's "g" format keeps (its exponent aside)
        assert float(text) == pytest.approx(float(format(v, f".{sig}g")), rel=1e-12, abs=1e-300)


@pytest.mark.parametrize("value, sig, expected", [
    (18900.0, 3, "18900"),        # 1.89e+04 with ".3g"
    (1234567.0, 6, "1234567"),    # 1.23457e+06 with "g"
    (0.000123, 3, "0.000123"),    # 0.000123 with ".3g" too
    (12.34, 3, "12.3"),
    (1.5, 6, "1.5"),
])
def test_short_prints_what_g_meant(value: float, sig: int, expected: str) -> None:
    assert short(value, sig) == expected
    assert "e" in format(value, f".{sig}g") or format(value, f".{sig}g") == expected


def test_non_finite_values_name_themselves_and_pages_show_a_dash() -> None:
    assert (figures(math.inf), figures(-math.inf), figures(math.nan)) == ("inf", "-inf", "nan")
    assert number(math.nan) == "–" and number(None) == "–"


def test_absurd_magnitudes_are_named_not_spelt_out() -> None:
    # Hostile input such as 1e300 would otherwise print 301 digits in a refusal message
    # (common practice, no source: no shop quantity reaches 10^15).
    assert figures(1e300) == "more than 1000000000000000"
    assert short(-2.5e17) == "less than -1000000000000000"
    assert figures(999_999_999_999_999.0, 3) == "999999999999999"
    # ... and so are absurdly small ones (1e-300 printed 300 zeros in the run log).
    assert figures(1e-300) == "less than 0.000000001"
    assert short(-3e-12) == "more than -0.000000001"
    assert figures(1.5e-9, 2) == "0.0000000015"


def test_p_values_print_without_an_exponent() -> None:
    from shopapp.core.display import p_text

    # Convention of reporting very small p-values as a bound (common practice, no source).
    assert p_text(3.2e-9) == "p < 0.001"
    assert p_text(0.0234) == "p = 0.023"
    assert p_text(0.5) == "p = 0.5"
