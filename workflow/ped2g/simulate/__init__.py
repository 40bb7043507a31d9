"""Simulation: breeding values down a pedigree, and invented multi-population studies.

* :mod:`ped2g.simulate.breeding_values` — :func:`covariance_factor` and
  :func:`simulate_breeding_values`, the core the randomisation null reuses.
* :mod:`ped2g.simulate.study` — :class:`StudySettings` and :func:`simulate_study`, an invented
  study with known G, R, means and fixed effects, for demos and recovery tests.
"""

from .breeding_values import covariance_factor, simulate_breeding_values

__all__ = ["covariance_factor", "simulate_breeding_values"]
