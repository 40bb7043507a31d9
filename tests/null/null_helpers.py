"""Helpers for the null tests: small pedigrees, an independent tabular A, fit folders.

``tabular_a`` is the textbook tabular method for A from ``tests/textbook.py`` (shared oracle).
"""

from __future__ import annotations

from pathlib import Path

import arviz as az
import numpy as np

from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.relationships import inbreeding
from ped2g.contracts.fit_folder import posterior_dataset
from textbook import tabular_relationship as tabular_a  # noqa: F401  (re-exported)




def pedigree_from_parents(sire, dam, prefix: str = "a") -> Pedigree:
    """A Pedigree from parent positions (parents first, -1 unknown), F from ped2g's pedigree code."""
    sire = np.asarray(sire, dtype=np.int64)
    dam = np.asarray(dam, dtype=np.int64)
    gen = np.zeros(len(sire), dtype=np.int64)
    for i in range(len(sire)):
        g = [gen[p] + 1 for p in (sire[i], dam[i]) if p >= 0]
        gen[i] = max(g) if g else 0
    ids = np.array([f"{prefix}{i + 1}" for i in range(len(sire))], dtype=object)
    return Pedigree(ids=ids, sire=sire, dam=dam, generation=gen, inbreeding=inbreeding(sire, dam))


def mrode_p1() -> Pedigree:
    """Mrode (2014) Table 2.1: 1, 2 founders; 3 = 1x2; 4 = 1x?; 5 = 4x3; 6 = 5x2 (sire x dam)."""
    return pedigree_from_parents([-1, -1, 0, 0, 3, 4], [-1, -1, 1, -1, 2, 1])


def mrode_p2() -> Pedigree:
    """Mrode (2014) Example 3.1: 1-3 founders; 4 = 1x?; 5 = 3x2; 6 = 1x2; 7 = 4x5; 8 = 3x6."""
    return pedigree_from_parents([-1, -1, -1, 0, 2, 0, 3, 2], [-1, -1, -1, -1, 1, 1, 4, 5])


def random_pedigree(rng: np.random.Generator, n: int, founders: int, generations: int,
                    prefix: str = "a", p_unknown: float = 0.05, breeders: int | None = None) -> Pedigree:
    """A discrete-generation pedigree: ``founders`` unrelated animals, then equal-sized
    generations whose parents are drawn at random from the previous generation (so relatives
    mate now and then and some animals are inbred); with ``breeders`` only that many animals of
    each generation become parents (large families, high relatedness)."""
    per_gen = (n - founders) // generations
    sire = [-1] * founders
    dam = [-1] * founders
    prev = np.arange(founders)
    for _ in range(generations):
        start = len(sire)
        size = per_gen if _ < generations - 1 else n - start
        pool = prev if breeders is None else prev[:breeders]
        males = pool[: len(pool) // 2]
        females = pool[len(pool) // 2:]
        for _i in range(size):
            sire.append(int(rng.choice(males)) if rng.random() > p_unknown else -1)
            dam.append(int(rng.choice(females)) if rng.random() > p_unknown else -1)
        prev = np.arange(start, start + size)
    return pedigree_from_parents(sire, dam, prefix)


def random_covariances(rng: np.random.Generator, S: int, t: int, scale: float = 1.0) -> np.ndarray:
    """S random positive-definite t x t matrices."""
    a = rng.standard_normal((S, t, t + 3))
    return scale * (a @ np.swapaxes(a, -1, -2)) / (t + 3) + 0.1 * scale * np.eye(t)


def write_fit(folder: Path, population: str, traits: list[str], G: np.ndarray, ped: Pedigree,
              phenotyped: np.ndarray | None = None) -> Path:
    """A fit folder (posterior.nc and pedigree_used.csv) holding the given G draws (S, t, t)
    as one chain; R = identity. A test fixture with chosen draws, not a real fit."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    G = np.asarray(G, dtype=float)[None]
    t = len(traits)
    R = np.broadcast_to(np.eye(t), G.shape).copy()
    mean = np.zeros(G.shape[:2] + (t,))
    ds = posterior_dataset(population, traits, G, R, G + R, mean)
    az.InferenceData(posterior=ds).to_netcdf(folder / "posterior.nc")
    frame = ped.to_frame()
    frame["phenotyped"] = np.ones(ped.n, dtype=int) if phenotyped is None else np.asarray(phenotyped, dtype=int)
    frame.to_csv(folder / "pedigree_used.csv", index=False)
    return folder
