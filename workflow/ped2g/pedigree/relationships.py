"""Inbreeding coefficients, the additive relationship matrix A and its inverse.

Every function takes a pedigree in parents-first order: ``sire[i] < i`` and ``dam[i] < i``,
``-1`` for an unknown parent. The decomposition used throughout is

    A = T D T',   T = (I - P)^{-1},   D = diag(b),

where row ``i`` of ``P`` holds 1/2 in the columns of ``i``'s known parents and ``b_i`` is the
Mendelian-sampling variance coefficient (Mrode 2014, *Linear Models for the Prediction of Animal
Breeding Values*, 3rd edn, ch. 2, p. 25; Quaas 1976, *Biometrics* 32:949-953).

Assumptions (state them with any result built on these functions): founders -- animals with
unknown parents, including an unknown parent of a non-founder -- are unrelated, not inbred, and
drawn from one base population; inheritance is autosomal and additive.
"""

from __future__ import annotations

from collections.abc import Iterable

import numba
import numpy as np
import scipy.sparse as sp

from .core import Pedigree, mendelian_coefficients
from .recursion import down_kernel, up_kernel

__all__ = [
    "inbreeding",
    "relationship_inverse",
    "relationship_matrix",
    "log_det_relationship",
    "ancestors",
]


def _as_parent_arrays(sire, dam) -> tuple[np.ndarray, np.ndarray]:
    sire = np.ascontiguousarray(sire, dtype=np.int64)
    dam = np.ascontiguousarray(dam, dtype=np.int64)
    if sire.shape != dam.shape or sire.ndim != 1:
        raise ValueError("sire and dam must be one-dimensional arrays of the same length")
    pos = np.arange(len(sire))
    if np.any(sire >= pos) or np.any(dam >= pos):
        raise ValueError("sire and dam must list parents before offspring (sire[i] < i, dam[i] < i)")
    if np.any(sire < -1) or np.any(dam < -1):
        raise ValueError("unknown parents must be coded -1")
    return sire, dam


@numba.njit(cache=True)
def _inbreeding_kernel(sire, dam, pair):  # pragma: no cover - compiled
    """Meuwissen & Luo (1992) with generation buckets instead of a heap.

    ``pair[i]`` numbers the distinct (sire, dam) pairs with both parents known (-1 otherwise);
    full sibs share F, so each pair is traced once.
    """
    n = sire.shape[0]
    f = np.zeros(n)
    b = np.ones(n)
    gen = np.zeros(n, dtype=np.int64)
    maxgen = 0
    for i in range(n):
        g = -1
        s = sire[i]
        d = dam[i]
        if s >= 0 and gen[s] > g:
            g = gen[s]
        if d >= 0 and gen[d] > g:
            g = gen[d]
        gen[i] = g + 1
        if gen[i] > maxgen:
            maxgen = gen[i]
    npairs = 0
    for i in range(n):
        if pair[i] + 1 > npairs:
            npairs = pair[i] + 1
    pair_f = np.full(npairs, -1.0)
    lval = np.zeros(n)          # contribution of each ancestor (a row of T)
    inset = np.zeros(n, dtype=np.bool_)
    nxt = np.full(n, -1, dtype=np.int64)   # linked lists, one per generation
    head = np.full(maxgen + 1, -1, dtype=np.int64)
    for i in range(n):
        s = sire[i]
        d = dam[i]
        bi = 1.0
        if s >= 0:
            bi -= 0.25 * (1.0 + f[s])
        if d >= 0:
            bi -= 0.25 * (1.0 + f[d])
        b[i] = bi
        if s < 0 or d < 0:
            continue  # F = 0: an unknown parent is unrelated to the known one
        p = pair[i]
        if pair_f[p] >= 0.0:
            f[i] = pair_f[p]
            continue
        # a_ii = sum_j T_ij^2 b_j over i and its ancestors, youngest generation first
        acc = bi
        lval[s] += 0.5
        lval[d] += 0.5
        if not inset[s]:
            inset[s] = True
            nxt[s] = head[gen[s]]
            head[gen[s]] = s
        if not inset[d]:
            inset[d] = True
            nxt[d] = head[gen[d]]
            head[gen[d]] = d
        for g in range(gen[i] - 1, -1, -1):
            j = head[g]
            head[g] = -1
            while j >= 0:
                lj = lval[j]
                acc += lj * lj * b[j]
                for q in (sire[j], dam[j]):
                    if q >= 0:
                        lval[q] += 0.5 * lj
                        if not inset[q]:
                            inset[q] = True
                            nxt[q] = head[gen[q]]
                            head[gen[q]] = q
                k = nxt[j]
                lval[j] = 0.0
                inset[j] = False
                nxt[j] = -1
                j = k
        fi = acc - 1.0
        if fi < 0.0:
            fi = 0.0  # rounding only: F >= 0 exactly
        f[i] = fi
        pair_f[p] = fi
    return f


def _pair_codes(sire: np.ndarray, dam: np.ndarray) -> np.ndarray:
    n = len(sire)
    both = (sire >= 0) & (dam >= 0)
    pair = np.full(n, -1, dtype=np.int64)
    if both.any():
        key = sire[both] * np.int64(n + 1) + dam[both]
        _, codes = np.unique(key, return_inverse=True)
        pair[both] = codes.ravel()
    return pair


def inbreeding(sire, dam) -> np.ndarray:
    """Wright's inbreeding coefficient of every animal.

    Parameters
    ----------
    sire, dam : array_like of int, shape (n,)
        Parent positions in parents-first order (``sire[i] < i``, ``dam[i] < i``); -1 = unknown.

    Returns
    -------
    numpy.ndarray of float, shape (n,)
        ``F_i = a_ii - 1`` where ``a_ii = sum_j T_ij^2 b_j`` over ``i`` and its ancestors ``j``
        (``A = T D T'``), with ``b_j = 1 - (1 + F_s)/4 [s known] - (1 + F_d)/4 [d known]``.

    Notes
    -----
    Meuwissen & Luo (1992, *Genet. Sel. Evol.* 24:305-313): for each animal, the row of ``T``
    is accumulated over its ancestors, youngest first, so each ancestor's entry is complete
    before it is passed to its parents. Ancestors are bucketed by generation number (a parent
    is always in an earlier generation than its offspring), which makes each animal's cost
    linear in its number of ancestors. Animals with an unknown parent have ``F = 0``; full sibs
    share ``F``, so each (sire, dam) pair is traced once. Selfing (``sire == dam``) is exact:
    the parent receives both halves, giving ``F = (1 + F_parent)/2``.

    Cost: the sum over distinct parent pairs of their number of ancestors. Measured on a
    shared 2-core machine: 10^6 animals over 10 overlapping generations (the benchmark
    pedigree) about 0.7 s; a closed population of 1000 traced for 30 generations
    (3 x 10^4 animals) 1.7 s of CPU, and for 100 generations (10^5 animals, each descending
    from nearly every earlier one) 39 s of CPU -- deep closed pedigrees grow faster than
    linearly.
    """
    sire, dam = _as_parent_arrays(sire, dam)
    if len(sire) == 0:
        return np.zeros(0)
    return _inbreeding_kernel(sire, dam, _pair_codes(sire, dam))


def relationship_inverse(ped: Pedigree) -> sp.csr_matrix:
    """The inverse of the additive relationship matrix, built directly from the pedigree.

    Parameters
    ----------
    ped : Pedigree
        Clean pedigree with inbreeding coefficients.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (n, n)
        ``A^{-1} = (I - P)' D^{-1} (I - P)``, rows and columns in ``ped`` order.

    Notes
    -----
    Henderson (1976, *Biometrics* 32:69-83) rules with Quaas (1976) inbreeding: with
    ``alpha_i = 1/b_i``, add ``alpha_i`` to (i, i), ``-alpha_i/2`` to (i, p) and (p, i) for each
    known parent ``p``, and ``alpha_i/4`` to (p, p') for every ordered pair of known parents
    (Mrode 2014, p. 27). The contributions are COO triplets that are summed on conversion, which
    also makes selfing (``s = d``) exact.
    """
    n = ped.n
    sire = np.asarray(ped.sire, dtype=np.int64)
    dam = np.asarray(ped.dam, dtype=np.int64)
    alpha = 1.0 / mendelian_coefficients(sire, dam, ped.inbreeding)
    i = np.arange(n, dtype=np.int64)
    rows = [i]
    cols = [i]
    vals = [alpha]
    parents = []
    for par in (sire, dam):
        known = par >= 0
        parents.append((known, par))
        k = i[known]
        p = par[known]
        a = alpha[known]
        rows += [k, p]
        cols += [p, k]
        vals += [-0.5 * a, -0.5 * a]
    for known1, p1 in parents:
        for known2, p2 in parents:
            both = known1 & known2
            rows.append(p1[both])
            cols.append(p2[both])
            vals.append(0.25 * alpha[both])
    m = sp.coo_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(n, n))
    out = m.tocsr()
    out.sum_duplicates()
    out.sort_indices()
    return out


def ancestors(ped: Pedigree, positions: Iterable[int] | np.ndarray) -> np.ndarray:
    """Boolean mask of the given animals and all their ancestors.

    One backward pass over the parents-first order: an animal is marked if it was given or if
    one of its offspring is marked.
    """
    pos = np.asarray(list(positions) if not isinstance(positions, np.ndarray) else positions,
                     dtype=np.int64)
    mark = np.zeros(ped.n, dtype=np.bool_)
    mark[pos] = True
    return _mark_ancestors(np.asarray(ped.sire, np.int64), np.asarray(ped.dam, np.int64), mark)


@numba.njit(cache=True)
def _mark_ancestors(sire, dam, mark):  # pragma: no cover - compiled
    for i in range(sire.shape[0] - 1, -1, -1):
        if mark[i]:
            if sire[i] >= 0:
                mark[sire[i]] = True
            if dam[i] >= 0:
                mark[dam[i]] = True
    return mark


def _tdt_columns(sire: np.ndarray, dam: np.ndarray, b: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Overwrite ``rhs`` (n, k) with ``T D T' rhs``: the pedigree's recursion up (``T'``), the
    scaling by ``b`` and the recursion down (``T``), in place (:mod:`ped2g.pedigree.recursion`).
    Parents are positions, -1 when unknown."""
    n = len(sire)
    s = np.where(sire >= 0, sire, n).astype(np.int64)
    d = np.where(dam >= 0, dam, n).astype(np.int64)
    batch = rhs.reshape((1, *rhs.shape))
    up_kernel(batch, s, d)
    batch *= b[None, :, None]
    down_kernel(batch, s, d, batch)
    return rhs


def relationship_matrix(ped: Pedigree, subset=None, *, memory_budget: float = 1.0e8) -> np.ndarray:
    """Dense additive relationship matrix A, or its block ``A[subset][:, subset]``.

    Parameters
    ----------
    ped : Pedigree
        Clean pedigree with inbreeding coefficients.
    subset : sequence of int or of str, optional
        Positions (integers) or identifiers (strings) of the animals wanted, in the order
        wanted. ``None`` means every animal.
    memory_budget : float
        Bytes of working memory to use beyond the result (columns are done in blocks).

    Returns
    -------
    numpy.ndarray, shape (k, k)
        ``a_ij`` = twice the coancestry of ``i`` and ``j`` (Wright 1922); ``a_ii = 1 + F_i``.

    Notes
    -----
    Only the wanted animals and their ancestors matter, so the pedigree is first restricted to
    them (``m`` animals). Columns of ``A = T D T'`` are then formed in blocks by one sweep up
    and one sweep down the pedigree per block (``(I - P)' x = e``, then ``(I - P) y = D x``),
    costing ``O(m k)`` time and ``O(m * block)`` memory -- never ``O(m^2)`` unless asked for
    all animals.
    """
    if subset is None:
        want = np.arange(ped.n, dtype=np.int64)
    else:
        items = list(subset)
        if items and isinstance(items[0], str):
            index = ped.index
            missing = [x for x in items if x not in index]
            if missing:
                raise KeyError(f"animals not in the pedigree: {missing[:5]}")
            want = np.array([index[x] for x in items], dtype=np.int64)
        else:
            want = np.asarray(items, dtype=np.int64)
        if want.size and (want.min() < 0 or want.max() >= ped.n):
            raise IndexError("subset positions outside the pedigree")
    k = len(want)
    if k == 0:
        return np.zeros((0, 0))
    sire = np.asarray(ped.sire, dtype=np.int64)
    dam = np.asarray(ped.dam, dtype=np.int64)
    b = ped.mendelian
    if subset is not None:
        keep = ancestors(ped, want)
        if not keep.all():
            new_pos = np.cumsum(keep) - 1
            sub_s = sire[keep]
            sub_d = dam[keep]
            sire = np.where(sub_s >= 0, new_pos[np.maximum(sub_s, 0)], -1)
            dam = np.where(sub_d >= 0, new_pos[np.maximum(sub_d, 0)], -1)
            b = b[keep]
            want = new_pos[want]
    m = len(sire)
    block = int(max(1, min(k, memory_budget // (8 * m))))
    out = np.empty((k, k))
    for start in range(0, k, block):
        cols = want[start:start + block]
        rhs = np.zeros((m, len(cols)))
        rhs[cols, np.arange(len(cols))] = 1.0
        _tdt_columns(sire, dam, b, rhs)
        out[:, start:start + block] = rhs[want]
    # symmetrise in place, one band at a time (columns were formed separately, so the two
    # triangles can differ by rounding); avoids two k x k temporaries
    band_rows = int(max(1, min(k, memory_budget // (24 * k))))
    for start in range(0, k, band_rows):
        band = slice(start, start + band_rows)
        avg = 0.5 * (out[band, :] + out[:, band].T)
        out[band, :] = avg
        out[:, band] = avg.T
    return out


def log_det_relationship(ped: Pedigree) -> float:
    """``log det A = sum_i log b_i`` (A = T D T' with det T = 1; Quaas 1976)."""
    return float(np.sum(np.log(ped.mendelian)))
