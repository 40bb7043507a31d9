"""Exact pruning: keep only the part of a pedigree that is informative about given animals.

Used by the later stages to shrink a study pedigree to the phenotyped animals of one
population before a model is fitted.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from ..errors import UserError
from .clean import order_parents_first
from .core import Pedigree
from .relationships import ancestors, inbreeding

__all__ = ["prune"]


def prune(ped: Pedigree, keep_ids: Iterable[str]) -> Pedigree:
    """The smallest pedigree that gives the kept animals the same joint distribution of breeding values.

    Parameters
    ----------
    ped : Pedigree
        A clean pedigree.
    keep_ids : iterable of str
        Identifiers that must be kept (typically the phenotyped animals). Every one must be in
        ``ped``.

    Returns
    -------
    Pedigree
        Parents-first, with generation numbers and inbreeding recomputed. Kept: every animal in
        ``keep_ids`` and the ancestors that link them, except founders that are not in
        ``keep_ids`` and have a single offspring link.

    Notes
    -----
    Two rules are applied until neither changes anything:

    1. an animal not in ``keep_ids`` with no offspring is dropped (this leaves ``keep_ids`` and
       their ancestors);
    2. a founder not in ``keep_ids`` that is a parent in exactly one parent link is dropped and
       that offspring's parent becomes unknown.

    Rule 2 is exact because a founder's breeding value ``u_f ~ N(0, sigma^2)`` is independent
    of everything except its one offspring ``c``, whose value ``u_c = u_f/2 + u_o/2 + m_c``
    (``m_c`` the Mendelian sampling term, variance ``(1/2 - F_o/4) sigma^2``) then equals
    ``u_o/2 + m'_c`` with ``m'_c = u_f/2 + m_c`` of variance ``(3/4 - F_o/4) sigma^2``: exactly
    the one-parent-known Mendelian coefficient (Mrode 2014, p. 25). The relationships among the
    remaining animals, and their inbreeding, are therefore unchanged. A founder that selfed
    (two links to one offspring) is kept: dropping it would lose the offspring's inbreeding.
    """
    keep_ids = list(keep_ids)
    index = ped.index
    missing = [x for x in keep_ids if x not in index]
    if missing:
        shown = ", ".join(repr(x) for x in missing[:5])
        more = f" and {len(missing) - 5} more" if len(missing) > 5 else ""
        raise UserError(f"{len(missing)} animal(s) to keep are not in the pedigree: {shown}{more}; "
                        "check that the phenotype ids match the pedigree ids")
    wanted = np.zeros(ped.n, dtype=np.bool_)
    wanted[np.array([index[x] for x in keep_ids], dtype=np.int64)] = True
    sire = np.asarray(ped.sire, dtype=np.int64).copy()
    dam = np.asarray(ped.dam, dtype=np.int64).copy()
    alive = ancestors(ped, np.flatnonzero(wanted))  # rule 1 (all at once)
    while True:
        ks = (sire >= 0) & alive
        kd = (dam >= 0) & alive
        links = (np.bincount(sire[ks], minlength=ped.n) + np.bincount(dam[kd], minlength=ped.n))
        drop = alive & ~wanted & (sire < 0) & (dam < 0) & (links == 1)
        if not drop.any():
            break
        alive &= ~drop
        sire[ks & drop[np.maximum(sire, 0)]] = -1
        dam[kd & drop[np.maximum(dam, 0)]] = -1
    new_pos = np.cumsum(alive) - 1
    s = sire[alive]
    d = dam[alive]
    s = np.where(s >= 0, new_pos[np.maximum(s, 0)], -1)
    d = np.where(d >= 0, new_pos[np.maximum(d, 0)], -1)
    order, generation = order_parents_first(s, d)
    assert order is not None  # a sub-pedigree of a valid pedigree has no cycle
    pos = np.empty(len(s), dtype=np.int64)
    pos[order] = np.arange(len(s))
    s2 = s[order]
    d2 = d[order]
    s2 = np.where(s2 >= 0, pos[np.maximum(s2, 0)], -1)
    d2 = np.where(d2 >= 0, pos[np.maximum(d2, 0)], -1)
    return Pedigree(ids=np.asarray(ped.ids, dtype=object)[alive][order], sire=s2, dam=d2,
                    generation=generation[order], inbreeding=inbreeding(s2, d2))
