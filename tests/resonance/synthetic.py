"""Synthetic run-ups for the resonance tests, written out here from the textbook.

Steady-state response of a Jeffcott rotor to a rotating unbalance (Rao,
*Mechanical Vibrations*, rotating-unbalance section; Thomson, *Theory of
Vibration with Applications* — from memory)::

    z(n) = Q · r² / (1 − r² + 2iζr),    r = n / n_c

independent of the code under test. Angles in the shopapp convention (degrees
in the direction of rotation); through the resonance the angle falls by 180°.
"""

from __future__ import annotations

import math

import numpy as np

NC = 1800.0  # known critical speed, rpm
ZETA = 0.05  # known damping ratio
Q = 40.0 * np.exp(1j * math.radians(250.0))  # response far above resonance, µm


def jeffcott_lines(nc: float = NC, zeta: float = ZETA, *, lo: float = 600.0,
                   hi: float = 3000.0, count: int = 41, noise_um: float = 0.2,
                   seed: int = 7) -> str:
    """``speed amplitude angle`` lines of a run-up through the resonance at ``nc``."""
    n = np.linspace(lo, hi, count)
    r = n / nc
    z = Q * r**2 / (1.0 - r**2 + 2j * zeta * r)
    rng = np.random.default_rng(seed)
    z = z + noise_um * (rng.normal(size=n.size) + 1j * rng.normal(size=n.size)) / math.sqrt(2)
    ang = np.mod(np.degrees(np.angle(z)), 360.0)
    return "\n".join(f"{s:.0f} {a:.3f} {g:.2f}" for s, a, g in zip(n, np.abs(z), ang,
                                                                   strict=True))
