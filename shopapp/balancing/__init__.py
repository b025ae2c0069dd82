"""Pure numerics of rotor balancing: numpy in, numpy out; no Flask, SQLAlchemy or I/O.

Conventions are in :mod:`shopapp.balancing.phasors`; every public function
raises :class:`~shopapp.balancing.errors.BalancingInputError` on bad input.
"""

from shopapp.balancing.errors import BalancingInputError

__all__ = ["BalancingInputError"]
