"""Correction by removal: drilled holes with a conical point.

A hole drilled with a twist drill of diameter ``d`` and point angle ``p`` is a
cylinder of full-diameter depth ``h`` plus a cone of height
``c = (d/2) / tan(p/2)`` (the drill point), so

    V = π d²/4 · h + (1/3) · π d²/4 · c          [mm³]
    m = ρ · V / 1000                             [g, ρ in g/cm³]

and the depth to the tip is ``h + c`` (elementary solid geometry). A hole
shallower than the point is a cone only: ``V = π tan²(p/2) t³ / 3``. The cone
is the handbook's ``V = π r² h / 3`` with the tip height ``h = r / tan(p/2)``,
``r / tan 59°`` for the usual 118° point (a machinery handbook's solid-geometry
table; formula from memory).

Radial and axial holes: an *axial* hole (parallel to the shaft) at the
correction radius R removes its mass at R. A *radial* hole drilled inwards
from the rim at R removes its mass at the hole's centroid, ``R − z̄``, where
``z̄`` is the centroid depth of cylinder plus point
(:func:`hole_centroid_depth_mm`), so it must remove more mass than an axial
hole for the same unbalance: ``m·(R − z̄) = U``.

Removal at angle θ corrects like an addition at θ + 180°
(:func:`shopapp.balancing.phasors.removal_angle_deg`); the functions here take
the angle at which material is *removed*.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy.optimize import brentq

from shopapp.balancing.checks import finite, non_negative, positive, whole
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import normalize_deg

DEFAULT_POINT_ANGLE_DEG = 118.0  # standard general-purpose twist-drill point


@dataclass(frozen=True)
class Density:
    """A material density, g/cm³, with its usual range and the source."""

    material: str
    g_cm3: float
    low_g_cm3: float
    high_g_cm3: float
    source: str


_HANDBOOK = (
    "Machinery's Handbook, table of densities of metals (values from memory; "
    "use the material certificate where the exact alloy matters)"
)

DENSITIES: dict[str, Density] = {
    "steel": Density("carbon steel", 7.85, 7.80, 7.87, _HANDBOOK),
    "stainless_steel": Density("stainless steel", 7.93, 7.90, 8.00, _HANDBOOK),
    "grey_cast_iron": Density("grey cast iron", 7.2, 7.0, 7.3, _HANDBOOK),
    "aluminium": Density("aluminium", 2.70, 2.66, 2.80, _HANDBOOK),
    "brass": Density("brass", 8.5, 8.4, 8.7, _HANDBOOK),
    "bronze": Density("bronze", 8.8, 7.4, 8.9, _HANDBOOK),
}

HOLE_DIRECTIONS: tuple[str, ...] = ("radial", "axial")

# One block, shown once wherever drilling is advised (common practice, no source).
DRILLING_CAUTIONS: tuple[str, ...] = (
    "Before drilling: check the wall left under each hole and the web between holes against "
    "the drawing. A hole is a stress raiser: keep clear of blade roots, keyways, welds, fillets "
    "and other highly stressed sections, drill only where the rotor maker allows removal, and "
    "deburr. Clamp the rotor, wear eye protection, and clear every chip from the rotor, its "
    "bore and the machine before the next run (a chip left inside is an unbalance of its own). "
    "The rotor maker's rules, local codes and licensed practice come before this calculation.",
)


@dataclass(frozen=True)
class HoleDepth:
    """One drilled hole: depths in mm for the removed ``mass_g``.

    ``depth_full_diameter_mm`` is the depth of the full-diameter part (0 when
    the hole is shallower than the drill point), ``depth_to_tip_mm`` the depth
    to the point's tip, ``point_length_mm`` the cone height ``c`` and
    ``surface_diameter_mm`` the diameter at the surface (``< d`` for a cone-only hole).
    """

    mass_g: float
    drill_diameter_mm: float
    point_angle_deg: float
    depth_full_diameter_mm: float
    depth_to_tip_mm: float
    point_length_mm: float
    surface_diameter_mm: float
    warnings: tuple[str, ...]
    cautions: tuple[str, ...]


@dataclass(frozen=True)
class DrillPlan:
    """Several equal holes side by side at the correction radius.

    ``hole_angles_deg`` are the hole centres, spread symmetrically about the
    removal angle at ``pitch_deg``; each removes ``mass_per_hole_g`` so that the
    vector sum of all holes' unbalances equals the wanted removal (holes off the
    centre line count only with ``cos`` of their offset). ``effective_radius_mm``
    is where each hole's mass sits (R for axial holes, the centroid for radial
    ones), ``depth_limit_mm`` and ``web_mm`` the limits the plan kept to, and
    ``spacing_mm`` the arc between neighbouring centres at the correction radius
    (what is marked out on the rotor).
    """

    holes: int
    mass_per_hole_g: float
    total_removed_g: float
    depth_full_diameter_mm: float
    depth_to_tip_mm: float
    pitch_deg: float
    hole_angles_deg: tuple[float, ...]
    warnings: tuple[str, ...]
    cautions: tuple[str, ...]
    direction: str = "axial"
    effective_radius_mm: float | None = None
    depth_limit_mm: float | None = None
    web_mm: float | None = None
    spacing_mm: float = 0.0  # arc between neighbouring centres at the correction radius


def _point_angle(point_angle_deg: float) -> float:
    p = finite("point_angle_deg", point_angle_deg)
    if not 0.0 < p < 180.0:
        raise BalancingInputError(
            "point_angle_deg", f"must be between 0 and 180 degrees, got {short(p)}"
        )
    return p


def _point_length_mm(diameter_mm: float, point_angle_deg: float) -> float:
    return diameter_mm / 2.0 / math.tan(math.radians(point_angle_deg) / 2.0)


def drill_mass(
    drill_diameter_mm: float,
    density_g_cm3: float,
    *,
    depth_full_diameter_mm: float | None = None,
    depth_to_tip_mm: float | None = None,
    point_angle_deg: float = DEFAULT_POINT_ANGLE_DEG,
) -> float:
    """Mass removed by one hole, grams.

    ``m = ρ · (π d²/4 · h + π d²/4 · c / 3) / 1000`` with ``c = (d/2)/tan(p/2)``;
    give exactly one of the two depths (``depth_to_tip = h + c``). A depth to the
    tip smaller than ``c`` gives the cone-only mass ``ρ · π tan²(p/2) t³ / 3000``.

    Parameters
    ----------
    drill_diameter_mm : float
        Drill diameter d, mm, > 0.
    density_g_cm3 : float
        Material density ρ, g/cm³, > 0 (see :data:`DENSITIES`).
    depth_full_diameter_mm, depth_to_tip_mm : float
        Hole depth, mm, >= 0; exactly one.
    point_angle_deg : float
        Included point angle p, degrees (118° standard).
    """
    d = positive("drill_diameter_mm", drill_diameter_mm)
    rho = positive("density_g_cm3", density_g_cm3)
    p = _point_angle(point_angle_deg)
    if (depth_full_diameter_mm is None) == (depth_to_tip_mm is None):
        raise BalancingInputError(
            "depth_full_diameter_mm",
            "give exactly one of depth_full_diameter_mm and depth_to_tip_mm",
        )
    c = _point_length_mm(d, p)
    area = math.pi * d * d / 4.0
    if depth_full_diameter_mm is not None:
        h = non_negative("depth_full_diameter_mm", depth_full_diameter_mm)
        return rho * (area * h + area * c / 3.0) / 1000.0
    assert depth_to_tip_mm is not None  # exactly one of the two was checked above
    t = non_negative("depth_to_tip_mm", depth_to_tip_mm)
    if t >= c:
        return rho * (area * (t - c) + area * c / 3.0) / 1000.0
    tan_half = math.tan(math.radians(p) / 2.0)
    return rho * math.pi * tan_half**2 * t**3 / 3.0 / 1000.0


def drill_depth(
    mass_g: float,
    drill_diameter_mm: float,
    density_g_cm3: float,
    *,
    point_angle_deg: float = DEFAULT_POINT_ANGLE_DEG,
) -> HoleDepth:
    """Depth of one hole that removes ``mass_g``.

    Inverse of :func:`drill_mass`: ``h = (1000 m / ρ - π d² c / 12) / (π d²/4)``,
    depth to tip ``h + c``; when ``m`` is below the point's own mass the hole is
    a cone of depth ``t = (3000 m / (ρ π tan²(p/2)))^(1/3)`` (with a warning).

    Parameters
    ----------
    mass_g : float
        Mass to remove, grams, > 0.
    drill_diameter_mm : float
        Drill diameter, mm, > 0.
    density_g_cm3 : float
        Density, g/cm³, > 0.
    point_angle_deg : float
        Included point angle, degrees (118° default).
    """
    m = positive("mass_g", mass_g)
    d = positive("drill_diameter_mm", drill_diameter_mm)
    rho = positive("density_g_cm3", density_g_cm3)
    p = _point_angle(point_angle_deg)
    c = _point_length_mm(d, p)
    area = math.pi * d * d / 4.0
    volume = 1000.0 * m / rho
    cone_volume = area * c / 3.0
    warnings: list[str] = []
    if volume >= cone_volume:
        h = (volume - cone_volume) / area
        t = h + c
        surface = d
    else:
        tan_half = math.tan(math.radians(p) / 2.0)
        t = (3.0 * volume / (math.pi * tan_half**2)) ** (1.0 / 3.0)
        h = 0.0
        surface = 2.0 * t * tan_half
        warnings.append(
            f"The drill point alone removes more than {short(m, 3)} g: the hole stays a cone "
            f"{surface:.2f} mm across at the surface; a smaller drill gives a better-defined hole."
        )
    return HoleDepth(
        mass_g=m,
        drill_diameter_mm=d,
        point_angle_deg=p,
        depth_full_diameter_mm=h,
        depth_to_tip_mm=t,
        point_length_mm=c,
        surface_diameter_mm=surface,
        warnings=tuple(warnings),
        cautions=DRILLING_CAUTIONS,
    )


def cone_volume_mm3(drill_diameter_mm: float, point_angle_deg: float = DEFAULT_POINT_ANGLE_DEG
                    ) -> float:
    """Volume of the drill point's cone, mm³.

    ``V = π r² h / 3`` with ``r = d/2`` and the tip height ``h = r / tan(p/2)``
    (``r / tan 59°`` for a 118° point) — a machinery handbook's cone volume
    formula, from memory.
    """
    d = positive("drill_diameter_mm", drill_diameter_mm)
    p = _point_angle(point_angle_deg)
    r = d / 2.0
    return math.pi * r * r * _point_length_mm(d, p) / 3.0


def hole_centroid_depth_mm(
    drill_diameter_mm: float,
    depth_to_tip_mm: float,
    point_angle_deg: float = DEFAULT_POINT_ANGLE_DEG,
) -> float:
    """Depth below the surface of the centroid of the material a hole removes, mm.

    A full-diameter part of depth ``h = t − c`` (volume ``A·h``, centroid at
    ``h/2``) and the point's cone below it (volume ``A·c/3``, centroid a quarter
    of its height from its base, i.e. at ``h + c/4``):

        z̄ = (A·h · h/2 + A·c/3 · (h + c/4)) / (A·h + A·c/3)

    A hole shallower than the point is a cone only, ``z̄ = t/4`` (the centroid
    of a cone lies at a quarter of its height from the base; any statics text).
    """
    d = positive("drill_diameter_mm", drill_diameter_mm)
    t = positive("depth_to_tip_mm", depth_to_tip_mm)
    p = _point_angle(point_angle_deg)
    c = _point_length_mm(d, p)
    if t <= c:
        return t / 4.0
    h = t - c
    v_cyl, v_cone = h, c / 3.0  # the common area A cancels
    return (v_cyl * h / 2.0 + v_cone * (h + c / 4.0)) / (v_cyl + v_cone)


def _holes(n: int) -> str:
    return "one hole" if n == 1 else f"{n} holes"


def _radial_depth_mm(moment_gmm: float, d: float, rho: float, p: float, r: float,
                     limit: float) -> float | None:
    """Depth to the tip of a radial hole whose removed first moment ``m·(R − z̄)`` is
    ``moment_gmm``; None when even ``limit`` is not deep enough.

    The removed region only grows with depth and every point of it lies inside R,
    so the moment rises monotonically and a bracketing root search is safe.
    """
    def moment(t: float) -> float:
        if t <= 0.0:
            return 0.0
        m = drill_mass(d, rho, depth_to_tip_mm=t, point_angle_deg=p)
        return m * (r - hole_centroid_depth_mm(d, t, p))

    if moment(limit) < moment_gmm:
        return None
    return float(brentq(lambda t: moment(t) - moment_gmm, 0.0, limit, xtol=1e-9, rtol=1e-12))


def drill_plan(
    mass_g: float,
    drill_diameter_mm: float,
    density_g_cm3: float,
    *,
    max_depth_mm: float,
    radius_mm: float,
    min_web_mm: float,
    angle_deg: float = 0.0,
    point_angle_deg: float = DEFAULT_POINT_ANGLE_DEG,
    max_holes: int = 12,
    direction: str = "axial",
    max_spread_deg: float = 180.0,
) -> DrillPlan:
    """Fewest equal holes, each no deeper than ``max_depth_mm`` to the tip.

    ``mass_g`` is the removal wanted *at* ``radius_mm`` (unbalance
    ``U = m·R``). Holes sit side by side with centre distance ``d + min_web``
    (chord), i.e. an angular pitch ``α = 2·asin((d + web) / (2ρ))``, spread
    symmetrically about ``angle_deg``; ``ρ = R`` for axial holes and, for
    radial holes (which converge inwards), the radius of the deepest permitted
    tip ``R − max_depth`` so the web holds all the way down. Hole ``j`` of ``n``
    is offset ``δ_j = (j - (n-1)/2)·α`` and counts ``cos δ_j`` in the wanted
    direction (the sideways parts cancel), so each hole removes

    - axial: ``m_h = m / Σ cos δ_j`` at R;
    - radial: ``m_h`` with ``m_h·(R − z̄) = m·R / Σ cos δ_j``, z̄ the hole's
      centroid depth (:func:`hole_centroid_depth_mm`), solved for the depth by
      :func:`scipy.optimize.brentq`.

    Parameters
    ----------
    mass_g : float
        Mass to remove at ``radius_mm`` (vector sum), grams, > 0.
    drill_diameter_mm, density_g_cm3 : float
        Drill diameter (mm) and density (g/cm³), > 0.
    max_depth_mm : float
        Deepest permitted hole, measured to the tip, mm, > 0 (from the drawing).
    radius_mm : float
        Correction radius: the hole centres (axial) or the rim the holes start
        from (radial), mm, > 0.
    min_web_mm : float
        Least material between neighbouring holes, mm, >= 0.
    angle_deg : float
        Angle at which material is removed, degrees.
    point_angle_deg : float
        Included drill point angle, degrees.
    max_holes : int
        Most holes to consider (1..36).
    direction : str
        ``"axial"`` or ``"radial"``.
    max_spread_deg : float
        Widest angle the outermost hole centres may span (0 < spread <= 180);
        holes far off the removal line waste material.

    Raises
    ------
    BalancingInputError
        When even ``max_holes`` holes would be too deep, or the holes would
        spread wider than ``max_spread_deg`` (field ``max_depth_mm``; the message
        suggests adding mass instead), or do not fit on the radius (``radius_mm``).
    """
    m = positive("mass_g", mass_g)
    d = positive("drill_diameter_mm", drill_diameter_mm)
    rho = positive("density_g_cm3", density_g_cm3)
    limit = positive("max_depth_mm", max_depth_mm)
    r = positive("radius_mm", radius_mm)
    web = non_negative("min_web_mm", min_web_mm)
    centre = finite("angle_deg", angle_deg)
    p = _point_angle(point_angle_deg)
    most = whole("max_holes", max_holes, 1)
    spread_max = positive("max_spread_deg", max_spread_deg)
    if spread_max > 180.0:
        raise BalancingInputError("max_spread_deg",
                                  f"must be at most 180°, got {short(spread_max)}")
    if most > 36:
        raise BalancingInputError("max_holes", f"at most 36 holes are considered, got {most}")
    if direction not in HOLE_DIRECTIONS:
        raise BalancingInputError("direction", f"{str(direction)[:20]!r} is not radial or axial")
    if direction == "radial" and limit >= r:
        raise BalancingInputError(
            "max_depth_mm", f"a radial hole {short(limit)} mm deep would reach the axis from "
            f"a {short(r)} mm radius")
    pitch_radius = r - limit if direction == "radial" else r
    chord = d + web
    if chord > 2.0 * pitch_radius:
        raise BalancingInputError(
            "radius_mm",
            f"{short(pitch_radius)} mm is too small a radius to place two {short(d)} mm holes "
            "with a "
            f"{short(web)} mm web",
        )
    pitch = math.degrees(2.0 * math.asin(chord / (2.0 * pitch_radius)))
    for n in range(1, most + 1):
        offsets = [(j - (n - 1) / 2.0) * pitch for j in range(n)]
        if offsets[-1] - offsets[0] > spread_max + 1e-9:
            raise BalancingInputError(
                "max_depth_mm",
                f"{n} holes of {short(d)} mm at {pitch:.1f}° pitch would spread wider than "
                f"{short(spread_max)}° at {short(r)} mm and {_holes(n - 1)} would be deeper than "
                f"{short(limit)} mm; add mass instead (or use a larger drill)",
            )
        gain = sum(math.cos(math.radians(o)) for o in offsets)
        if direction == "radial":
            t = _radial_depth_mm(m * r / gain, d, rho, p, r, limit)
            if t is None:
                continue
            per_hole = drill_mass(d, rho, depth_to_tip_mm=t, point_angle_deg=p)
            hole = drill_depth(per_hole, d, rho, point_angle_deg=p)
            r_eff = r - hole_centroid_depth_mm(d, hole.depth_to_tip_mm, p)
        else:
            per_hole = m / gain
            hole = drill_depth(per_hole, d, rho, point_angle_deg=p)
            r_eff = r
        if hole.depth_to_tip_mm <= limit * (1.0 + 1e-9):
            warnings = list(hole.warnings)
            if n > 1:
                warnings.append(
                    f"One hole would exceed the {short(limit)} mm depth limit; {n} holes at "
                    f"{pitch:.1f}° pitch are needed."
                )
            return DrillPlan(
                holes=n,
                mass_per_hole_g=per_hole,
                total_removed_g=per_hole * n,
                depth_full_diameter_mm=hole.depth_full_diameter_mm,
                depth_to_tip_mm=hole.depth_to_tip_mm,
                pitch_deg=pitch if n > 1 else 0.0,
                hole_angles_deg=tuple(normalize_deg(centre + o) for o in offsets),
                warnings=tuple(warnings),
                cautions=DRILLING_CAUTIONS,
                direction=direction,
                effective_radius_mm=r_eff,
                depth_limit_mm=limit,
                web_mm=web,
                spacing_mm=r * math.radians(pitch) if n > 1 else 0.0,
            )
    raise BalancingInputError(
        "max_depth_mm",
        f"even {_holes(most)} of {short(d)} mm would be deeper than {short(limit)} mm; "
        "add mass instead (or use a larger drill)",
    )
