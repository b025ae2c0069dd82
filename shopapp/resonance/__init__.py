"""Resonance: run-up records of jobs and machines (critical speed, damping, separation
margin) and the loose-mass balancer calculator (issue 16).

The numerics are :mod:`shopapp.balancing.runup` and :mod:`shopapp.balancing.loose_mass`;
this feature stores run-ups, analyses them for the pages and draws their charts.
"""
