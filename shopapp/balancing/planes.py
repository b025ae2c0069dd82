"""Two-plane unbalance: static/couple decomposition, transfer between plane pairs.

A rigid rotor's unbalance state is fully described by two numbers: the
resultant (static) unbalance ``F = U1 + U2`` and its moment about the axial
datum ``M = U1·z1 + U2·z2`` (complex, g·mm and g·mm²). Any representation in
another pair of planes with the same ``F`` and ``M`` is *equivalent* for a
rigid rotor: it produces the same bearing forces at every speed (rigid-body
statics; ISO 21940-11 §4.2 describes these equivalent representations).

Unbalances are complex phasors in g·mm (see :mod:`shopapp.balancing.phasors`);
positions are axial coordinates in mm from one datum, any sign. Functions take
complex scalars or numpy arrays (broadcast together) and return the same shape.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite, finite_array
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short


def _vector(field: str, value: complex | np.ndarray) -> np.ndarray | complex:
    arr = finite_array(field, value)
    return complex(arr) if arr.ndim == 0 else arr.astype(complex)


def _distinct(field_1: str, z1: float, field_2: str, z2: float) -> tuple[float, float]:
    a = finite(field_1, z1)
    b = finite(field_2, z2)
    # A pair of coincident planes cannot carry a moment; the 2×2 statics is singular.
    if a == b:
        raise BalancingInputError(field_2, f"must differ from {field_1} (both {short(a)} mm)")
    return a, b


def transfer_matrix(
    plane_1_mm: float, plane_2_mm: float, new_plane_1_mm: float, new_plane_2_mm: float
) -> np.ndarray:
    """Real 2×2 matrix ``T`` with ``[U_a, U_b] = T @ [U_1, U_2]``.

    From force and moment equivalence ``U_a + U_b = U_1 + U_2`` and
    ``U_a·z_a + U_b·z_b = U_1·z_1 + U_2·z_2`` (rigid-body statics):

    ``U_a = (U_1·(z_b − z_1) + U_2·(z_b − z_2)) / (z_b − z_a)``,
    ``U_b = (U_1·(z_1 − z_a) + U_2·(z_2 − z_a)) / (z_b − z_a)``.

    Parameters
    ----------
    plane_1_mm, plane_2_mm : float
        Axial positions of the planes the unbalance is given in (they may
        coincide: one plane's unbalance then simply splits onto the new pair).
    new_plane_1_mm, new_plane_2_mm : float
        Axial positions of the target planes; must differ.
    """
    z1 = finite("plane_1_mm", plane_1_mm)
    z2 = finite("plane_2_mm", plane_2_mm)
    za, zb = _distinct("new_plane_1_mm", new_plane_1_mm, "new_plane_2_mm", new_plane_2_mm)
    span = zb - za
    return np.array([[zb - z1, zb - z2], [z1 - za, z2 - za]]) / span


def transfer_planes(
    u1_gmm: complex | np.ndarray,
    u2_gmm: complex | np.ndarray,
    plane_1_mm: float,
    plane_2_mm: float,
    new_plane_1_mm: float,
    new_plane_2_mm: float,
) -> tuple[complex | np.ndarray, complex | np.ndarray]:
    """Move a two-plane unbalance onto another pair of planes.

    Uses :func:`transfer_matrix` (force and moment equivalence of a rigid
    rotor). Returns ``(U_a, U_b)`` in g·mm in the new planes 1 and 2.

    Raises
    ------
    BalancingInputError
        Non-finite unbalance (``"u1_gmm"``, ``"u2_gmm"``) or positions, or
        coincident target planes (``"new_plane_2_mm"``).
    """
    u1 = _vector("u1_gmm", u1_gmm)
    u2 = _vector("u2_gmm", u2_gmm)
    t = transfer_matrix(plane_1_mm, plane_2_mm, new_plane_1_mm, new_plane_2_mm)
    ua = t[0, 0] * u1 + t[0, 1] * u2
    ub = t[1, 0] * u1 + t[1, 1] * u2
    return ua, ub


def bearing_plane_equivalents(
    u1_gmm: complex | np.ndarray,
    u2_gmm: complex | np.ndarray,
    plane_1_mm: float,
    plane_2_mm: float,
    bearing_a_mm: float,
    bearing_b_mm: float,
) -> tuple[complex | np.ndarray, complex | np.ndarray]:
    """Equivalent unbalances in the bearing planes A and B (g·mm).

    The correction-plane pair is moved onto the bearing planes by
    :func:`transfer_planes`; these are the values ISO 21940-11 compares with
    the tolerances allocated to the bearing planes (its reference planes).
    Field names in errors are ``"bearing_a_mm"`` / ``"bearing_b_mm"``.
    """
    try:
        return transfer_planes(u1_gmm, u2_gmm, plane_1_mm, plane_2_mm, bearing_a_mm, bearing_b_mm)
    except BalancingInputError as exc:
        renamed = {"new_plane_1_mm": "bearing_a_mm", "new_plane_2_mm": "bearing_b_mm"}
        raise BalancingInputError(
            renamed.get(exc.field, exc.field),
            exc.message.replace("new_plane_1_mm", "bearing_a_mm"),
        ) from None


@dataclass(frozen=True)
class StaticCouple:
    """Static/couple form of a two-plane unbalance.

    Attributes
    ----------
    static_gmm : complex
        Resultant (static) unbalance ``S = U1 + U2``, thought of as acting at
        ``reference_mm``.
    couple_moment_gmm2 : complex
        Moment of the unbalance about ``reference_mm``:
        ``M = U1·(z1 − z_r) + U2·(z2 − z_r)`` in g·mm².
    couple_pair_gmm : complex
        The couple as an equal and opposite pair in the correction planes:
        ``+C`` in plane 1 and ``−C`` in plane 2, ``C = M / (z1 − z2)``.
    static_in_plane_1_gmm, static_in_plane_2_gmm : complex
        The static unbalance shared onto the two correction planes by the lever
        rule (equal halves when the reference is midway).
    reference_mm : float
        Axial position the static part is referred to.
    """

    static_gmm: complex
    couple_moment_gmm2: complex
    couple_pair_gmm: complex
    static_in_plane_1_gmm: complex
    static_in_plane_2_gmm: complex
    reference_mm: float


def static_couple(
    u1_gmm: complex,
    u2_gmm: complex,
    plane_1_mm: float,
    plane_2_mm: float,
    reference_mm: float | None = None,
) -> StaticCouple:
    """Split a two-plane unbalance into a static and a couple part.

    ``S = U1 + U2``; ``M = U1·(z1 − z_r) + U2·(z2 − z_r)``; couple pair
    ``C = M / (z1 − z2)``; static share in the planes
    ``S1 = S·(z2 − z_r)/(z2 − z1)``, ``S2 = S·(z_r − z1)/(z2 − z1)``, so that
    ``U1 = S1 + C`` and ``U2 = S2 − C`` exactly (rigid-body statics; the
    representation of ISO 21940-11 §4.2, resultant plus couple unbalance).

    Parameters
    ----------
    u1_gmm, u2_gmm : complex
        Unbalance in correction planes 1 and 2, g·mm.
    plane_1_mm, plane_2_mm : float
        Axial positions of the planes; must differ.
    reference_mm : float, optional
        Where the static part is referred to, e.g. the centre of mass; default
        midway between the planes (then ``S1 = S2 = S/2`` and ``C = (U1 − U2)/2``).
    """
    u1 = complex(_vector("u1_gmm", u1_gmm))
    u2 = complex(_vector("u2_gmm", u2_gmm))
    z1, z2 = _distinct("plane_1_mm", plane_1_mm, "plane_2_mm", plane_2_mm)
    zr = 0.5 * (z1 + z2) if reference_mm is None else finite("reference_mm", reference_mm)
    s = u1 + u2
    m = u1 * (z1 - zr) + u2 * (z2 - zr)
    c = m / (z1 - z2)
    s1 = s * (z2 - zr) / (z2 - z1)
    s2 = s * (zr - z1) / (z2 - z1)
    return StaticCouple(
        static_gmm=s,
        couple_moment_gmm2=m,
        couple_pair_gmm=c,
        static_in_plane_1_gmm=s1,
        static_in_plane_2_gmm=s2,
        reference_mm=zr,
    )


def recombine(
    static_gmm: complex,
    couple_moment_gmm2: complex,
    plane_1_mm: float,
    plane_2_mm: float,
    reference_mm: float | None = None,
) -> tuple[complex, complex]:
    """Two-plane unbalance ``(U1, U2)`` from a static part and a couple moment.

    Inverse of :func:`static_couple`: solve ``U1 + U2 = S`` and
    ``U1·(z1 − z_r) + U2·(z2 − z_r) = M`` (rigid-body statics), i.e.
    ``U1 = (S·(z2 − z_r) − M)/(z2 − z1)``, ``U2 = (M − S·(z1 − z_r))/(z2 − z1)``.
    """
    s = complex(_vector("static_gmm", static_gmm))
    m = complex(_vector("couple_moment_gmm2", couple_moment_gmm2))
    z1, z2 = _distinct("plane_1_mm", plane_1_mm, "plane_2_mm", plane_2_mm)
    zr = 0.5 * (z1 + z2) if reference_mm is None else finite("reference_mm", reference_mm)
    u1 = (s * (z2 - zr) - m) / (z2 - z1)
    u2 = (m - s * (z1 - zr)) / (z2 - z1)
    return u1, u2


def recombine_pair(static_gmm: complex, couple_pair_gmm: complex) -> tuple[complex, complex]:
    """``(U1, U2) = (S/2 + C, S/2 − C)``: the midway static/couple form recombined.

    The shop's quick form: the static half in each plane plus the couple pair
    ``+C`` / ``−C`` (plane-position free; equals :func:`recombine` with the
    reference midway).
    """
    s = complex(_vector("static_gmm", static_gmm))
    c = complex(_vector("couple_pair_gmm", couple_pair_gmm))
    return 0.5 * s + c, 0.5 * s - c
