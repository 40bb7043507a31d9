"""A plain summary of a clean pedigree and of the changes made while cleaning it."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .core import Pedigree

__all__ = ["summarise", "DEFINITIONS"]

DEFINITIONS = {
    "founders": "animals with both parents unknown",
    "full_sib_families": "distinct (sire, dam) pairs, both known, with two or more offspring",
    "paternal_half_sib_families": "sires with two or more offspring that do not all share one "
                                  "known dam (offspring with an unknown dam count as half sibs)",
    "maternal_half_sib_families": "dams with two or more offspring that do not all share one "
                                  "known sire",
    "max_generation": "largest generation number; founders are generation 0 and every other "
                      "animal is one more than the larger generation number of its known parents",
    "inbred_animals": "animals with inbreeding coefficient F > 1e-12",
    "inbreeding": "Wright's F relative to the founders, who are assumed unrelated and not "
                  "inbred; unknown parents are treated as founders, so F is a lower bound "
                  "when the pedigree is shallow or has many unknown parents",
}


def _half_sib_families(parent: np.ndarray, mate: np.ndarray) -> int:
    """Parents with >= 2 offspring that are not all by one known mate."""
    known = parent >= 0
    p = parent[known]
    m = mate[known]
    if p.size == 0:
        return 0
    offspring = np.bincount(p)
    frame = pd.DataFrame({"p": p, "m": m})
    # an unknown mate (-1) makes each such offspring a half sib of the others: count separately
    frame.loc[frame["m"] < 0, "m"] = -1 - np.arange(int((frame["m"] < 0).sum()))
    mates = frame.drop_duplicates().groupby("p").size()
    several = mates[mates >= 2].index.to_numpy()
    return int(np.count_nonzero(offspring[several] >= 2))


def summarise(ped: Pedigree, changes: pd.DataFrame) -> dict[str, Any]:
    """Counts and inbreeding statistics of a pedigree, and the cleaning changes by kind.

    Parameters
    ----------
    ped : Pedigree
        The clean pedigree.
    changes : pandas.DataFrame
        The changes table (columns row, id, problem, action) from the cleaning step.

    Returns
    -------
    dict
        ``animals``, ``founders``, ``both_parents_known``, ``one_parent_known``,
        ``no_parent_known``, ``max_generation``, ``full_sib_families``,
        ``paternal_half_sib_families``, ``maternal_half_sib_families``, ``half_sib_families``
        (their sum), ``mean_inbreeding``, ``max_inbreeding``, ``inbred_animals``,
        ``changes`` (count by problem) and ``definitions`` (what each count means).
    """
    sire = np.asarray(ped.sire)
    dam = np.asarray(ped.dam)
    f = np.asarray(ped.inbreeding, dtype=float)
    n_known = (sire >= 0).astype(int) + (dam >= 0).astype(int)
    both = n_known == 2
    if both.any():
        pairs = pd.Series(sire[both] * np.int64(ped.n + 1) + dam[both])
        full_sib = int((pairs.value_counts() >= 2).sum())
    else:
        full_sib = 0
    paternal = _half_sib_families(sire, dam)
    maternal = _half_sib_families(dam, sire)
    by_kind = {} if changes is None or len(changes) == 0 else {
        str(k): int(v) for k, v in changes["problem"].value_counts(sort=False).items()}
    return {
        "animals": int(ped.n),
        "founders": int(np.count_nonzero(n_known == 0)),
        "both_parents_known": int(np.count_nonzero(both)),
        "one_parent_known": int(np.count_nonzero(n_known == 1)),
        "no_parent_known": int(np.count_nonzero(n_known == 0)),
        "max_generation": int(ped.generation.max(initial=0)),
        "full_sib_families": full_sib,
        "paternal_half_sib_families": paternal,
        "maternal_half_sib_families": maternal,
        "half_sib_families": paternal + maternal,
        "mean_inbreeding": float(f.mean()) if f.size else 0.0,
        "max_inbreeding": float(f.max()) if f.size else 0.0,
        "inbred_animals": int(np.count_nonzero(f > 1e-12)),
        "changes": dict(sorted(by_kind.items())),
        "changes_total": int(0 if changes is None else len(changes)),
        "definitions": DEFINITIONS,
    }
