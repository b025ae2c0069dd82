"""Balance tolerances and the verdict on a residual unbalance.

Sources and what is from memory:

- ISO 21940-11:2016 (formerly ISO 1940-1:2003): ``U_per [g·mm] = 1000·G·m/Ω``
  with ``G`` in mm/s, ``m`` in kg, ``Ω = 2π·n/60`` rad/s, i.e.
  ``U_per = (30000/π)·G·m/n``; ``e_per [µm = g·mm/kg] = 1000·G/Ω``. The grade
  series steps by a factor of 2.5. The typical rotor examples in
  :data:`GRADES` are from memory of the standard's table, shortened.
- Allocation of ``U_per`` to the bearing planes of an inboard rotor by the
  centre-of-mass position, each share held within 0.3–0.7 of ``U_per`` —
  from memory of the standard; the standard takes the bearing planes as the
  reference planes of the tolerance, compared by magnitude whatever the angle.
- Overhung rotors, static and couple limits, correction-plane equivalents:
  our own rigid-rotor method (documented on each function), used where the
  standard's exact text is not at hand. Overhung and narrow rotors are judged
  for static and couple as well as in the bearing planes; "narrow" is planes
  closer than a third of the bearing span (value from memory).
- The API-style limit ``U_max = 4·W/N`` oz·in (W journal static load in lb,
  N in rpm) as used in API rotating-machinery standards, here in SI:
  ``6350·W/N`` g·mm with W in kg — the constant follows exactly from the unit
  definitions (see :data:`API_GMM_PER_KG_RPM`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite, finite_array, positive
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import amplitude_angle
from shopapp.balancing.planes import transfer_matrix
from shopapp.balancing.units import G_PER_LB, G_PER_OZ, MM_PER_IN


@dataclass(frozen=True)
class BalanceGrade:
    """One balance quality grade: ``G = e_per·Ω`` in mm/s, with typical rotors."""

    grade_mm_s: float
    label: str
    examples: tuple[str, ...]


# Typical rotor examples: from memory of the ISO 21940-11 / ISO 1940-1 table,
# shortened; the standard's own table governs.
GRADES: tuple[BalanceGrade, ...] = (
    BalanceGrade(
        0.4,
        "G 0.4",
        (
            "spindles, discs and armatures of precision grinders",
            "gyroscopes",
        ),
    ),
    BalanceGrade(
        1.0,
        "G 1",
        (
            "grinding-machine drives",
            "small electric armatures with special requirements",
            "tape and record-player drives",
        ),
    ),
    BalanceGrade(
        2.5,
        "G 2.5",
        (
            "gas and steam turbines",
            "turbo-compressors and turbo-generator rotors",
            "machine-tool drives",
            "medium and large electric armatures with special requirements",
            "turbine-driven pumps",
        ),
    ),
    BalanceGrade(
        6.3,
        "G 6.3",
        (
            "fans",
            "pump impellers",
            "flywheels",
            "process-plant machine parts",
            "paper-machine and print rolls",
            "machine-tool and general machinery parts",
            "electric armatures without special requirements",
        ),
    ),
    BalanceGrade(
        16.0,
        "G 16",
        (
            "drive shafts with special requirements",
            "parts of crushing and agricultural machinery",
            "individual engine components",
        ),
    ),
    BalanceGrade(
        40.0,
        "G 40",
        (
            "car wheels and wheel rims",
            "drive shafts",
            "crankshaft drives of elastically mounted fast four-stroke engines",
        ),
    ),
    BalanceGrade(
        100.0,
        "G 100",
        (
            "crankshaft drives of fast diesel engines with six or more cylinders",
            "complete car, truck and locomotive engines",
        ),
    ),
    BalanceGrade(
        250.0, "G 250", ("crankshaft drives of rigidly mounted fast four-cylinder diesel engines",)
    ),
    BalanceGrade(
        630.0,
        "G 630",
        (
            "crankshaft drives of rigidly mounted large four-stroke engines",
            "crankshaft drives of elastically mounted marine diesel engines",
        ),
    ),
    BalanceGrade(
        1600.0, "G 1600", ("crankshaft drives of rigidly mounted large two-stroke engines",)
    ),
    BalanceGrade(
        4000.0,
        "G 4000",
        (
            "crankshaft drives of rigidly mounted slow marine diesel engines"
            " with an odd number of cylinders",
        ),
    ),
)
GRADE_VALUES_MM_S: tuple[float, ...] = tuple(g.grade_mm_s for g in GRADES)

# 4 oz·in per lb of journal load per rpm, in g·mm per kg per rpm:
# 4 · (28.349523125 g · 25.4 mm) / 0.45359237 kg = 4 · 720.077887375 / 0.45359237
# = 2880.3115495 / 0.45359237 = 6350 (exact, because 1 oz = 1/16 lb: 4/16 · 25.4 · 1000).
API_GMM_PER_KG_RPM = 4.0 * G_PER_OZ * MM_PER_IN / (G_PER_LB / 1000.0)

SHARE_MIN = 0.3  # ISO 21940-11 allocation bounds for inboard rotors (from memory)
SHARE_MAX = 0.7
# A rotor whose correction planes are closer together than this fraction of the
# bearing span is "narrow" (disc-like): the plane separation is poor and the
# static and couple parts are judged on their own (value from memory; confirm
# against ISO 21940-11's text on disc-shaped rotors where you can).
NARROW_PLANE_RATIO = 1.0 / 3.0

REFERENCE_PLANES = ("bearing_planes", "correction_planes")


def balance_grade(grade: float | str) -> BalanceGrade:
    """Look up a grade of the ISO 21940-11 series by value (``6.3``) or label (``"G 6.3"``).

    Raises
    ------
    BalancingInputError
        Field ``"grade_mm_s"`` when the value is not one of :data:`GRADES`.
    """
    raw = grade
    if isinstance(grade, str):
        text = grade.strip().upper().removeprefix("G").strip()
        try:
            grade = float(text)
        except ValueError:
            raise BalancingInputError("grade_mm_s", f"unknown balance grade {raw!r}") from None
    value = positive("grade_mm_s", grade)
    for g in GRADES:
        if math.isclose(value, g.grade_mm_s, rel_tol=1e-9):
            return g
    allowed = ", ".join(f"{short(g)}" for g in GRADE_VALUES_MM_S)
    raise BalancingInputError(
        "grade_mm_s", f"unknown balance grade {raw!r}; ISO 21940-11 grades are {allowed}"
    )


def permissible_specific_unbalance(grade_mm_s: float, service_speed_rpm: float) -> float:
    """Permissible specific unbalance ``e_per`` in µm (= g·mm/kg).

    ``e_per = 1000 · G / Ω``, ``Ω = 2π·n/60`` (ISO 21940-11; G in mm/s, the
    factor 1000 turns mm into µm).

    Parameters
    ----------
    grade_mm_s : float
        Balance quality grade G, one of :data:`GRADE_VALUES_MM_S`.
    service_speed_rpm : float
        Maximum service speed n, > 0.
    """
    g = balance_grade(grade_mm_s).grade_mm_s
    n = positive("service_speed_rpm", service_speed_rpm)
    omega_rad_s = 2.0 * math.pi * n / 60.0
    return 1000.0 * g / omega_rad_s


def permissible_unbalance(grade_mm_s: float, mass_kg: float, service_speed_rpm: float) -> float:
    """Permissible residual unbalance ``U_per`` in g·mm for the whole rotor.

    ``U_per = 1000 · G · m / Ω = (30000/π) · G · m / n`` (ISO 21940-11), with G
    in mm/s, m the rotor mass in kg and n the maximum service speed in rpm. The
    exact 30000/π is used, not the rounded 9549.

    Raises
    ------
    BalancingInputError
        Unknown grade (``"grade_mm_s"``), mass or speed not > 0 or not finite.
    """
    m = positive("mass_kg", mass_kg)
    return permissible_specific_unbalance(grade_mm_s, service_speed_rpm) * m


def api_limit_gmm(journal_load_kg: float, service_speed_rpm: float) -> float:
    """API-style residual unbalance limit per plane, ``U_max = 6350 · W / N`` g·mm.

    Equivalent to ``4·W/N`` oz·in with W in lb; W is the static journal load
    of the bearing next to the plane (kg), N the maximum continuous speed (rpm).
    The constant is :data:`API_GMM_PER_KG_RPM`, derived from the unit definitions.
    """
    w = positive("journal_load_kg", journal_load_kg)
    n = positive("service_speed_rpm", service_speed_rpm)
    return API_GMM_PER_KG_RPM * w / n


@dataclass(frozen=True)
class RotorGeometry:
    """Axial positions in mm from one datum (any direction, any sign).

    ``plane_1_mm`` / ``plane_2_mm`` are the correction planes, optional where
    only the bearing allocation is wanted. Build it with :func:`rotor_geometry`
    to have it checked.
    """

    bearing_a_mm: float
    bearing_b_mm: float
    centre_of_mass_mm: float
    plane_1_mm: float | None = None
    plane_2_mm: float | None = None

    @property
    def span_mm(self) -> float:
        """Bearing span L = |z_B − z_A|."""
        return abs(self.bearing_b_mm - self.bearing_a_mm)

    @property
    def layout(self) -> str:
        """``"inboard"`` when the centre of mass lies between the bearings, else ``"overhung"``."""
        lo, hi = sorted((self.bearing_a_mm, self.bearing_b_mm))
        return "inboard" if lo <= self.centre_of_mass_mm <= hi else "overhung"

    @property
    def has_planes(self) -> bool:
        """Whether both correction planes are given."""
        return self.plane_1_mm is not None and self.plane_2_mm is not None

    @property
    def narrow(self) -> bool:
        """Correction planes closer than :data:`NARROW_PLANE_RATIO` of the bearing span."""
        if self.plane_1_mm is None or self.plane_2_mm is None:
            return False
        return abs(self.plane_2_mm - self.plane_1_mm) < NARROW_PLANE_RATIO * self.span_mm


def rotor_geometry(
    bearing_a_mm: float,
    bearing_b_mm: float,
    centre_of_mass_mm: float,
    plane_1_mm: float | None = None,
    plane_2_mm: float | None = None,
) -> RotorGeometry:
    """Checked :class:`RotorGeometry`: finite positions, distinct bearings and planes."""
    za = finite("bearing_a_mm", bearing_a_mm)
    zb = finite("bearing_b_mm", bearing_b_mm)
    if za == zb:
        raise BalancingInputError(
            "bearing_b_mm", "must differ from bearing_a_mm (zero bearing span)"
        )
    zc = finite("centre_of_mass_mm", centre_of_mass_mm)
    if (plane_1_mm is None) != (plane_2_mm is None):
        missing = "plane_2_mm" if plane_2_mm is None else "plane_1_mm"
        raise BalancingInputError(missing, "give both correction planes or neither")
    z1 = z2 = None
    if plane_1_mm is not None and plane_2_mm is not None:
        z1 = finite("plane_1_mm", plane_1_mm)
        z2 = finite("plane_2_mm", plane_2_mm)
        if z1 == z2:
            raise BalancingInputError("plane_2_mm", "must differ from plane_1_mm")
    return RotorGeometry(za, zb, zc, z1, z2)


@dataclass(frozen=True)
class BearingAllocation:
    """Share of ``U_per`` allotted to each bearing plane.

    ``share_a``/``share_b`` are fractions of ``U_per``; ``clamped`` tells that
    the 0.3–0.7 bounds of an inboard rotor were applied.
    """

    bearing_a_gmm: float
    bearing_b_gmm: float
    share_a: float
    share_b: float
    clamped: bool
    layout: str


def allocate_to_bearings(u_per_gmm: float, geometry: RotorGeometry) -> BearingAllocation:
    """Allocate ``U_per`` to the bearing planes A and B.

    Inboard rotor (ISO 21940-11, from memory): ``U_per,A = U_per·L_B/L``,
    ``U_per,B = U_per·L_A/L`` with L_A, L_B the distances from the centre of
    mass to bearings A and B and L the span; each share is held within
    ``0.3·U_per … 0.7·U_per`` (the shares still add up to ``U_per``).

    Overhung rotor (our method): the shares are the bearing reactions of a
    static unbalance ``U_per`` at the centre of mass, by the lever rule,
    ``|z_B − z_c|/L`` and ``|z_c − z_A|/L`` (they add up to more than one: the
    near bearing carries more than the whole ``U_per``). No 0.3–0.7 bounds.
    """
    u = positive("u_per_gmm", u_per_gmm)
    span = geometry.span_mm
    lever_a = abs(geometry.bearing_b_mm - geometry.centre_of_mass_mm)  # L_B
    lever_b = abs(geometry.centre_of_mass_mm - geometry.bearing_a_mm)  # L_A
    if geometry.layout == "inboard":
        raw_a = lever_a / span
        share_a = min(max(raw_a, SHARE_MIN), SHARE_MAX)
        share_b = 1.0 - share_a
        clamped = share_a != raw_a
    else:
        share_a, share_b, clamped = lever_a / span, lever_b / span, False
    return BearingAllocation(u * share_a, u * share_b, share_a, share_b, clamped, geometry.layout)


@dataclass(frozen=True)
class StaticCoupleLimits:
    """Separate limits for the static and the couple part of the residual.

    ``static_gmm``: resultant unbalance referred to the centre of mass.
    ``couple_moment_gmm2``: moment of the residual about the centre of mass.
    ``couple_pair_gmm``: that moment as an equal and opposite pair in the
    correction planes (``None`` without planes).
    """

    static_gmm: float
    couple_moment_gmm2: float
    couple_pair_gmm: float | None


def static_couple_limits(
    allocation: BearingAllocation, geometry: RotorGeometry
) -> StaticCoupleLimits:
    """Static and couple limits that keep both bearing planes within their allocation.

    Our method (not the standard's text, which we do not have at hand for
    overhung and narrow rotors): a static residual S at the centre of mass
    and a couple moment M about it load bearing j, in the worst phase, with
    ``|S|·λ_j/L + |M|/L`` where ``λ_A = |z_B − z_c|``, ``λ_B = |z_c − z_A|``
    (rigid-body statics). Half of each bearing's allowance U_j is given to
    each part:

    ``S_per = min_j 0.5·U_j·L/λ_j``, ``M_per = min_j 0.5·U_j·L``,
    ``C_per = M_per / |z_2 − z_1|``.

    Any residual within both limits is therefore within the bearing allocation
    whatever the angles.
    """
    span = geometry.span_mm
    levers = (
        abs(geometry.bearing_b_mm - geometry.centre_of_mass_mm),
        abs(geometry.centre_of_mass_mm - geometry.bearing_a_mm),
    )
    allowances = (allocation.bearing_a_gmm, allocation.bearing_b_gmm)
    # A zero lever means a static residual puts nothing on that bearing.
    static = min(
        0.5 * u * span / lam for u, lam in zip(allowances, levers, strict=True) if lam > 0.0
    )
    moment = min(0.5 * u * span for u in allowances)
    pair = None
    if geometry.plane_1_mm is not None and geometry.plane_2_mm is not None:
        pair = moment / abs(geometry.plane_2_mm - geometry.plane_1_mm)
    return StaticCoupleLimits(static, moment, pair)


def correction_plane_limits(
    allocation: BearingAllocation, geometry: RotorGeometry
) -> tuple[float, float]:
    """Equivalent limits in the correction planes 1 and 2 (g·mm).

    Our method: plane limits in the ratio of the bearing allocations (the plane
    nearer bearing A takes A's share), scaled by the largest factor s for which
    any residual within them, at any angles, keeps each bearing plane within
    its allocation. With T the correction-to-bearing transfer matrix
    (:func:`shopapp.balancing.planes.transfer_matrix`):

    ``s = min_j U_j / Σ_i |T_ji|·P_i``, limits ``s·P_i``.

    When the correction planes coincide with the bearing planes, T = I and the
    limits equal the bearing allocation.
    """
    if geometry.plane_1_mm is None or geometry.plane_2_mm is None:
        raise BalancingInputError("plane_1_mm", "correction-plane positions are needed")
    t = np.abs(
        transfer_matrix(
            geometry.plane_1_mm, geometry.plane_2_mm, geometry.bearing_a_mm, geometry.bearing_b_mm
        )
    )
    ua, ub = allocation.bearing_a_gmm, allocation.bearing_b_gmm
    near_a_1 = abs(geometry.plane_1_mm - geometry.bearing_a_mm) <= abs(
        geometry.plane_2_mm - geometry.bearing_a_mm
    )
    p = np.array([ua, ub] if near_a_1 else [ub, ua])
    load = t @ p
    s = float(min(ua / load[0], ub / load[1]))
    return float(s * p[0]), float(s * p[1])


@dataclass(frozen=True)
class Tolerance:
    """A balance tolerance, ready to judge a residual.

    Attributes
    ----------
    method : str
        ``"iso21940-11"``, ``"4w/n"`` or ``"customer"``.
    reference : str
        Where residuals are compared: ``"bearing_planes"`` (ISO) or
        ``"correction_planes"`` (API-style and customer limits).
    u_per_gmm : float
        Whole-rotor permissible residual (ISO), or the sum of the two plane
        limits for the other methods.
    e_per_um : float or None
        Permissible specific unbalance, µm; ``None`` when the rotor mass is unknown.
    bearing_a_gmm, bearing_b_gmm : float or None
        Limits in the bearing planes.
    plane_1_gmm, plane_2_gmm : float or None
        Limits in the correction planes.
    static_gmm, couple_moment_gmm2, couple_pair_gmm : float or None
        Separate static and couple limits (ISO with geometry).
    layout : str or None
        ``"inboard"`` / ``"overhung"`` when geometry was given.
    allocation_clamped : bool
        Whether the 0.3–0.7 bounds changed the bearing shares.
    static_couple_judged : bool
        Whether the static and couple limits decide as well as the bearing
        planes (overhung and narrow rotors with correction planes).
    notes : tuple of str
        Plain-language remarks (assumptions made, sources).
    """

    method: str
    reference: str
    u_per_gmm: float
    e_per_um: float | None
    bearing_a_gmm: float | None
    bearing_b_gmm: float | None
    plane_1_gmm: float | None = None
    plane_2_gmm: float | None = None
    static_gmm: float | None = None
    couple_moment_gmm2: float | None = None
    couple_pair_gmm: float | None = None
    layout: str | None = None
    allocation_clamped: bool = False
    static_couple_judged: bool = False
    notes: tuple[str, ...] = ()


def iso_tolerance(
    grade_mm_s: float,
    mass_kg: float,
    service_speed_rpm: float,
    geometry: RotorGeometry | None = None,
) -> Tolerance:
    """ISO 21940-11 tolerance of a rigid rotor, allocated to its planes.

    Without geometry the rotor is taken as symmetric: half of ``U_per`` per
    bearing plane, and correction planes at the bearing planes. With geometry,
    see :func:`allocate_to_bearings`, :func:`static_couple_limits` and
    :func:`correction_plane_limits`.
    """
    u_per = permissible_unbalance(grade_mm_s, mass_kg, service_speed_rpm)
    e_per = permissible_specific_unbalance(grade_mm_s, service_speed_rpm)
    if geometry is None:
        half = 0.5 * u_per
        return Tolerance(
            method="iso21940-11",
            reference="bearing_planes",
            u_per_gmm=u_per,
            e_per_um=e_per,
            bearing_a_gmm=half,
            bearing_b_gmm=half,
            plane_1_gmm=half,
            plane_2_gmm=half,
            notes=(
                "no geometry given: rotor taken as symmetric, half of U_per per bearing plane, "
                "correction planes taken at the bearing planes",
            ),
        )
    alloc = allocate_to_bearings(u_per, geometry)
    sc = static_couple_limits(alloc, geometry)
    notes: list[str] = []
    if alloc.clamped:
        notes.append("centre of mass near one bearing: shares held within 0.3-0.7 of U_per")
    if alloc.layout == "overhung":
        notes.append(
            "overhung rotor: bearing shares from the lever rule; also keep the static and "
            "couple limits"
        )
    elif geometry.narrow:
        notes.append(
            "narrow rotor (correction planes closer than a third of the bearing span): also "
            "keep the static and couple limits"
        )
    p1 = p2 = None
    if geometry.has_planes:
        p1, p2 = correction_plane_limits(alloc, geometry)
    return Tolerance(
        method="iso21940-11",
        reference="bearing_planes",
        u_per_gmm=u_per,
        e_per_um=e_per,
        bearing_a_gmm=alloc.bearing_a_gmm,
        bearing_b_gmm=alloc.bearing_b_gmm,
        plane_1_gmm=p1,
        plane_2_gmm=p2,
        static_gmm=sc.static_gmm,
        couple_moment_gmm2=sc.couple_moment_gmm2,
        couple_pair_gmm=sc.couple_pair_gmm,
        layout=alloc.layout,
        allocation_clamped=alloc.clamped,
        static_couple_judged=geometry.has_planes
        and (alloc.layout == "overhung" or geometry.narrow),
        notes=tuple(notes),
    )


def api_tolerance(
    journal_load_kg: float,
    service_speed_rpm: float,
    journal_load_b_kg: float | None = None,
    rotor_mass_kg: float | None = None,
) -> Tolerance:
    """API-style tolerance ``6350·W/N`` g·mm per plane (see :func:`api_limit_gmm`).

    ``journal_load_kg`` is the static load on the journal next to plane 1 (and
    plane 2 unless ``journal_load_b_kg`` is given). ``e_per_um`` is given only
    when ``rotor_mass_kg`` is known.
    """
    p1 = api_limit_gmm(journal_load_kg, service_speed_rpm)
    p2 = p1
    if journal_load_b_kg is not None:
        try:
            p2 = api_limit_gmm(journal_load_b_kg, service_speed_rpm)
        except BalancingInputError as exc:
            raise BalancingInputError("journal_load_b_kg", exc.message) from None
    total = p1 + p2
    e_per = None
    if rotor_mass_kg is not None:
        e_per = total / positive("rotor_mass_kg", rotor_mass_kg)
    return Tolerance(
        method="4w/n",
        reference="correction_planes",
        u_per_gmm=total,
        e_per_um=e_per,
        bearing_a_gmm=p1,
        bearing_b_gmm=p2,
        plane_1_gmm=p1,
        plane_2_gmm=p2,
        notes=("API-style limit 4W/N oz·in = 6350·W/N g·mm per plane, W static journal load",),
    )


def customer_tolerance(
    plane_1_gmm: float | None = None,
    plane_2_gmm: float | None = None,
    *,
    mass_g: float | None = None,
    radius_mm: float | None = None,
) -> Tolerance:
    """An explicit customer tolerance per correction plane.

    Either ``plane_1_gmm`` (and optionally a different ``plane_2_gmm``), or a
    permissible mass at a radius: ``U = m·r`` g·mm in each plane.
    """
    if mass_g is not None or radius_mm is not None:
        if plane_1_gmm is not None or plane_2_gmm is not None:
            raise BalancingInputError(
                "mass_g", "give g·mm per plane or a mass at a radius, not both"
            )
        if mass_g is None:
            raise BalancingInputError("mass_g", "a mass is needed with the radius")
        if radius_mm is None:
            raise BalancingInputError("radius_mm", "a radius is needed with the mass")
        p1 = positive("mass_g", mass_g) * positive("radius_mm", radius_mm)
        p2 = p1
        note = f"customer limit {short(mass_g)} g at {short(radius_mm)} mm per plane"
    else:
        if plane_1_gmm is None:
            raise BalancingInputError(
                "plane_1_gmm", "a limit in g·mm (or a mass at a radius) is needed"
            )
        p1 = positive("plane_1_gmm", plane_1_gmm)
        p2 = p1 if plane_2_gmm is None else positive("plane_2_gmm", plane_2_gmm)
        note = "customer limit per correction plane"
    return Tolerance(
        method="customer",
        reference="correction_planes",
        u_per_gmm=p1 + p2,
        e_per_um=None,
        bearing_a_gmm=None,
        bearing_b_gmm=None,
        plane_1_gmm=p1,
        plane_2_gmm=p2,
        notes=(note,),
    )


@dataclass(frozen=True)
class PlaneVerdict:
    """Residual in one plane against its limit."""

    plane: str
    residual_gmm: float
    angle_deg: float
    limit_gmm: float
    ratio: float
    passed: bool


@dataclass(frozen=True)
class ResidualVerdict:
    """Verdict on a two-plane residual.

    ``passed`` and ``worst_ratio`` follow the tolerance's reference planes;
    both sets are shown where they can be computed.
    """

    passed: bool
    worst_ratio: float
    reference: str
    bearing_planes: tuple[PlaneVerdict, PlaneVerdict] | None
    correction_planes: tuple[PlaneVerdict, PlaneVerdict] | None
    notes: tuple[str, ...] = ()
    static_couple: tuple[PlaneVerdict, PlaneVerdict] | None = None


def _scalar_vector(field: str, value: complex) -> complex:
    arr = finite_array(field, value)
    if arr.ndim != 0:
        raise BalancingInputError(field, "must be one complex number (g·mm)")
    return complex(arr)


def _plane_verdict(name: str, residual: complex, limit: float) -> PlaneVerdict:
    mag, ang = amplitude_angle(residual)
    ratio = mag / limit
    return PlaneVerdict(name, mag, ang, limit, ratio, ratio <= 1.0)


def static_couple_matrix(geometry: RotorGeometry) -> np.ndarray:
    """Rows taking the correction-plane residuals (r1, r2) to (S, C).

    ``S = r1 + r2`` is the static residual referred to the centre of mass and
    ``C = M/(z1 − z2)`` with ``M = r1·(z1 − z_c) + r2·(z2 − z_c)`` the couple
    as an equal and opposite pair in the correction planes
    (:func:`shopapp.balancing.planes.static_couple`); |C| ≤ ``couple_pair_gmm``
    is |M| ≤ ``couple_moment_gmm2``.
    """
    if geometry.plane_1_mm is None or geometry.plane_2_mm is None:
        raise BalancingInputError("plane_1_mm", "correction-plane positions are needed")
    z1, z2, zc = geometry.plane_1_mm, geometry.plane_2_mm, geometry.centre_of_mass_mm
    return np.array([[1.0, 1.0], [(z1 - zc) / (z1 - z2), (z2 - zc) / (z1 - z2)]])


def judging_matrix(tolerance: Tolerance, geometry: RotorGeometry) -> tuple[np.ndarray, np.ndarray]:
    """The deciding rows of a bearing-plane tolerance as one linear map and its limits.

    Returns ``(T, limits)`` with ``T`` of shape (k, 2) taking the residuals in
    the correction planes to the judged quantities (bearing A, bearing B and,
    when :attr:`Tolerance.static_couple_judged`, static and couple) and
    ``limits`` of shape (k,): the rule of :func:`judge_residual` in the form
    :func:`judge_residuals_batch` takes.
    """
    if tolerance.bearing_a_gmm is None or tolerance.bearing_b_gmm is None:
        raise BalancingInputError("tolerance", "has no bearing-plane limits")
    if geometry.plane_1_mm is None or geometry.plane_2_mm is None:
        raise BalancingInputError("plane_1_mm", "correction-plane positions are needed")
    t = transfer_matrix(geometry.plane_1_mm, geometry.plane_2_mm, geometry.bearing_a_mm,
                        geometry.bearing_b_mm)
    rows = [np.asarray(t, dtype=float)]
    limits = [tolerance.bearing_a_gmm, tolerance.bearing_b_gmm]
    if tolerance.static_couple_judged:
        assert tolerance.static_gmm is not None and tolerance.couple_pair_gmm is not None
        rows.append(static_couple_matrix(geometry))
        limits += [tolerance.static_gmm, tolerance.couple_pair_gmm]
    return np.vstack(rows), np.array(limits, dtype=float)


def judge_residual(
    residual_1_gmm: complex,
    residual_2_gmm: complex,
    tolerance: Tolerance,
    geometry: RotorGeometry | None = None,
) -> ResidualVerdict:
    """Judge a residual unbalance given in the two correction planes.

    For a bearing-plane tolerance (ISO) the residual vectors are moved onto the
    bearing planes by force and moment equivalence of a rigid rotor
    (:func:`shopapp.balancing.planes.transfer_matrix`) and each magnitude is
    compared with that plane's limit: ``ratio = |U_j| / U_per,j``, passed when
    ``ratio <= 1``. Without geometry the correction planes are taken as the
    bearing planes (said in ``notes``). Correction-plane limits are compared
    directly. For overhung and narrow rotors (``static_couple_judged``) the
    static residual at the centre of mass and the couple (as a pair in the
    correction planes) are judged against their limits as well and decide with
    the bearing planes (:func:`static_couple_limits`).
    """
    r1 = _scalar_vector("residual_1_gmm", residual_1_gmm)
    r2 = _scalar_vector("residual_2_gmm", residual_2_gmm)
    notes: list[str] = []
    bearing = None
    has_planes = geometry is not None and geometry.has_planes
    if (
        tolerance.bearing_a_gmm is not None
        and tolerance.bearing_b_gmm is not None
        and (tolerance.reference == "bearing_planes" or has_planes)
    ):
        if geometry is not None and geometry.has_planes:
            t = transfer_matrix(
                geometry.plane_1_mm,  # type: ignore[arg-type]
                geometry.plane_2_mm,  # type: ignore[arg-type]
                geometry.bearing_a_mm,
                geometry.bearing_b_mm,
            )
            ua = complex(t[0, 0] * r1 + t[0, 1] * r2)
            ub = complex(t[1, 0] * r1 + t[1, 1] * r2)
        else:
            ua, ub = r1, r2
            notes.append("no plane positions: correction planes taken as the bearing planes")
        bearing = (
            _plane_verdict("bearing A", ua, tolerance.bearing_a_gmm),
            _plane_verdict("bearing B", ub, tolerance.bearing_b_gmm),
        )
    correction = None
    if tolerance.plane_1_gmm is not None and tolerance.plane_2_gmm is not None:
        correction = (
            _plane_verdict("plane 1", r1, tolerance.plane_1_gmm),
            _plane_verdict("plane 2", r2, tolerance.plane_2_gmm),
        )
    deciding = bearing if tolerance.reference == "bearing_planes" else correction
    if deciding is None:
        raise BalancingInputError("tolerance", f"has no limits in its {tolerance.reference}")
    sc = None
    if (tolerance.static_couple_judged and tolerance.reference == "bearing_planes"
            and geometry is not None and geometry.has_planes):
        assert tolerance.static_gmm is not None and tolerance.couple_pair_gmm is not None
        m = static_couple_matrix(geometry)
        sc = (
            _plane_verdict("static", complex(m[0, 0] * r1 + m[0, 1] * r2), tolerance.static_gmm),
            _plane_verdict("couple", complex(m[1, 0] * r1 + m[1, 1] * r2),
                           tolerance.couple_pair_gmm),
        )
    judged = (*deciding, *(sc or ()))
    return ResidualVerdict(
        passed=all(v.passed for v in judged),
        worst_ratio=max(v.ratio for v in judged),
        reference=tolerance.reference,
        bearing_planes=bearing,
        correction_planes=correction,
        notes=tuple(notes),
        static_couple=sc,
    )


@dataclass(frozen=True)
class BatchVerdict:
    """Verdicts for many jobs: ``ratio`` and ``passed_plane`` are (n, 2), ``passed`` is (n,)."""

    ratio: np.ndarray
    passed_plane: np.ndarray
    passed: np.ndarray


def judge_residuals_batch(
    residuals_gmm: np.ndarray,
    limits_gmm: np.ndarray,
    transfer: np.ndarray | None = None,
) -> BatchVerdict:
    """Judge many two-plane residuals at once (numpy broadcasting).

    ``ratio = |T·r| / limit`` per plane, ``passed_plane = ratio <= 1``,
    ``passed`` when both planes pass; the same rule as :func:`judge_residual`.

    Parameters
    ----------
    residuals_gmm : array_like, complex, shape (n, 2)
        Residuals in correction planes 1 and 2 of n jobs.
    limits_gmm : array_like, shape (n, k) or broadcastable (e.g. (k,))
        Limits of the quantities compared (bearing planes when ``transfer`` is
        given), > 0.
    transfer : array_like, shape (k, 2) or (n, 2, 2), optional
        Correction-to-bearing transfer matrices
        (:func:`shopapp.balancing.planes.transfer_matrix`), or the rows of
        :func:`judging_matrix` (bearing planes, static and couple); none =
        compare in the correction planes.
    """
    r = finite_array("residuals_gmm", residuals_gmm)
    if r.ndim != 2 or r.shape[1] != 2:
        raise BalancingInputError("residuals_gmm", f"must have shape (n, 2), got {r.shape}")
    lim = finite_array("limits_gmm", limits_gmm)
    if lim.dtype.kind == "c" or np.any(lim <= 0.0):
        raise BalancingInputError(
            "limits_gmm", "every limit must be a real number greater than zero"
        )
    if transfer is not None:
        t = finite_array("transfer", transfer)
        if t.ndim == 2 and t.shape[1] == 2:
            r = r @ t.T
        elif t.shape == (r.shape[0], 2, 2):
            r = np.einsum("nij,nj->ni", t, r)
        else:
            raise BalancingInputError(
                "transfer", f"must have shape (k, 2) or (n, 2, 2), got {t.shape}"
            )
    try:
        lim = np.broadcast_to(lim, r.shape)
    except ValueError:
        raise BalancingInputError(
            "limits_gmm", f"shape {lim.shape} does not fit the judged values' shape {r.shape}"
        ) from None
    ratio = np.abs(r) / lim
    passed_plane = ratio <= 1.0
    return BatchVerdict(ratio=ratio, passed_plane=passed_plane, passed=passed_plane.all(axis=1))
