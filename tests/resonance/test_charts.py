"""Chart geometry of the resonance pages: points inside their plot box, labels clear of
each other, axis values placed by the plain linear map, no exponents in tick labels."""

from __future__ import annotations

import math

import pytest

from shopapp.charts.bode import BodeCurveData, BodeData, bode_figure, bode_panels
from shopapp.charts.labels import collisions, text_box
from shopapp.charts.nyquist import NyquistData, nyquist_figure, nyquist_geometry
from shopapp.charts.primitives import Circle, Figure, Line, Polyline, Text
from shopapp.charts.svg import to_svg
from shopapp.charts.xy import VMarker, XBand, XYSeries, fitted_axis, nice_axis, xy_figure


def _jeffcott(nc: float, zeta: float, speeds: list[float]) -> list[complex]:
    """Textbook rotating-unbalance response r²/(1 − r² + 2iζr) (Rao — from memory), µm."""
    out = []
    for n in speeds:
        r = n / nc
        out.append(50.0 * r * r / complex(1.0 - r * r, 2.0 * zeta * r))
    return out


def _bode_data(nc: float = 1800.0, op: float | None = 1850.0,
               span: tuple[float, float] | None = None) -> BodeData:
    speeds = [600.0 + 60.0 * k for k in range(41)]
    z = _jeffcott(nc, 0.05, speeds)
    amp = [abs(v) for v in z]
    phase = [math.degrees(math.atan2(v.imag, v.real)) % 360.0 for v in z]
    # continuous: the lag grows through the resonance (angle falls by up to 180°)
    for k in range(1, len(phase)):
        while phase[k] - phase[k - 1] > 180.0:
            phase[k] -= 360.0
    curve = BodeCurveData(speeds, amp, phase)
    return BodeData(measured=curve, fitted=[curve], critical_speeds_rpm=[nc],
                    operating_speed_rpm=op, operating_range_rpm=span, unit="µm")


def _texts(fig: Figure) -> list[Text]:
    return [t for t in fig.items if isinstance(t, Text)]


@pytest.mark.parametrize("op", [1850.0, 1800.0, 3000.0, None])
def test_bode_labels_do_not_collide_even_when_markers_coincide(op) -> None:
    fig = bode_figure(_bode_data(op=op))
    assert collisions(_texts(fig)) == []
    labels = [t.text for t in _texts(fig)]
    assert "critical 1800 rpm" in labels
    assert any(t.startswith("operating ") for t in labels) is (op is not None)
    if op is not None:
        assert f"operating {op:.0f} rpm" in labels
    for t in _texts(fig):  # every text inside the figure
        x0, y0, x1, y1 = text_box(t)
        assert x0 >= 0 and y0 >= 0 and x1 <= fig.width and y1 <= fig.height, t


def test_bode_points_and_curves_lie_inside_their_panels() -> None:
    d = _bode_data(span=None)
    amp, ph, _ = bode_panels(d)
    fig = bode_figure(d)
    boxes = (amp.box, ph.box)
    data_markers = [c for c in fig.items if isinstance(c, Circle) and c.title]
    assert len(data_markers) == 2 * 41
    for c in data_markers:
        assert any(b.contains(c.cx, c.cy) for b in boxes)
    for p in (i for i in fig.items if isinstance(i, Polyline)):
        assert all(any(b.contains(x, y) for b in boxes) for x, y in p.points)
    assert amp.box.bottom > ph.box.top  # amplitude above phase, not overlapping


def test_bode_critical_speed_line_sits_where_the_linear_map_puts_it() -> None:
    d = _bode_data()
    amp, _, _ = bode_panels(d)
    fig = bode_figure(d)
    ax = amp.x_axis
    expected = amp.box.left + (1800.0 - ax.lo) / (ax.hi - ax.lo) * amp.box.width
    verticals = [ln for ln in fig.items if isinstance(ln, Line) and ln.style == "limit"
                 and ln.x1 == ln.x2 and ln.y2 - ln.y1 > 50]
    assert verticals and all(ln.x1 == pytest.approx(expected) for ln in verticals)
    # the peak marker (largest amplitude) is the highest data point of the upper panel
    top = max((c for c in fig.items if isinstance(c, Circle) and c.title
               and amp.box.contains(c.cx, c.cy)), key=lambda c: c.cy)
    assert top.title is not None and top.title.startswith("1800 rpm")


def test_bode_operating_range_is_a_band_in_both_panels() -> None:
    d = _bode_data(op=None, span=(2400.0, 2700.0))
    svg = to_svg(bode_figure(d))
    assert svg.count("<title>operating range</title>") == 2


def test_nyquist_points_on_the_polar_map_and_inside_the_outer_ring() -> None:
    speeds = [600.0 + 60.0 * k for k in range(41)]
    z = _jeffcott(1800.0, 0.05, speeds)
    meas = [(s, abs(v), math.degrees(math.atan2(v.imag, v.real)) % 360.0)
            for s, v in zip(speeds, z, strict=True)]
    d = NyquistData(measured=meas, fitted=[[(a, g) for _, a, g in meas]],
                    marks=[("critical 1800 rpm", meas[20][1], meas[20][2])], unit="µm")
    fig = nyquist_figure(d)
    cx, cy, plot_r, outer = nyquist_geometry(d, 320.0)
    assert outer >= max(a for _, a, _ in meas)
    markers = [c for c in fig.items if isinstance(c, Circle) and c.title]
    assert len(markers) == 41
    for (_, a, g), c in zip(meas, markers, strict=True):
        # display angle 0° up, clockwise: (cx + a·k·sin θ, cy + a·k·cos θ)
        k = plot_r / outer
        assert c.cx == pytest.approx(cx + a * k * math.sin(math.radians(g)))
        assert c.cy == pytest.approx(cy + a * k * math.cos(math.radians(g)))
        assert math.hypot(c.cx - cx, c.cy - cy) <= plot_r + 1e-9
    assert collisions(_texts(fig)) == []
    assert "critical 1800 rpm" in [t.text for t in _texts(fig)]


def test_xy_figure_bands_markers_and_legend_stay_clear() -> None:
    xs = [float(k) * 50.0 for k in range(60)]
    ys = [1000.0 * math.exp(-((x - 720.0) / 300.0) ** 2) for x in xs]
    fig = xy_figure(
        [XYSeries("whirl without the balancer", xs, ys)],
        title="Where the balancer settles", x_label="speed, rpm", y_label="whirl, µm",
        bands=[XBand(810.0, 2950.0, "masses settle")],
        markers=[VMarker(720.0, "support resonance 720 rpm"),
                 VMarker(760.0, "operating 760 rpm", "operating", "operating speed")],
        x_range=(0.0, 2950.0), y_min=0.0,
    )
    assert collisions(_texts(fig)) == []
    assert {"support resonance 720 rpm", "operating 760 rpm"} <= {t.text for t in _texts(fig)}
    svg = to_svg(fig)
    assert "<title>masses settle</title>" in svg and "e+" not in svg


@pytest.mark.parametrize("lo, hi", [(0.0, 0.00037), (0.0, 125_000.0), (-317.0, 44.0),
                                    (1480.0, 1480.0), (0.5, 0.52)])
def test_axes_cover_the_data_and_labels_fit_without_exponents(lo, hi) -> None:
    axis = fitted_axis(lo, hi, 300.0, horizontal=True)
    assert axis.lo <= lo and axis.hi >= hi
    labels = [axis.label(v) for v in axis.ticks]
    assert all("e" not in s and s != "-0" for s in labels)
    assert len(set(labels)) == len(labels)  # enough decimals to tell ticks apart
    width = 300.0 / (len(axis.ticks) - 1)
    assert all(0.56 * 7.5 * len(s) + 6.0 <= width for s in labels)


def test_angle_axis_steps_in_whole_degrees() -> None:
    from shopapp.charts.xy import ANGLE_STEPS

    axis = nice_axis(-300.0, 250.0, 6, ANGLE_STEPS)
    assert axis.step in ANGLE_STEPS and axis.lo <= -300.0 and axis.hi >= 250.0
