"""Invented run-ups through a resonance, for the demo shop and the tests.

The readings follow the textbook steady-state response of a Jeffcott rotor to a
rotating unbalance (Rao, *Mechanical Vibrations*, rotating-unbalance section —
from memory), written out here independently of the fit::

    z(n) = Q · r² / (1 − r² + 2iζr) + B,    r = n / n_c

with ``Q`` the response far above the critical speed, ``B`` the runout (slow
roll) and a little noise from a seeded :class:`numpy.random.Generator`, so the
same seed gives the same record. Invented data: plausible, not measured.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np
from sqlalchemy.orm import Session

from shopapp.core.clock import shop_today
from shopapp.core.display import ShopDisplay
from shopapp.core.settings import get_settings
from shopapp.models import Job, RunUpRecord, User
from shopapp.resonance.runups import PointIn, record_run_up


@dataclass(frozen=True)
class SyntheticRunUp:
    """Readings ``(speed_rpm, amplitude µm, internal angle °)`` and the truth behind them."""

    points: list[tuple[float, float, float]]
    critical_speed_rpm: float
    damping_ratio: float
    runout: complex


def jeffcott_points(
    critical_speed_rpm: float,
    damping_ratio: float,
    *,
    speeds_rpm: np.ndarray,
    response_um: float = 40.0,
    response_angle_deg: float = 250.0,
    runout_um: float = 3.0,
    runout_angle_deg: float = 70.0,
    noise_um: float = 0.3,
    rng: np.random.Generator | None = None,
) -> SyntheticRunUp:
    """Readings of a Jeffcott rotor at ``speeds_rpm`` (textbook formula above).

    Angles are internal (degrees in the direction of rotation), wrapped to [0, 360).
    """
    gen = rng if rng is not None else np.random.default_rng(16)
    n = np.asarray(speeds_rpm, dtype=float)
    r = n / critical_speed_rpm
    q = response_um * np.exp(1j * math.radians(response_angle_deg))
    runout = complex(runout_um * np.exp(1j * math.radians(runout_angle_deg)))
    z = q * r**2 / (1.0 - r**2 + 2j * damping_ratio * r) + runout
    z = z + noise_um * (gen.normal(size=n.size) + 1j * gen.normal(size=n.size)) / math.sqrt(2.0)
    amp = np.abs(z)
    ang = np.mod(np.degrees(np.angle(z)), 360.0)
    ang = np.where(ang >= 360.0, 0.0, ang)
    pts = [(float(a), float(b), float(c)) for a, b, c in zip(n, amp, ang, strict=True)]
    return SyntheticRunUp(points=pts, critical_speed_rpm=critical_speed_rpm,
                          damping_ratio=damping_ratio, runout=runout)


def add_sample_run_up(
    session: Session,
    job: Job,
    *,
    by: User,
    rng: np.random.Generator | None = None,
    recorded_on: dt.date | None = None,
    damping_ratio: float = 0.06,
    today: dt.date | None = None,
) -> RunUpRecord:
    """Record an invented run-up through a resonance for ``job`` (demo shop).

    The critical speed is put at 70 % of the job's service speed (a margin of
    30 %, clear of the required one for this damping), the readings run from 30 %
    to 160 % of it — kept below the machine's maximum speed by lowering the
    critical speed when the machine is slow — 40 speeds, noise 0.3 µm. Goes
    through :func:`shopapp.resonance.runups.record_run_up` like a typed record
    (``by`` must be allowed to work jobs).
    """
    gen = rng if rng is not None else np.random.default_rng(16)
    nc = 0.7 * job.service_speed_rpm
    machine = job.machine
    if machine is not None and 1.6 * nc > machine.max_speed_rpm:
        nc = machine.max_speed_rpm / 1.6
    speeds = np.round(np.linspace(0.3 * nc, 1.6 * nc, 40), 0)
    data = jeffcott_points(nc, damping_ratio, speeds_rpm=speeds, rng=gen)
    disp = ShopDisplay(get_settings(session))
    points = [PointIn(s, round(a, 2), round(float(disp.angle(ang) or 0.0), 1), line=k + 1)
              for k, (s, a, ang) in enumerate(data.points)]
    slow = data.runout
    today = today or shop_today()
    done = record_run_up(
        session, by=by, job=job, recorded_on=recorded_on or min(job.received_on, today),
        sensor="bearing A, horizontal", measured="displacement", unit="µm", points=points,
        slow_roll_amplitude=round(abs(slow), 2),
        slow_roll_angle_deg=round(float(disp.angle(math.degrees(np.angle(slow)) % 360.0)
                                        or 0.0), 1),
        operating_speed_rpm=job.service_speed_rpm,
        notes="Invented demo run-up (Jeffcott response with a little noise).", today=today,
    )
    return done.record
