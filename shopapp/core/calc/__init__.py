"""Stateless balancing calculations as JSON in, JSON out: one home for the CLI's
``shopapp calc`` and the API's ``/calc/<kind>`` (input reading, the kinds, their answers)."""
