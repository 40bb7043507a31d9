"""Simulation: breeding values down a pedigree, and invented multi-population studies.

* :mod:`ped2g.simulate.breeding_values` — :func:`covariance_factor` and
  :func:`simulate_breeding_values`, the core the randomisation null reuses.
* :mod:`ped2g.simulate.study` — :class:`StudySettings` and :func:`simulate_study`, an invented
  study with known G, R, means and fixed effects, for demos and recovery tests.

The names are loaded on first use, so ``ped2g --help`` does not import numpy or numba.
"""

from __future__ import annotations

import importlib
from typing import Any

#: The seed the demo data in ``resources_demo/`` were made with.
DEMO_SEED = 2026

_LAZY = {
    "covariance_factor": "breeding_values",
    "simulate_breeding_values": "breeding_values",
    "StudySettings": "study",
    "Study": "study",
    "simulate_study": "study",
}

__all__ = ["DEMO_SEED", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(f"{__name__}.{_LAZY[name]}"), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
