"""Index balancing: separate a rotor's unbalance from the error of the shop arbor it runs on.

Rotors without their own shaft (impellers, wheels, discs) are balanced on a
shop arbor (mandrel). The machine then measures the rotor's unbalance plus the
arbor's error: the arbor's own unbalance and the eccentricity of its seat,
both fixed to the arbor. The index method (common shop practice) separates the
two: a run, the rotor turned on the arbor by an index angle (usually 180°), a
second run.

Frames (angles in degrees in the direction of rotation, as in the whole core):

* **arbor frame** — angles from the arbor's reference mark; the machine's phase
  reference turns with the spindle and arbor, so readings are in this frame
  unless the shop reads angles from a mark on the rotor itself;
* **rotor frame** — angles from the rotor's own reference mark. At the first
  mounting the rotor's mark is set against the arbor's mark, so the two frames
  coincide; at the second the rotor is turned by ``α`` in the direction of
  rotation, so a feature at rotor angle ``φ`` sits at arbor angle ``φ + α``.

With ``U_r`` the rotor's unbalance (rotor frame) and ``U_a`` the arbor error
(arbor frame), both as the machine sees them (any linear reading unit, g·mm on
a calibrated machine), per plane:

``V1 = U_r + U_a``, ``V2' = U_r·e^{iα} + U_a`` (``V2'`` in the arbor frame), so

``U_r = (V1 − V2') / (1 − e^{iα})`` and ``U_a = V1 − U_r``;

for ``α = 180°``: ``U_r = (V1 − V2') / 2`` and ``U_a = (V1 + V2') / 2``. A
second reading taken in the rotor frame is first turned into the arbor frame:
``V2' = V2·e^{iα}``. The separation is linear, so it holds plane by plane in
reading units for any machine whose readings are linear in the unbalance (the
same influence matrix applies to both runs). Derived from first principles.

Limits of the method (common practice, no source): the rotor must seat the same
way at both index positions (a loose or cocked fit shows as a changing "arbor
error"); the arbor-seat eccentricity part of the error scales with the rotor's
mass, so a stored arbor error applies to rotors of about the mass it was
measured with; an index angle near 0° carries no information — refused within
:data:`MIN_INDEX_DEG` of 0°.
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from shopapp.balancing.checks import finite, finite_array
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.numtext import short
from shopapp.balancing.phasors import normalize_deg

FRAMES = ("arbor", "rotor")
# Judgement: below 30° the divisor |1 - e^{iα}| = 2·sin(α/2) drops under 0.52
# and the readings' scatter is amplified about twice as much as at 180°.
MIN_INDEX_DEG = 30.0


@dataclass(frozen=True)
class IndexSeparation:
    """Result of :func:`separate_arbor_error`, one value per plane.

    ``rotor`` is in the rotor frame, ``arbor`` in the arbor frame, both in the
    readings' unit. ``arbor_share`` is ``|U_a| / |V1|`` per plane (NaN-free:
    0 when the first reading is 0).
    """

    rotor: tuple[complex, ...]
    arbor: tuple[complex, ...]
    index_deg: float
    arbor_share: tuple[float, ...]
    warnings: tuple[str, ...]


def _plane_vector(field: str, values: Sequence[complex] | np.ndarray) -> np.ndarray:
    arr = finite_array(field, values).astype(complex)
    if arr.ndim != 1 or arr.size not in (1, 2):
        raise BalancingInputError(field, "give one reading per plane (one or two planes)")
    return arr


def _index(index_deg: float) -> float:
    alpha = normalize_deg(finite("index_deg", index_deg))
    if min(alpha, 360.0 - alpha) < MIN_INDEX_DEG:
        raise BalancingInputError(
            "index_deg",
            f"the rotor must be turned at least {short(MIN_INDEX_DEG)}° on the arbor between the "
            f"runs (180° recommended), got {short(alpha)}°",
        )
    return alpha


def separate_arbor_error(
    first_run: Sequence[complex] | np.ndarray,
    second_run: Sequence[complex] | np.ndarray,
    *,
    index_deg: float = 180.0,
    second_frame: str = "arbor",
) -> IndexSeparation:
    """Split two index runs into rotor unbalance and arbor error, per plane.

    ``U_r = (V1 − V2') / (1 − e^{iα})``, ``U_a = V1 − U_r``; for ``α = 180°``
    ``U_r = (V1 − V2')/2`` and ``U_a = (V1 + V2')/2`` (module docstring; from
    first principles).

    Parameters
    ----------
    first_run : sequence of complex
        Reading per plane with the rotor's mark at the arbor's mark (arbor frame).
    second_run : sequence of complex
        Reading per plane after turning the rotor by ``index_deg`` on the arbor.
    index_deg : float
        How far the rotor was turned on the arbor, degrees in the direction of
        rotation (180 usual); refused within 30° of 0.
    second_frame : {"arbor", "rotor"}
        Frame of the second reading's angle: ``"arbor"`` when the machine's
        phase reference is on the spindle/arbor (usual), ``"rotor"`` when the
        angle was read from the rotor's own mark.

    Returns
    -------
    IndexSeparation
    """
    v1 = _plane_vector("first_run", first_run)
    v2 = _plane_vector("second_run", second_run)
    if v2.shape != v1.shape:
        raise BalancingInputError(
            "second_run", f"needs one reading per plane, as the first run ({v1.size})"
        )
    if second_frame not in FRAMES:
        raise BalancingInputError("second_frame", f"must be one of {', '.join(FRAMES)}")
    alpha = _index(index_deg)
    turn = cmath.exp(1j * math.radians(alpha))
    v2_arbor = v2 * turn if second_frame == "rotor" else v2
    rotor = (v1 - v2_arbor) / (1.0 - turn)
    arbor = v1 - rotor
    shares = tuple(
        float(abs(a) / abs(v)) if abs(v) > 0.0 else 0.0 for a, v in zip(arbor, v1, strict=True)
    )
    warnings: list[str] = []
    for plane, share in enumerate(shares, start=1):
        if share > 1.0:
            warnings.append(
                f"Plane {plane}: the arbor error is larger than the first reading; check that "
                "the rotor seats the same way at both index positions and repeat the runs."
            )
    return IndexSeparation(
        rotor=tuple(complex(r) for r in rotor),
        arbor=tuple(complex(a) for a in arbor),
        index_deg=alpha,
        arbor_share=shares,
        warnings=tuple(warnings),
    )


def subtract_arbor_error(
    reading: Sequence[complex] | np.ndarray,
    arbor_error: Sequence[complex] | np.ndarray,
    *,
    index_deg: float = 0.0,
) -> tuple[complex, ...]:
    """The rotor's own unbalance from a reading taken on an arbor of known error.

    ``U_r = (V − U_a) · e^{−iα}`` per plane: the reading ``V`` and the arbor
    error ``U_a`` in the arbor frame, the result in the rotor frame; ``α`` is
    the rotor's index position on the arbor (0 when its mark is at the arbor's
    mark, the usual mounting). Both must be in the same unit. From first
    principles (module docstring).

    Parameters
    ----------
    reading : sequence of complex
        Reading per plane, arbor frame.
    arbor_error : sequence of complex
        Known arbor error per plane, arbor frame, same unit.
    index_deg : float
        Index position of the rotor on the arbor, degrees (any value).
    """
    v = _plane_vector("reading", reading)
    a = _plane_vector("arbor_error", arbor_error)
    if a.shape != v.shape:
        raise BalancingInputError(
            "arbor_error", f"needs one value per plane, as the reading ({v.size})"
        )
    alpha = normalize_deg(finite("index_deg", index_deg))
    back = cmath.exp(-1j * math.radians(alpha))
    return tuple(complex(x) for x in (v - a) * back)
