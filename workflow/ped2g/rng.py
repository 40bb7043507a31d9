"""Random streams derived from the one seed in the config.

Every stage and population gets its own stream, derived from the run seed by name, so the numbers
a stage draws do not depend on the order in which jobs run (docs/methods.md §0.4).
"""

from __future__ import annotations

import zlib

import numpy as np


def _key(name: str | int) -> int:
    if isinstance(name, (int, np.integer)):
        return int(name)
    return zlib.crc32(str(name).encode("utf-8"))


def seed_sequence(seed: int, *names: str | int) -> np.random.SeedSequence:
    """The seed sequence of the stream named ``names`` under the run seed ``seed``.

    It equals ``SeedSequence(seed).spawn(...)`` children addressed by a stable key made of the
    names (CRC-32 of each), so the same names always give the same stream.
    """
    return np.random.SeedSequence(int(seed), spawn_key=tuple(_key(n) for n in names))


def generator(seed: int, *names: str | int) -> np.random.Generator:
    """A ``numpy.random.Generator`` for the stream named ``names`` (see :func:`seed_sequence`)."""
    return np.random.Generator(np.random.PCG64(seed_sequence(seed, *names)))
