"""Independent helpers for the pedigree tests (not part of ped2g).

``tabular_relationship`` is the textbook tabular (recursive) method for A (Emik & Terrill 1949;
Mrode 2014, *Linear Models for the Prediction of Animal Breeding Values*, 3rd edn, section 2.2),
written here as a plain loop so it shares no code with ``ped2g.pedigree.relationships``.
"""

from __future__ import annotations

import numpy as np

from ped2g.pedigree.core import Pedigree


def tabular_relationship(sire, dam) -> np.ndarray:
    """A by the tabular method: a_jj = 1 + a_sd / 2, a_ij = (a_is + a_id) / 2 for i older than j."""
    n = len(sire)
    a = np.zeros((n, n))
    for j in range(n):
        s, d = int(sire[j]), int(dam[j])
        a[j, j] = 1.0 + (0.5 * a[s, d] if s >= 0 and d >= 0 else 0.0)
        for i in range(j):
            v = 0.0
            if s >= 0:
                v += 0.5 * a[i, s]
            if d >= 0:
                v += 0.5 * a[i, d]
            a[i, j] = a[j, i] = v
    return a


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
