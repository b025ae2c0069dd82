"""Chart data of the resonance pages: analyses turned into the plain inputs of
:mod:`shopapp.charts.bode`, :mod:`shopapp.charts.nyquist` and :mod:`shopapp.charts.xy`.

Angles are shown in the shop's display convention (sense and zero). The
phase of the Bode plot stays continuous: the display angle is the linear map
``±(internal − zero)`` of the continuous internal angle, shifted by whole turns
so that the median reading lies in [0, 360).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

from shopapp.charts.bode import BodeCurveData, BodeData, bode_figure
from shopapp.charts.nyquist import NyquistData, nyquist_figure
from shopapp.charts.primitives import Figure
from shopapp.charts.xy import VMarker, XBand, XYSeries, xy_figure
from shopapp.core.display import ShopDisplay, quantity
from shopapp.models import RunUpRecord
from shopapp.resonance.loose_mass_calc import LooseMassCheck
from shopapp.resonance.runups import RunUpAnalysis, operating_range

if TYPE_CHECKING:
    from shopapp.balancing.runup import BodeCurve


def _phase_map(disp: ShopDisplay, internal: Sequence[float]) -> tuple[float, float]:
    """``(sign, offset)`` with display = sign·internal + offset, the median reading in
    [0, 360) (one odd reading at the start does not push the whole curve below 0°)."""
    sign = 1.0 if disp.sense == "with_rotation" else -1.0
    middle = sign * (sorted(internal)[len(internal) // 2] - disp.zero)
    offset = -sign * disp.zero - 360.0 * math.floor(middle / 360.0)
    return sign, offset


def _curve(c: BodeCurve, sign: float, offset: float) -> BodeCurveData:
    return BodeCurveData(c.speed_rpm, c.amplitude, [sign * a + offset for a in c.angle_deg])


def run_up_figures(analysis: RunUpAnalysis, record: RunUpRecord,
                   disp: ShopDisplay) -> list[Figure]:
    """The Bode plot and the polar (Nyquist) plot of an analysed run-up (none if it failed)."""
    curves = analysis.curves
    if curves is None or not curves.measured.speed_rpm:
        return []
    sign, offset = _phase_map(disp, curves.measured.angle_deg)
    measured = _curve(curves.measured, sign, offset)
    fitted = [_curve(c, sign, offset) for c in curves.fitted]
    bode = BodeData(
        measured=measured, fitted=fitted, critical_speeds_rpm=curves.critical_speeds_rpm,
        operating_speed_rpm=record.operating_speed_rpm,
        operating_range_rpm=operating_range(record), unit=record.unit,
    )
    marks = []
    for nc, c in zip(curves.critical_speeds_rpm, fitted, strict=True):
        k = min(range(len(c.speed_rpm)), key=lambda i: abs(c.speed_rpm[i] - nc))
        marks.append((f"critical {quantity(nc, 'rpm')}", c.amplitude[k], c.phase_deg[k] % 360.0))
    nyq = NyquistData(
        measured=[(s, a, p % 360.0) for s, a, p in
                  zip(measured.speed_rpm, measured.amplitude, measured.phase_deg, strict=True)],
        fitted=[[(a, p % 360.0) for a, p in zip(c.amplitude, c.phase_deg, strict=True)]
                for c in fitted],
        marks=marks, unit=record.unit,
    )
    return [bode_figure(bode), nyquist_figure(nyq)]


def _every(values: Sequence[float], step: int) -> list[float]:
    return list(values[::step]) if step > 1 else list(values)


def loose_mass_figures(check: LooseMassCheck) -> list[Figure]:
    """The stability bands on a speed axis and the whirl over the simulated run-up."""
    res, c = check.result, check.curves
    fn = check.natural_frequency_rpm
    limit = res.scan_limit_rpm
    op_marker = VMarker(res.speed_rpm, f"operating {quantity(res.speed_rpm, 'rpm')}", "operating",
                        "operating speed")
    res_marker = VMarker(fn, f"support resonance {quantity(fn, 'rpm')}", "limit",
                         "support resonance")
    bands = [XBand(lo, hi, "masses settle (balanced state stable)", "bar2")
             for lo, hi in res.stable_band_rpm]
    band_fig = xy_figure(
        [XYSeries("whirl of the rotor without the balancer (steady)", c.speed_rpm,
                  c.steady_whirl_without_balancer_um)],
        title="Where the balancer settles", x_label=f"speed, rpm (scan stopped at "
        f"{quantity(limit, 'rpm')})", y_label="whirl, µm", bands=bands,
        markers=[res_marker, op_marker], x_range=(0.0, limit), y_min=0.0, height=250.0,
    )
    step = max(1, len(c.time_s) // 600)
    t = _every(c.time_s, step)
    sim = res.simulation
    markers = []
    if res.speed_rpm > fn:
        t_res = sim.ramp_time_s * fn / res.speed_rpm
        markers.append(VMarker(t_res, "passes the support resonance", "limit",
                               "support resonance passed"))
    markers.append(VMarker(sim.ramp_time_s, f"at {quantity(res.speed_rpm, 'rpm')}", "fit",
                           "end of the run-up"))
    run_fig = xy_figure(
        [XYSeries("with the balancer", t, _every(c.whirl_um, step), style="series"),
         XYSeries("without (masses held evenly spaced)", t,
                  _every(c.whirl_without_balancer_um, step), style="series2")],
        title="Whirl over the simulated run-up", x_label="time, s", y_label="whirl, µm",
        markers=markers, y_min=0.0, height=260.0,
    )
    return [band_fig, run_fig]
