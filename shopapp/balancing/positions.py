"""Fixed positions: split a correction onto blades/holes, combine masses, pick weight sizes.

Positions are N equally spaced places (fan blades, tapped holes, bolts), the
first at ``first_position_deg`` and the rest following in the direction of
rotation at ``360/N`` spacing; they are numbered 1..N from the first. Masses
are grams at one radius, angles degrees in the direction of rotation (the
convention of :mod:`shopapp.balancing.phasors`).
"""

from __future__ import annotations

import cmath
import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite, finite_array, positive, positive_array, whole
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import amplitude_angle, normalize_deg, phasor

# A part smaller than this fraction of the correction is treated as zero, so a
# correction that sits on a position gives one part, not a second 1e-17 g one.
_ON_POSITION_RTOL = 1e-9
# Bound of the exhaustive weight search (combinations per position).
MAX_COMBINATIONS_PER_POSITION = 5000
MAX_WEIGHT_SIZES = 12


@dataclass(frozen=True)
class PositionMass:
    """Mass at one fixed position (1-based number, its angle, grams)."""

    position: int
    angle_deg: float
    mass_g: float


@dataclass(frozen=True)
class SplitResult:
    """Result of :func:`split_to_positions`; ``total_mass_g`` is the sum of the parts."""

    parts: tuple[PositionMass, ...]
    total_mass_g: float
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class CombinedMass:
    """One mass equivalent to several (grams at ``radius_mm`` when radii were given)."""

    mass_g: float
    angle_deg: float
    vector_g: complex
    radius_mm: float | None


@dataclass(frozen=True)
class PositionWeights:
    """Weights chosen for one position: the pieces (grams) and their sum."""

    position: int
    angle_deg: float
    pieces_g: tuple[float, ...]
    mass_g: float


@dataclass(frozen=True)
class WeightChoice:
    """Result of :func:`choose_weights`.

    ``fitted_vector_g`` is the vector sum of the chosen weights;
    ``residual_vector_g = wanted - fitted`` (what the chosen weights miss).
    """

    parts: tuple[PositionWeights, ...]
    fitted_vector_g: complex
    residual_vector_g: complex
    residual_mass_g: float
    residual_angle_deg: float
    warnings: tuple[str, ...]


def position_angles_deg(positions: int, first_position_deg: float = 0.0) -> tuple[float, ...]:
    """Angles of N equally spaced positions, position 1 at ``first_position_deg``."""
    n = whole("positions", positions, 3)
    first = finite("first_position_deg", first_position_deg)
    return tuple(normalize_deg(first + k * 360.0 / n) for k in range(n))


def _neighbours(angle_deg: float, n: int, first: float) -> tuple[int, int, float]:
    """Return (index k, index k+1 mod n, offset x in degrees from position k, 0 <= x < spacing)."""
    spacing = 360.0 / n
    rel = normalize_deg(angle_deg - first)
    k = min(int(rel // spacing), n - 1)
    return k, (k + 1) % n, rel - k * spacing


def split_to_positions(
    mass_g: float,
    angle_deg: float,
    positions: int,
    first_position_deg: float = 0.0,
) -> SplitResult:
    """Split a correction onto the two neighbouring fixed positions.

    With the correction ``m∠φ`` between positions at ``θk`` and ``θk + β``
    (``β = 360°/N``, ``x = φ - θk``), the vector decomposition (law of sines in
    the triangle of the three vectors, any trigonometry text) gives

        m_k   = m · sin(β - x) / sin β,
        m_k+1 = m · sin(x) / sin β,

    both >= 0. A correction on a position gives one part.

    Parameters
    ----------
    mass_g : float
        Correction mass, grams, > 0.
    angle_deg : float
        Correction angle, degrees.
    positions : int
        Number of equally spaced positions, N >= 3 (two opposite positions
        cannot hold a correction that lies between them).
    first_position_deg : float
        Angle of position 1.

    Returns
    -------
    SplitResult
        Warns when the parts add up to much more than the correction (wide spacing).
    """
    m = positive("mass_g", mass_g)
    phi = finite("angle_deg", angle_deg)
    n = whole("positions", positions, 3)
    first = finite("first_position_deg", first_position_deg)
    spacing = 360.0 / n
    k, k1, x = _neighbours(phi, n, first)
    beta = math.radians(spacing)
    part_k = m * math.sin(beta - math.radians(x)) / math.sin(beta)
    part_k1 = m * math.sin(math.radians(x)) / math.sin(beta)
    angles = position_angles_deg(n, first)
    parts = []
    if part_k > _ON_POSITION_RTOL * m:
        parts.append(PositionMass(position=k + 1, angle_deg=angles[k], mass_g=part_k))
    if part_k1 > _ON_POSITION_RTOL * m:
        parts.append(PositionMass(position=k1 + 1, angle_deg=angles[k1], mass_g=part_k1))
    total = sum(p.mass_g for p in parts)
    warnings = []
    if total > 1.2 * m:
        warnings.append(
            f"The two parts add up to {short(total, 3)} g for a {short(m, 3)} g correction "
            "because the "
            f"positions are {short(spacing)}° apart; more positions would waste less mass."
        )
    return SplitResult(parts=tuple(parts), total_mass_g=total, warnings=tuple(warnings))


def combine_masses(
    masses_g: Sequence[float],
    angles_deg: Sequence[float],
    *,
    radii_mm: Sequence[float] | None = None,
    to_radius_mm: float | None = None,
) -> CombinedMass:
    """One mass equivalent to several: the vector sum ``Σ m_i·r_i·e^{iθ_i} / r``.

    Without radii all masses are taken at the same radius and simply added as
    vectors. With ``radii_mm`` (one per mass) the unbalances ``m·r`` are added
    and expressed as a mass at ``to_radius_mm``.

    Parameters
    ----------
    masses_g : sequence of float
        Masses, grams, >= 0 (at least one).
    angles_deg : sequence of float
        Their angles, degrees.
    radii_mm : sequence of float, optional
        Radius of each mass, mm, > 0.
    to_radius_mm : float, optional
        Radius of the equivalent mass; required with ``radii_mm``.
    """
    m = finite_array("masses_g", masses_g)
    a = finite_array("angles_deg", angles_deg)
    if m.dtype.kind == "c" or a.dtype.kind == "c":
        raise BalancingInputError("masses_g", "masses and angles must be real numbers")
    if m.ndim != 1 or m.size == 0:
        raise BalancingInputError("masses_g", "must be a non-empty list of masses")
    if a.shape != m.shape:
        raise BalancingInputError("angles_deg", f"needs one angle per mass ({m.size})")
    if np.any(m < 0.0):
        raise BalancingInputError("masses_g", "masses must not be negative")
    vectors = m * np.exp(1j * np.radians(a))
    radius: float | None = None
    if radii_mm is not None:
        r = positive_array("radii_mm", radii_mm)
        if r.shape != m.shape:
            raise BalancingInputError("radii_mm", f"needs one radius per mass ({m.size})")
        if to_radius_mm is None:
            raise BalancingInputError("to_radius_mm", "is needed when radii_mm is given")
        radius = positive("to_radius_mm", to_radius_mm)
        vectors = vectors * r / radius
    elif to_radius_mm is not None:
        raise BalancingInputError("radii_mm", "is needed when to_radius_mm is given")
    total = complex(vectors.sum())
    mass, angle = amplitude_angle(total)
    return CombinedMass(mass_g=mass, angle_deg=angle, vector_g=total, radius_mm=radius)


def _position_options(
    sizes: tuple[float, ...], max_per_position: int
) -> tuple[np.ndarray, list[tuple[float, ...]]]:
    """Distinct achievable sums at one position and the fewest-piece set for each."""
    best: dict[float, tuple[float, ...]] = {}
    for count in range(max_per_position + 1):
        for combo in itertools.combinations_with_replacement(sizes, count):
            key = round(sum(combo), 9)
            if key not in best:  # counts ascend, so the first found has fewest pieces
                best[key] = combo
    keys = sorted(best)
    return np.array(keys, dtype=float), [best[k] for k in keys]


def choose_weights(
    mass_g: float,
    angle_deg: float,
    positions: int,
    first_position_deg: float,
    available_g: Sequence[float],
    *,
    max_per_position: int = 2,
) -> WeightChoice:
    """Pick stock weights for the two neighbouring positions, minimising the miss.

    Exhaustive search over every multiset of at most ``max_per_position``
    pieces from ``available_g`` at each of the two positions that bracket the
    correction (as in :func:`split_to_positions`); the choice minimises
    ``|W - Σ pieces·e^{iθ}|``, ties broken by fewer pieces, then less mass.
    Bounded: at most 12 sizes and 5000 combinations per position.

    Parameters
    ----------
    mass_g, angle_deg : float
        Wanted correction, grams (> 0) and degrees.
    positions : int
        Number of equally spaced positions, >= 3.
    first_position_deg : float
        Angle of position 1.
    available_g : sequence of float
        Weight sizes in stock, grams, > 0 (e.g. ``[1, 2, 5, 10]``).
    max_per_position : int
        Most pieces stacked at one position, >= 1.
    """
    m = positive("mass_g", mass_g)
    phi = finite("angle_deg", angle_deg)
    n = whole("positions", positions, 3)
    first = finite("first_position_deg", first_position_deg)
    sizes = _stock_sizes(available_g)
    per = whole("max_per_position", max_per_position, 1)
    n_combos = math.comb(len(sizes) + per, per)
    if n_combos > MAX_COMBINATIONS_PER_POSITION:
        raise BalancingInputError(
            "max_per_position",
            f"{per} pieces from {len(sizes)} sizes is {n_combos} combinations per position; "
            f"the search is limited to {MAX_COMBINATIONS_PER_POSITION}",
        )
    wanted = phasor(m, phi, field="correction")
    k, k1, _ = _neighbours(phi, n, first)
    angles = position_angles_deg(n, first)
    e_k = complex(np.exp(1j * math.radians(angles[k])))
    e_k1 = complex(np.exp(1j * math.radians(angles[k1])))
    sums, sets = _position_options(sizes, per)
    fitted = sums[:, None] * e_k + sums[None, :] * e_k1
    miss = np.abs(wanted - fitted)
    pieces = np.array([len(s) for s in sets])
    n_pieces = pieces[:, None] + pieces[None, :]
    total_mass = sums[:, None] + sums[None, :]
    # Round the miss so that float noise does not override the tie-breaks.
    order = np.lexsort(
        (total_mass.ravel(), n_pieces.ravel(), np.round(miss.ravel() / m, 9))
    )
    i, j = np.unravel_index(int(order[0]), miss.shape)
    parts = []
    for idx, sel in ((k, i), (k1, j)):
        if sets[sel]:
            parts.append(PositionWeights(position=idx + 1, angle_deg=angles[idx],
                                         pieces_g=tuple(sets[sel]), mass_g=float(sums[sel])))
    fit = complex(fitted[i, j])
    residual = wanted - fit
    r_mass, r_angle = amplitude_angle(residual)
    warnings = []
    if not parts:
        warnings.append(
            f"No combination of the available sizes comes closer than leaving the {short(m, 3)} g "
            "correction off; smaller weights are needed."
        )
    elif r_mass > 0.1 * m:
        warnings.append(
            f"The available sizes leave {short(r_mass, 3)} g ({100 * r_mass / m:.0f} % of the "
            "correction) uncorrected."
        )
    return WeightChoice(
        parts=tuple(parts),
        fitted_vector_g=fit,
        residual_vector_g=residual,
        residual_mass_g=r_mass,
        residual_angle_deg=r_angle,
        warnings=tuple(warnings),
    )


# --------------------------------------------------------------------------- stock and trims

NEAR_DEG = 30.0  # a trim this close to a fitted weight merges with it (our rule)


@dataclass(frozen=True)
class StockRounding:
    """One mass rounded to stock pieces at a fixed angle (:func:`round_to_stock`)."""

    angle_deg: float
    pieces_g: tuple[float, ...]
    mass_g: float
    residual_vector_g: complex


@dataclass(frozen=True)
class WeightOnRotor:
    """A weight already fitted in a plane: ``ref`` names it (the recorded correction),
    ``vector_g`` is its unbalance as grams at the plane's radius (parts summed)."""

    ref: int
    vector_g: complex


@dataclass(frozen=True)
class WeightToFit:
    """One weight to fit: at a fixed position (1-based) or at a free angle (``None``)."""

    position: int | None
    angle_deg: float
    mass_g: float
    pieces_g: tuple[float, ...] = ()


@dataclass(frozen=True)
class TrimPlan:
    """How to fit a trim correction on a rotor that already carries weights.

    ``kind`` is ``"add"`` (fit ``parts`` beside the weights on the rotor) or
    ``"replace"`` (take weight ``replaces`` off and fit ``parts`` in its place).
    ``target_g`` is what ``parts`` should add up to: the trim, or the replaced
    weight plus the trim. ``residual_g = target − fitted`` is what rounding to
    stock leaves; ``combined_g`` is everything in the plane once done (weights
    on the rotor + trim), the one weight equivalent to them all.
    """

    kind: str
    replaces: int | None
    target_g: complex
    parts: tuple[WeightToFit, ...]
    fitted_g: complex
    residual_g: complex
    on_rotor_g: complex
    combined_g: complex
    warnings: tuple[str, ...]


def _stock_sizes(available_g: Sequence[float]) -> tuple[float, ...]:
    sizes_arr = positive_array("available_g", available_g)
    if sizes_arr.ndim != 1 or sizes_arr.size == 0:
        raise BalancingInputError("available_g", "must list at least one weight size")
    sizes = tuple(sorted({float(s) for s in sizes_arr}))
    if len(sizes) > MAX_WEIGHT_SIZES:
        raise BalancingInputError(
            "available_g", f"at most {MAX_WEIGHT_SIZES} different sizes, got {len(sizes)}"
        )
    return sizes


def round_to_stock(
    mass_g: float, angle_deg: float, available_g: Sequence[float], *, max_pieces: int = 2
) -> StockRounding:
    """Nearest sum of at most ``max_pieces`` stock weights to ``mass_g``, fitted at ``angle_deg``.

    At a free angle the rounding only changes the length of the vector, so the
    miss is ``(m − m_stock)·e^{iφ}``; ties go to fewer pieces, then less mass.
    """
    m = positive("mass_g", mass_g)
    phi = finite("angle_deg", angle_deg)
    sizes = _stock_sizes(available_g)
    per = whole("max_pieces", max_pieces, 1)
    if math.comb(len(sizes) + per, per) > MAX_COMBINATIONS_PER_POSITION:
        raise BalancingInputError("max_pieces", f"{per} pieces is too many to search")
    sums, sets = _position_options(sizes, per)
    miss = np.round(np.abs(sums - m) / m, 9)
    order = np.lexsort((sums, np.array([len(s) for s in sets]), miss))
    best = int(order[0])
    fitted = float(sums[best])
    # m − fitted may be negative (rounded up): the miss then points the other way.
    return StockRounding(phi, tuple(sets[best]), fitted, cmath.rect(m - fitted, math.radians(phi)))


def _fit(target: complex, positions: int | None, first: float,
         available_g: Sequence[float] | None) -> tuple[tuple[WeightToFit, ...], complex,
                                                       list[str]]:
    """Weights that make up ``target``: split onto positions and/or rounded to stock."""
    mass, angle = amplitude_angle(target)
    if mass == 0.0:
        return (), 0j, []
    if positions is None:
        if not available_g:
            return (WeightToFit(None, angle, mass),), target, []
        r = round_to_stock(mass, angle, available_g)
        parts = (WeightToFit(None, angle, r.mass_g, r.pieces_g),) if r.pieces_g else ()
        return parts, target - r.residual_vector_g, []
    if not available_g:
        s = split_to_positions(mass, angle, positions, first)
        return (tuple(WeightToFit(p.position, p.angle_deg, p.mass_g) for p in s.parts),
                target, list(s.warnings))
    c = choose_weights(mass, angle, positions, first, available_g)
    return (tuple(WeightToFit(p.position, p.angle_deg, p.mass_g, p.pieces_g) for p in c.parts),
            c.fitted_vector_g, list(c.warnings))


def plan_trim(
    trim_g: complex,
    on_rotor: Sequence[WeightOnRotor],
    *,
    positions: int | None = None,
    first_position_deg: float = 0.0,
    available_g: Sequence[float] | None = None,
    near_deg: float | None = None,
) -> TrimPlan:
    """Fit a trim correction, merging it with a weight already on the rotor when close.

    Rule (ours, so that a rotor does not collect a pile of small weights): when
    the trim ``T`` points within ``near_deg`` of a weight ``E`` already fitted
    (30° at a free angle, one position spacing with fixed positions), take
    ``E`` off and fit ``E + T`` in its place — one weight instead of two, the
    same vector sum (``Σ on rotor − E + (E + T) = Σ on rotor + T``). Otherwise
    fit ``T`` beside the others. The target is then split onto the
    neighbouring positions (:func:`split_to_positions`) and/or rounded to the
    stock sizes (:func:`choose_weights`, :func:`round_to_stock`); the miss is
    ``residual = target − fitted``. All vectors are grams at the plane's radius.
    """
    t = complex(trim_g)
    if not (math.isfinite(t.real) and math.isfinite(t.imag)):
        raise BalancingInputError("trim_g", "must be a finite vector")
    first = finite("first_position_deg", first_position_deg)
    n = None if positions is None else whole("positions", positions, 3)
    if near_deg is None:
        near = NEAR_DEG if n is None else max(NEAR_DEG, 360.0 / n)
    else:
        near = finite("near_deg", near_deg)
    if available_g is not None and len(available_g) > 0:
        _stock_sizes(available_g)  # checked up front so a bad list is named
    stock = list(available_g) if available_g else None
    on_total = complex(sum((w.vector_g for w in on_rotor), 0j))
    replaces: int | None = None
    target = t
    if abs(t) > 0.0:
        t_angle = math.degrees(cmath.phase(t))
        close = [(abs(normalize_deg(math.degrees(cmath.phase(w.vector_g)) - t_angle + 180.0)
                      - 180.0), w) for w in on_rotor if abs(w.vector_g) > 0.0]
        close = [c for c in close if c[0] <= near]
        if close:
            _, nearest = min(close, key=lambda c: (c[0], c[1].ref))
            replaces = nearest.ref
            target = nearest.vector_g + t
    parts, fitted, warnings = _fit(target, n, first, stock)
    return TrimPlan(
        kind="replace" if replaces is not None else "add",
        replaces=replaces,
        target_g=target,
        parts=parts,
        fitted_g=fitted,
        residual_g=target - fitted,
        on_rotor_g=on_total,
        combined_g=on_total + t,
        warnings=tuple(warnings),
    )
