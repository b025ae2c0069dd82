"""A residual's share of its limit as people read it (shopapp.core.display.of_limit).

Reference: the verdict itself, residual ≤ limit (ISO 21940-11's U_res ≤ U_per): the
figure printed beside it must never contradict it, and must stay within the rounding of
the true share (common practice, no source).
"""

from __future__ import annotations

import math

from hypothesis import given
from hypothesis import strategies as st

from shopapp.core.display import of_limit

shares = st.floats(min_value=0.0, max_value=1e4, allow_nan=False, allow_infinity=False)
near_100 = st.floats(min_value=98.0, max_value=102.0, allow_nan=False, allow_infinity=False)


def _shown(text: str) -> float:
    assert text.endswith(" %"), text
    return float(text[:-2])


@given(st.one_of(shares, near_100))
def test_the_figure_is_on_the_same_side_of_100_as_the_share(pct: float) -> None:
    shown = _shown(of_limit(pct))
    assert (shown <= 100.0) == (pct <= 100.0), (pct, shown)
    # Never further from the share than its last printed digit: a tenth cut towards 100
    # near the limit, half a percent rounded elsewhere.
    assert abs(shown - pct) <= (0.1 if 99.0 <= pct <= 101.0 else 0.5) + 1e-9, (pct, shown)


def test_near_the_limit_one_decimal_cut_towards_100() -> None:
    # Ordinary whole-percent rounding printed "100 %" for all of these.
    assert of_limit(99.97) == "99.9 %"   # within tolerance
    assert of_limit(100.03) == "100.1 %"  # out of tolerance
    assert of_limit(100.0) == "100.0 %"   # on the limit: within (≤)
    assert of_limit(99.3) == "99.3 %"     # 99.3 × 10 = 992.99… must not drop to 99.2


def test_elsewhere_whole_percent_and_nothing_for_no_number() -> None:
    assert of_limit(83.4) == "83 %"
    assert of_limit(250.6) == "251 %"
    assert of_limit(None) == "–" and of_limit(math.nan) == "–" and of_limit(math.inf) == "–"
