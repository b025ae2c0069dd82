"""Polar plot geometry: where vectors point, the tolerance circle, scale, legend."""

from __future__ import annotations

import math

import pytest

from shopapp.charts import Circle, Line, Text
from shopapp.charts.polar import PolarVector, nice_ceiling, polar_figure
from shopapp.charts.svg import to_svg


def _centre(fig):  # type: ignore[no-untyped-def]
    rings = [c for c in fig.items if isinstance(c, Circle) and c.style == "grid"]
    return rings[0].cx, rings[0].cy, max(c.r for c in rings)


def _arrows(fig, style=None):  # type: ignore[no-untyped-def]
    return [i for i in fig.items if isinstance(i, Line) and i.arrow
            and (style is None or i.style == style)]


def test_a_vector_at_90_display_degrees_points_right() -> None:
    # Display convention: 0° up, angles clockwise (like a dial), so 90° is to the right.
    fig = polar_figure([PolarVector("check (run 2)", 5.0, 90.0, "check")])
    cx, cy, _ = _centre(fig)
    (v,) = _arrows(fig)
    assert (v.x1, v.y1) == (cx, cy)
    assert v.x2 > cx and v.y2 == pytest.approx(cy)


def test_display_convention_is_applied_to_internal_angles() -> None:
    # Internal 90° shown against rotation with zero at 0°: display = -90° = 270°, to the left.
    fig = polar_figure([PolarVector("x", 5.0, 90.0)], angle_sense="against_rotation")
    cx, cy, _ = _centre(fig)
    (v,) = _arrows(fig)
    assert v.x2 < cx and v.y2 == pytest.approx(cy)
    # Zero shifted to internal 90°: the same vector shows at display 0°, straight up.
    fig = polar_figure([PolarVector("x", 5.0, 90.0)], angle_zero_deg=90.0)
    cx, cy, _ = _centre(fig)
    (v,) = _arrows(fig)
    assert v.x2 == pytest.approx(cx) and v.y2 > cy


def test_tolerance_circle_radius_scales_with_the_limit() -> None:
    vec = [PolarVector("residual (run 4)", 10.0, 0.0, "residual")]
    small = polar_figure(vec, limit=20.0)
    big = polar_figure(vec, limit=40.0)

    def limit_r(fig):  # type: ignore[no-untyped-def]
        (c,) = [c for c in fig.items if isinstance(c, Circle) and c.style == "limit"]
        return c.r

    _, _, outer_small = _centre(small)
    # Same scale when the outer ring stays (nice ceiling 20 → 20, 40 → 40): radius ∝ limit/outer.
    assert limit_r(small) == pytest.approx(outer_small * 20.0 / nice_ceiling(20.0))
    assert limit_r(big) == pytest.approx(outer_small * 40.0 / nice_ceiling(40.0))
    # With a fixed scale (a large vector sets the outer ring) the radius doubles with the limit.
    vec_big = [PolarVector("initial", 100.0, 0.0, "initial")]
    r1 = limit_r(polar_figure(vec_big, limit=20.0))
    r2 = limit_r(polar_figure(vec_big, limit=40.0))
    assert r2 == pytest.approx(2 * r1)


def test_vector_length_is_proportional_to_magnitude() -> None:
    fig = polar_figure([PolarVector("initial", 80.0, 0.0, "initial"),
                        PolarVector("check (run 3)", 20.0, 180.0, "check")])
    cx, cy, outer_r = _centre(fig)
    a, b = _arrows(fig)
    la = math.hypot(a.x2 - cx, a.y2 - cy)
    lb = math.hypot(b.x2 - cx, b.y2 - cy)
    assert la == pytest.approx(4 * lb)
    assert la == pytest.approx(outer_r * 80.0 / nice_ceiling(80.0))
    assert b.y2 < cy  # 180° points down


@pytest.mark.parametrize(("value", "ceiling"), [(0.0, 1.0), (7.3, 8.0), (1040.0, 1500.0),
                                                 (0.021, 0.025), (5.0, 5.0)])
def test_nice_ceiling(value: float, ceiling: float) -> None:
    assert nice_ceiling(value) == pytest.approx(ceiling)


def test_legend_reads_without_colour_and_svg_renders() -> None:
    fig = polar_figure([PolarVector("initial (run 1)", 50.0, 30.0, "initial"),
                        PolarVector("residual (run 5)", 2.0, 200.0, "residual")],
                       limit=10.0, title="Plane 1", unit_label="g·mm")
    texts = [t.text for t in fig.items if isinstance(t, Text)]
    assert any("initial (run 1): 50 g·mm at 30°" in t for t in texts)
    assert any("tolerance 10 g·mm" in t for t in texts)
    assert {"0°", "90°", "180°", "270°"} <= set(texts)
    # Series differ by line style (dash/width), not only colour.
    styles = {i.style for i in fig.items if isinstance(i, Line) and not i.arrow} - {"grid"}
    assert {"initial", "residual", "limit"} <= styles
    svg = to_svg(fig)
    assert svg.startswith("<svg") and "stroke-dasharray" in svg and "<script" not in svg


def test_junk_vectors_are_skipped_not_drawn() -> None:
    fig = polar_figure([PolarVector("bad", float("nan"), 0.0), PolarVector("neg", -1.0, 0.0),
                        PolarVector("ok", 1.0, 0.0)], limit=float("inf"))
    assert len(_arrows(fig)) == 1
    assert not [c for c in fig.items if isinstance(c, Circle) and c.style == "limit"]


# --- labels clear of each other, zoomed inset (issue 11) ------------------------------------

from shopapp.charts.labels import collide  # noqa: E402


def _plot_texts(fig):  # type: ignore[no-untyped-def]
    """The texts drawn inside the plot square (angle labels, ring values, tip labels)."""
    _, cy, outer_r = _centre(fig)
    return [t for t in fig.items if isinstance(t, Text) and t.y > cy - outer_r - 20.0]


@pytest.mark.parametrize("size", [200.0, 260.0])
@pytest.mark.parametrize("angles", [(15.0, 195.0), (0.0, 10.0), (45.0, 300.0), (90.0, 95.0)])
def test_no_two_plot_labels_overlap(size: float, angles: tuple[float, float]) -> None:
    fig = polar_figure([PolarVector("initial (run 1)", 800.0, angles[0], "initial"),
                        PolarVector("check (run 3)", 390.0, angles[1], "check"),
                        PolarVector("residual (run 4)", 410.0, angles[1] + 5.0, "residual")],
                       limit=400.0, size=size)
    texts = _plot_texts(fig)
    labels = {t.text for t in texts}
    assert {"0°", "90°", "180°", "270°"} <= labels
    assert {"400", "800"} <= labels  # both ring values (outer ring 800) found a free place
    for i, a in enumerate(texts):
        for b in texts[i + 1:]:
            assert not collide(a, b, gap=0.0), (a, b)
    # Readable at the default size: the plot's own labels use the 9 pt label style.
    assert all(t.style == "label" for t in texts)


def test_small_residual_is_visible_in_the_zoomed_inset() -> None:
    # A residual of 2 % of full scale (outer ring 100) with the tolerance at 5.
    fig = polar_figure([PolarVector("initial (run 1)", 100.0, 0.0, "initial"),
                        PolarVector("residual (run 4)", 2.0, 120.0, "residual")], limit=5.0)
    cx, cy, outer_r = _centre(fig)
    residual_arrows = _arrows(fig, "residual")
    main = [a for a in residual_arrows if (a.x1, a.y1) == (cx, cy)]
    inset = [a for a in residual_arrows if (a.x1, a.y1) != (cx, cy)]
    assert len(inset) == 1
    (z,) = inset
    main_len = 2.0 / 100.0 * outer_r  # 2 % of full scale: under 3 points in the main plot
    assert not main or math.hypot(main[0].x2 - cx, main[0].y2 - cy) == pytest.approx(main_len)
    z_len = math.hypot(z.x2 - z.x1, z.y2 - z.y1)
    assert z_len >= 15.0 and z_len >= 5 * main_len  # a visible arrow (our threshold)
    # Same geometry, larger scale: the residual keeps its ratio to the limit circle.
    limits = [c for c in fig.items if isinstance(c, Circle) and c.style == "limit"]
    z_limit = [c for c in limits if (c.cx, c.cy) == (z.x1, z.y1)]
    assert len(z_limit) == 1 and z_len / z_limit[0].r == pytest.approx(2.0 / 5.0)
    # Still 120° clockwise from the top in the inset.
    assert math.degrees(math.atan2(z.x2 - z.x1, z.y2 - z.y1)) == pytest.approx(120.0)
    assert any(isinstance(t, Text) and t.text.startswith("zoom: outer ring") for t in fig.items)


def test_no_inset_when_the_residual_is_already_large_enough() -> None:
    fig = polar_figure([PolarVector("initial (run 1)", 100.0, 0.0, "initial"),
                        PolarVector("residual (run 4)", 40.0, 120.0, "residual")], limit=50.0)
    assert len(_arrows(fig, "residual")) == 1
    assert not any(isinstance(t, Text) and t.text.startswith("zoom") for t in fig.items)
