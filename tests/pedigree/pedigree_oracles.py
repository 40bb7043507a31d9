"""Independent helpers for the pedigree tests (not part of ped2g).

``tabular_relationship`` (the textbook tabular method for A, shared with other stages' tests) lives in
``tests/textbook.py``.
"""

from __future__ import annotations

import numpy as np

from ped2g.pedigree.core import Pedigree
from textbook import tabular_relationship  # noqa: F401  (re-exported for the pedigree tests)




def make_pedigree(rows: list[tuple[str, str | None, str | None]]) -> Pedigree:
    """A Pedigree from (id, sire, dam) rows already in parents-first order (None = unknown)."""
    from ped2g.pedigree.relationships import inbreeding

    ids = [r[0] for r in rows]
    pos = {name: i for i, name in enumerate(ids)}
    sire = np.array([pos[r[1]] if r[1] is not None else -1 for r in rows], dtype=np.int64)
    dam = np.array([pos[r[2]] if r[2] is not None else -1 for r in rows], dtype=np.int64)
    gen = np.zeros(len(rows), dtype=np.int64)
    for i in range(len(rows)):
        g = [gen[p] + 1 for p in (sire[i], dam[i]) if p >= 0]
        gen[i] = max(g) if g else 0
    return Pedigree(ids=np.array(ids, dtype=object), sire=sire, dam=dam, generation=gen,
                    inbreeding=inbreeding(sire, dam))


def random_parents(rng: np.random.Generator, n: int, p_unknown: float = 0.2,
                   selfing: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Random parents-first pedigree: each parent drawn among earlier animals or unknown."""
    sire = np.full(n, -1, dtype=np.int64)
    dam = np.full(n, -1, dtype=np.int64)
    for i in range(1, n):
        if rng.random() > p_unknown:
            sire[i] = rng.integers(0, i)
        if rng.random() > p_unknown:
            dam[i] = rng.integers(0, i)
        if not selfing and sire[i] >= 0 and sire[i] == dam[i]:
            dam[i] = -1
    return sire, dam
