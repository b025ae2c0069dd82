"""Bode plot of a run-up: amplitude and phase against speed, as a :class:`Figure`.

Two panels share the speed axis (geometry of :mod:`shopapp.charts.xy`): the
amplitude above, the phase below. Measured readings are markers, each fitted
resonance a solid line; the critical speeds are dashed vertical lines labelled
in the upper panel, the operating speed a line of its own style (or the
operating range a shaded band) in both. The phase is given continuous (not
wrapped), in the shop's display convention, and its axis is stepped in 15°,
30°, 45°, 90° or 180°. Through a resonance the phase turns by about 180°.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from shopapp.charts.primitives import Figure, Text
from shopapp.charts.xy import (
    ANGLE_STEPS,
    Box,
    Panel,
    VMarker,
    XBand,
    XYSeries,
    draw_panel,
    fitted_axis,
    legend,
    widest_label,
)
from shopapp.core.display import quantity


@dataclass(frozen=True)
class BodeCurveData:
    """Speeds (rpm), amplitudes and continuous phases (display degrees) of one curve."""

    speed_rpm: Sequence[float]
    amplitude: Sequence[float]
    phase_deg: Sequence[float]


@dataclass(frozen=True)
class BodeData:
    """Everything the Bode plot shows, as plain numbers."""

    measured: BodeCurveData
    fitted: Sequence[BodeCurveData]
    critical_speeds_rpm: Sequence[float]
    operating_speed_rpm: float | None
    operating_range_rpm: tuple[float, float] | None
    unit: str


_TOP = 34.0
_GAP = 24.0
_RIGHT = 14.0


def _markers(d: BodeData) -> tuple[list[VMarker], list[XBand]]:
    marks = [VMarker(nc, f"critical {quantity(nc, 'rpm')}", "limit", "critical speed")
             for nc in d.critical_speeds_rpm]
    bands = []
    if d.operating_speed_rpm is not None:
        op = d.operating_speed_rpm
        marks.append(VMarker(op, f"operating {quantity(op, 'rpm')}", "operating",
                             "operating speed"))
    if d.operating_range_rpm is not None:
        lo, hi = d.operating_range_rpm
        bands.append(XBand(lo, hi, "operating range", "bar2"))
    return marks, bands


def _entries(d: BodeData, marks: Sequence[VMarker], bands: Sequence[XBand]
             ) -> list[tuple[str, str, str]]:
    out = [("measured", "circle", "point")]
    if d.fitted:
        out.append(("fitted resonance", "line", "series"))
    for legend_label, st in (("critical speed", "limit"), ("operating speed", "operating")):
        if any(m.legend == legend_label for m in marks):
            out.append((legend_label, "line", st))
    if bands:
        out.append(("operating range", "band", "bar2"))
    return out


def bode_panels(d: BodeData, width: float = 540.0, height: float = 440.0
                ) -> tuple[Panel, Panel, list[tuple[str, str, str]]]:
    """The amplitude and phase panels (boxes and axes) and the legend entries."""
    marks, bands = _markers(d)
    entries = _entries(d, marks, bands)
    legend_w = width - 22.0
    legend_h = legend(Figure(width, height), entries, 0.0, 0.0, legend_w)  # measure only
    bottom = 46.0 + legend_h
    usable = height - _TOP - bottom - _GAP
    amp_h, ph_h = 0.58 * usable, 0.42 * usable

    speeds = [*d.measured.speed_rpm, *d.critical_speeds_rpm]
    speeds += [s for c in d.fitted for s in c.speed_rpm]
    if d.operating_speed_rpm is not None:
        speeds.append(d.operating_speed_rpm)
    if d.operating_range_rpm is not None:
        speeds.extend(d.operating_range_rpm)
    amps = [*d.measured.amplitude, *(a for c in d.fitted for a in c.amplitude)]
    phases = [*d.measured.phase_deg, *(p for c in d.fitted for p in c.phase_deg)]
    amp_axis = fitted_axis(0.0, max(amps, default=1.0), amp_h, horizontal=False)
    ph_axis = fitted_axis(min(phases, default=0.0), max(phases, default=360.0), ph_h,
                          horizontal=False, steps=ANGLE_STEPS)
    left = max(34.0, widest_label(amp_axis) + 10.0, widest_label(ph_axis) + 10.0)
    plot_w = width - left - _RIGHT
    x_axis = fitted_axis(min(speeds, default=0.0), max(speeds, default=1.0), plot_w,
                         horizontal=True)
    ph_box = Box(left, bottom, plot_w, ph_h)
    amp_box = Box(left, bottom + ph_h + _GAP, plot_w, amp_h)

    def series(values: str) -> list[XYSeries]:
        m = d.measured
        ys = m.amplitude if values == "amplitude" else m.phase_deg
        titles = [f"{quantity(s, 'rpm')}: {quantity(a, d.unit)} at {quantity(p % 360.0, '°')}"
                  for s, a, p in zip(m.speed_rpm, m.amplitude, m.phase_deg, strict=True)]
        out = [XYSeries("fitted resonance", c.speed_rpm,
                        c.amplitude if values == "amplitude" else c.phase_deg)
               for c in d.fitted]
        out.append(XYSeries("measured", m.speed_rpm, ys, style="point", line=False,
                            marker="circle", titles=titles))
        return out

    amp = Panel(amp_box, x_axis, amp_axis, series("amplitude"), bands, marks,
                y_label=f"amplitude, {d.unit}", x_labels=False)
    ph = Panel(ph_box, x_axis, ph_axis, series("phase"), bands, marks,
               y_label="phase, ° (shop's convention)", marker_labels=False)
    return amp, ph, entries


def bode_figure(d: BodeData, *, title: str = "Bode plot", width: float = 540.0,
                height: float = 440.0) -> Figure:
    """Amplitude and phase against speed, measured and fitted, critical and operating
    speed marked; legend below."""
    fig = Figure(width, height, title=title,
                 description=f"{title}: amplitude ({d.unit}) and phase against speed (rpm), "
                             "measured points and fitted resonance")
    amp, ph, entries = bode_panels(d, width, height)
    fig.add(Text(amp.box.left, height - 14.0, title, style="title"))
    draw_panel(fig, amp)
    draw_panel(fig, ph)
    fig.add(Text(ph.box.right, ph.box.bottom - 25.0, "speed, rpm", style="small", anchor="end"))
    legend(fig, entries, 8.0, ph.box.bottom - 40.0, width - 22.0)
    return fig
