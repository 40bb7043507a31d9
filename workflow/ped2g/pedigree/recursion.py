"""The one recursion down a pedigree (``T m``) and its transpose up it (``T' g``).

With ``P`` holding 1/2 at each known parent and the animals in an order where every parent comes
before its offspring (the order of a :class:`~ped2g.pedigree.core.Pedigree`, or the generation
order of the latent engine)::

    (T m)_i  = m_i + ((T m)_sire(i) + (T m)_dam(i)) / 2          (i = 1, ..., n)
    (T' g)_i = g_i + sum over offspring c of i of (T' g)_c / 2    (i = n, ..., 1)

``T = (I - P)^{-1}``, and ``A = T D T'`` with ``D`` the Mendelian-sampling coefficients (Mrode
2014, *Linear Models for the Prediction of Animal Breeding Values*, 3rd ed., p. 25; Quaas 1976,
*Biometrics* 32:949-953; docs/methods.md §1.3). So breeding values are the recursion applied to
Mendelian-sampling deviations: with ``m_i ~ N(0, b_i G)`` independent, ``a = T m`` has
``cov(a_i, a_j) = a_ij G``. Both passes are O(animals x columns), one pass each.

The kernels (numba) take a batch of shape (B, n, t) and parents as positions with ``n`` for an
unknown parent; :func:`down_kernel` writes into ``out`` (which may be ``m`` itself: each row reads
only its own term and rows already final), :func:`up_kernel` works in place. A parent that does not come before its offspring is a ValueError.
Users: the simulator (:mod:`ped2g.simulate.breeding_values`), the latent engine's breeding values
and its PyTensor Op (:mod:`ped2g.fit.pedigree_op`).
"""

from __future__ import annotations

import numba
import numpy as np

from .core import Pedigree

__all__ = ["down", "up", "down_kernel", "up_kernel", "down_matrix", "up_matrix", "parent_positions"]


@numba.njit(cache=True)
def down_kernel(m, sire, dam, out):
    """``out[b] = T m[b]``: each row its own term plus half the sum of its known parents' rows."""
    B, n, t = m.shape
    for i in range(n):
        s, d = sire[i], dam[i]
        if (s < n and s >= i) or (d < n and d >= i):
            raise ValueError("pedigree order: a parent does not come before its offspring")
        for b in range(B):
            for j in range(t):
                if s < n and d < n:
                    out[b, i, j] = m[b, i, j] + 0.5 * (out[b, s, j] + out[b, d, j])
                elif s < n:
                    out[b, i, j] = m[b, i, j] + 0.5 * out[b, s, j]
                elif d < n:
                    out[b, i, j] = m[b, i, j] + 0.5 * out[b, d, j]
                else:
                    out[b, i, j] = m[b, i, j]
    return out


@numba.njit(cache=True)
def up_kernel(out, sire, dam):
    """``out[b] <- T' out[b]`` in place: offspring pass half of their (already complete) row to
    each known parent."""
    B, n, t = out.shape
    for i in range(n - 1, -1, -1):
        s, d = sire[i], dam[i]
        if (s < n and s >= i) or (d < n and d >= i):
            raise ValueError("pedigree order: a parent does not come before its offspring")
        for b in range(B):
            for j in range(t):
                h = 0.5 * out[b, i, j]
                if s < n:
                    out[b, s, j] += h
                if d < n:
                    out[b, d, j] += h
    return out


@numba.njit(cache=True)
def down_matrix(m, sire, dam):
    """``T m`` for one matrix m (n, t) (the latent engine's Op)."""
    m3 = np.ascontiguousarray(m).reshape((1, m.shape[0], m.shape[1]))
    return down_kernel(m3, sire, dam, np.empty_like(m3))[0]


@numba.njit(cache=True)
def up_matrix(g, sire, dam):
    """``T' g`` for one matrix g (n, t) (the gradient of the latent engine's Op)."""
    return up_kernel(g.copy().reshape((1, g.shape[0], g.shape[1])), sire, dam)[0]


def parent_positions(ped: Pedigree) -> tuple[np.ndarray, np.ndarray]:
    """Sire and dam positions of a pedigree with ``n`` (not -1) for an unknown parent."""
    n = ped.n
    sire = np.where(ped.sire >= 0, ped.sire, n).astype(np.int64)
    dam = np.where(ped.dam >= 0, ped.dam, n).astype(np.int64)
    return sire, dam


def down(ped: Pedigree, m: np.ndarray, in_place: bool = False) -> np.ndarray:
    """``T m`` in pedigree order for ``m`` of shape (..., n, t); with ``in_place`` (and ``m`` a
    C-contiguous float64 array) the result overwrites ``m``."""
    m = np.asarray(m, dtype=np.float64)
    if m.ndim < 2:
        raise ValueError(f"the recursion needs arrays (..., animals, columns), got shape {m.shape}")
    batch = np.ascontiguousarray(m).reshape((-1, *m.shape[-2:]))
    target = batch if in_place and np.shares_memory(batch, m) else np.empty_like(batch)
    sire, dam = parent_positions(ped)
    return down_kernel(batch, sire, dam, target).reshape(m.shape)


def up(ped: Pedigree, g: np.ndarray) -> np.ndarray:
    """``T' g`` in pedigree order for ``g`` of shape (..., n, t)."""
    g = np.asarray(g, dtype=np.float64)
    if g.ndim < 2:
        raise ValueError(f"the recursion needs arrays (..., animals, columns), got shape {g.shape}")
    sire, dam = parent_positions(ped)
    return up_kernel(g.reshape((-1, *g.shape[-2:])).copy(), sire, dam).reshape(g.shape)
