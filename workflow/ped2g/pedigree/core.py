"""The :class:`Pedigree`: a clean pedigree held as integer arrays, parents before offspring.

This is the object every stage passes around. Identifiers are strings kept exactly as the user
wrote them (after stripping surrounding white space); parents are integer positions (``-1`` for
an unknown parent), always smaller than the offspring's own position.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd


def mendelian_coefficients(sire: np.ndarray, dam: np.ndarray, inbreeding: np.ndarray) -> np.ndarray:
    """Mendelian-sampling variance coefficients ``b_i`` (the diagonal of D in A = T D T').

    ``b_i = 1 - (1 + F_s)/4 [s known] - (1 + F_d)/4 [d known]``, i.e. 1/2 - (F_s + F_d)/4 with both
    parents known, 3/4 - F_p/4 with one, 1 with none (Mrode 2014, p. 25; Quaas 1976). Selfing
    (s = d) is covered by the same formula.
    """
    sire = np.asarray(sire, dtype=np.int64)
    dam = np.asarray(dam, dtype=np.int64)
    f = np.asarray(inbreeding, dtype=float)
    b = np.ones(len(sire))
    known_s = sire >= 0
    known_d = dam >= 0
    b[known_s] -= 0.25 * (1.0 + f[sire[known_s]])
    b[known_d] -= 0.25 * (1.0 + f[dam[known_d]])
    return b


@dataclass(frozen=True, eq=False)
class Pedigree:
    """A clean pedigree.

    Attributes
    ----------
    ids : numpy.ndarray of str, shape (n,)
        Identifiers, every parent before its offspring.
    sire, dam : numpy.ndarray of int64, shape (n,)
        Position of each parent in ``ids``; ``-1`` when unknown. ``sire[i] < i`` and ``dam[i] < i``.
    generation : numpy.ndarray of int64, shape (n,)
        0 for founders, otherwise 1 + the largest generation of the known parents.
    inbreeding : numpy.ndarray of float, shape (n,)
        Wright's inbreeding coefficient F of each animal.
    """

    ids: np.ndarray
    sire: np.ndarray
    dam: np.ndarray
    generation: np.ndarray
    inbreeding: np.ndarray = field(repr=False)

    def __post_init__(self) -> None:
        n = len(self.ids)
        for name in ("sire", "dam", "generation", "inbreeding"):
            if len(getattr(self, name)) != n:
                raise ValueError(f"Pedigree.{name} has length {len(getattr(self, name))}, expected {n}")
        pos = np.arange(n)
        if np.any(self.sire >= pos) or np.any(self.dam >= pos):
            raise ValueError("Pedigree arrays must list parents before offspring")

    @property
    def n(self) -> int:
        """Number of animals."""
        return len(self.ids)

    def __len__(self) -> int:
        return self.n

    @cached_property
    def index(self) -> dict[str, int]:
        """Map from identifier to position."""
        return {name: i for i, name in enumerate(self.ids)}

    @cached_property
    def mendelian(self) -> np.ndarray:
        """Mendelian-sampling variance coefficients b (see :func:`mendelian_coefficients`)."""
        return mendelian_coefficients(self.sire, self.dam, self.inbreeding)

    @cached_property
    def generations(self) -> list[np.ndarray]:
        """Positions of the animals of each generation, generation 0 first."""
        order = np.argsort(self.generation, kind="stable")
        bounds = np.searchsorted(self.generation[order], np.arange(self.generation.max(initial=0) + 2))
        return [order[bounds[g]:bounds[g + 1]] for g in range(len(bounds) - 1)]

    def to_frame(self) -> pd.DataFrame:
        """The pedigree as the table written to ``pedigree.csv`` (unknown parent = empty)."""
        ids = np.asarray(self.ids, dtype=object)
        sire = np.where(self.sire >= 0, ids[np.maximum(self.sire, 0)], "")
        dam = np.where(self.dam >= 0, ids[np.maximum(self.dam, 0)], "")
        return pd.DataFrame({"id": ids, "sire": sire, "dam": dam,
                             "generation": self.generation, "inbreeding": self.inbreeding})

    @classmethod
    def from_frame(cls, frame: pd.DataFrame) -> "Pedigree":
        """Build from a table with the columns of ``pedigree.csv`` (already clean and ordered)."""
        n = len(frame)
        cols = [frame[c].fillna("").astype(str).reset_index(drop=True) for c in ("id", "sire", "dam")]
        # one hash pass over every identifier instead of a Python loop over rows
        codes, names = pd.factorize(pd.concat(cols, ignore_index=True))
        ids = frame["id"].astype(str).to_numpy(dtype=object)
        id_codes = codes[:n]
        repeated = np.bincount(id_codes, minlength=len(names))[id_codes] > 1
        if repeated.any():
            raise ValueError(f"pedigree has the id {ids[np.argmax(repeated)]!r} more than once")
        first = np.full(len(names), -1, dtype=np.int64)
        first[id_codes] = np.arange(n)
        blank = np.asarray(names, dtype=object) == ""

        def parents(col: str) -> np.ndarray:
            k = {"sire": 1, "dam": 2}[col]
            c = codes[k * n:(k + 1) * n]
            pos = np.where(blank[c], -1, first[c]).astype(np.int64)
            absent = (pos < 0) & ~blank[c]
            if absent.any():
                raise KeyError(f"{col} {names[c[np.argmax(absent)]]!r} is not an id of the pedigree")
            return pos

        return cls(ids=ids, sire=parents("sire"), dam=parents("dam"),
                   generation=frame["generation"].to_numpy(dtype=np.int64),
                   inbreeding=frame["inbreeding"].to_numpy(dtype=float))

    @classmethod
    def read_csv(cls, path) -> "Pedigree":
        """Read a ``pedigree.csv`` written by the pedigree stage."""
        frame = pd.read_csv(path, dtype={"id": str, "sire": str, "dam": str},
                            keep_default_na=False)
        return cls.from_frame(frame)

    def write_csv(self, path) -> None:
        """Write ``pedigree.csv`` (id, sire, dam, generation, inbreeding)."""
        self.to_frame().to_csv(path, index=False, float_format="%.10g")
