"""Sparse LDL' factorisation of a symmetric positive definite matrix with a fixed pattern, and its
selected inverse (docs/methods.md §2.14).

The sparse engine factorises the coefficient matrix of Henderson's mixed-model equations once per
log-likelihood evaluation; the pattern never changes between evaluations, only the values. So the
work is split:

* :func:`fill_reducing_order` -- a minimum-degree ordering (SuperLU's multiple minimum degree on
  the pattern of ``A + A'``, through ``scipy.sparse.linalg.splu``; George & Liu 1989 [M]) of a
  symmetric pattern; computed once.
* :func:`symbolic` -- once per pattern: the elimination tree, the column pointers and the row
  indices of ``L`` (rows sorted within each column).
* :func:`ldl_numeric` -- per evaluation: ``C = L D L'`` with ``L`` unit lower triangular, by the
  up-looking (row by row) algorithm: row ``k`` of ``L`` solves a triangular system whose pattern
  is the set of nodes reached from the pattern of column ``k`` of the upper triangle of ``C`` by
  walking up the elimination tree (Liu 1990 [M]; Davis, *Direct Methods for Sparse Linear
  Systems*, SIAM 2006, ch. 4 [M]).
* :func:`ldl_solve`, the log-determinant ``sum log d_k``, and :func:`selected_inverse`: the
  entries of ``C^-1`` on the pattern of ``L + L'`` from Takahashi's equations
  (Takahashi, Fagan & Chin 1973 [M]; Erisman & Tinney 1975 [M])::

      Z = D^-1 L^-1 + (I - L') Z,   so for j = n-1, ..., 0:
      Z_ij = - sum_{k in L(j)} L_kj Z_ik          (i in L(j), the row pattern of column j below j)
      Z_jj = 1/d_j - sum_{k in L(j)} L_kj Z_kj

  Every ``Z_ik`` needed lies on the pattern of ``L + L'`` (the rows of a column of ``L`` form a
  clique in the filled graph), so no dense inverse is ever formed.

Matrices come in as the upper triangle (diagonal included) in compressed sparse column form with
rows sorted within each column, already permuted: ``Cp`` (n+1), ``Ci`` (rows), ``Cx`` (values).
"""

from __future__ import annotations

import math

import numba
import numpy as np
import scipy.sparse as sp


def fill_reducing_order(pattern: sp.spmatrix) -> np.ndarray:
    """A minimum-degree ordering of the symmetric pattern ``pattern`` (n x n).

    Returns ``perm`` with ``perm[j]`` the original index placed at position j. SuperLU's column
    ordering (multiple minimum degree on ``A + A'``) is computed by ``splu`` before it factorises;
    the values given to ``splu`` are those of a diagonally dominant matrix with the same pattern, so
    the factorisation itself (which is discarded) needs no pivoting.
    """
    P = sp.csc_matrix(pattern, dtype=float)
    n = P.shape[0]
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    P = abs(P) + abs(P.T)
    P.data[:] = -1.0
    P.setdiag(0.0)
    P.eliminate_zeros()
    degree = np.asarray(abs(P).sum(axis=1)).ravel()
    P = (P + sp.diags(degree + 1.0)).tocsc()
    import scipy.sparse.linalg as spla

    lu = spla.splu(P, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                   options={"SymmetricMode": True})
    # SuperLU's perm_c gives the new position of each original column; invert it.
    return np.argsort(np.asarray(lu.perm_c)).astype(np.int64)


def upper_csc(M: sp.spmatrix) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The upper triangle of symmetric ``M`` (diagonal included) as (Cp, Ci, Cx), rows sorted."""
    U = sp.triu(sp.csc_matrix(M), format="csc")
    U.sum_duplicates()
    U.sort_indices()
    return U.indptr.astype(np.int64), U.indices.astype(np.int64), U.data.astype(np.float64)


@numba.njit(cache=True)
def _symbolic(n, Cp, Ci):
    parent = np.full(n, -1, dtype=np.int64)
    flag = np.empty(n, dtype=np.int64)
    count = np.zeros(n, dtype=np.int64)
    for k in range(n):
        flag[k] = k
        for p in range(Cp[k], Cp[k + 1]):
            i = Ci[p]
            if i < k:
                while flag[i] != k:
                    if parent[i] == -1:
                        parent[i] = k
                    count[i] += 1
                    flag[i] = k
                    i = parent[i]
    Lp = np.zeros(n + 1, dtype=np.int64)
    for k in range(n):
        Lp[k + 1] = Lp[k] + count[k]
    Li = np.empty(Lp[n], dtype=np.int64)
    fill = Lp[:n].copy()
    for k in range(n):
        flag[k] = -1
    # Second pass: row k of L is the set of nodes reached from the pattern of column k; rows are
    # appended in increasing k, so each column's rows come out sorted.
    for k in range(n):
        flag[k] = k
        for p in range(Cp[k], Cp[k + 1]):
            i = Ci[p]
            if i < k:
                while flag[i] != k:
                    Li[fill[i]] = k
                    fill[i] += 1
                    flag[i] = k
                    i = parent[i]
    return parent, Lp, Li


def symbolic(Cp: np.ndarray, Ci: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(parent, Lp, Li): elimination tree and the pattern of ``L`` (strictly lower part)."""
    n = len(Cp) - 1
    return _symbolic(n, np.asarray(Cp, dtype=np.int64), np.asarray(Ci, dtype=np.int64))


@numba.njit(cache=True)
def ldl_numeric(Cp, Ci, Cx, parent, Lp, Li, Lx, D):
    """Fill ``Lx`` (aligned with ``Li``) and ``D`` so that ``C = L D L'``.

    Returns n on success, or the first k with ``d_k <= 0`` (C not positive definite; ``Lx`` and
    ``D`` are then incomplete).
    """
    n = len(Cp) - 1
    Y = np.zeros(n)
    pattern = np.empty(n, dtype=np.int64)
    flag = np.empty(n, dtype=np.int64)
    lnz = np.zeros(n, dtype=np.int64)
    for k in range(n):
        top = n
        flag[k] = k
        Y[k] = 0.0
        for p in range(Cp[k], Cp[k + 1]):
            i = Ci[p]
            Y[i] += Cx[p]
            ln = 0
            while flag[i] != k:
                pattern[ln] = i
                ln += 1
                flag[i] = k
                i = parent[i]
            while ln > 0:
                top -= 1
                ln -= 1
                pattern[top] = pattern[ln]
        dk = Y[k]
        Y[k] = 0.0
        for q in range(top, n):
            i = pattern[q]
            yi = Y[i]
            Y[i] = 0.0
            p2 = Lp[i] + lnz[i]
            for p in range(Lp[i], p2):
                Y[Li[p]] -= Lx[p] * yi
            lki = yi / D[i]
            dk -= lki * yi
            Lx[p2] = lki
            lnz[i] += 1
        if not dk > 0.0:
            return k
        D[k] = dk
    return n


@numba.njit(cache=True)
def ldl_solve(Lp, Li, Lx, D, b):
    """Solve ``L D L' x = b`` in place (b is overwritten with x; also returned)."""
    n = len(D)
    for j in range(n):
        bj = b[j]
        for p in range(Lp[j], Lp[j + 1]):
            b[Li[p]] -= Lx[p] * bj
    for j in range(n):
        b[j] /= D[j]
    for j in range(n - 1, -1, -1):
        s = b[j]
        for p in range(Lp[j], Lp[j + 1]):
            s -= Lx[p] * b[Li[p]]
        b[j] = s
    return b


@numba.njit(cache=True)
def log_det(D):
    s = 0.0
    for k in range(len(D)):
        s += math.log(D[k])
    return s


@numba.njit(cache=True)
def selected_inverse(Lp, Li, Lx, D, Zx, Zd):
    """Entries of ``C^-1`` on the pattern of L (Takahashi's equations; module docstring).

    ``Zx`` (aligned with ``Li``: entry (Li[p], j) of the inverse for p in column j) and ``Zd`` (the
    diagonal) are filled in place.
    """
    n = len(D)
    mark = np.full(n, -1, dtype=np.int64)
    acc = np.zeros(n)
    for j in range(n - 1, -1, -1):
        lo, hi = Lp[j], Lp[j + 1]
        m = hi - lo
        for a in range(m):
            mark[Li[lo + a]] = a
            acc[a] = 0.0
        for a in range(m):
            k = Li[lo + a]
            lkj = Lx[lo + a]
            acc[a] += lkj * Zd[k]
            for p in range(Lp[k], Lp[k + 1]):
                b = mark[Li[p]]
                if b >= 0:
                    z = Zx[p]                    # Z[i, k], i = Li[p] > k
                    acc[b] += lkj * z            # L_kj Z_ik towards Z_ij
                    acc[a] += Lx[lo + b] * z     # L_ij Z_ki towards Z_kj
        dj = 1.0 / D[j]
        for a in range(m):
            Zx[lo + a] = -acc[a]
            dj -= Lx[lo + a] * Zx[lo + a]
            mark[Li[lo + a]] = -1
        Zd[j] = dj


class Factor:
    """Symbolic analysis of a fixed symmetric pattern with numeric factorisation on demand.

    Parameters
    ----------
    Cp, Ci
        Upper triangle (diagonal included) of the already permuted matrix, CSC, rows sorted.
    """

    def __init__(self, Cp: np.ndarray, Ci: np.ndarray):
        self.Cp = np.asarray(Cp, dtype=np.int64)
        self.Ci = np.asarray(Ci, dtype=np.int64)
        self.n = len(self.Cp) - 1
        self.parent, self.Lp, self.Li = symbolic(self.Cp, self.Ci)
        self.Lx = np.empty(len(self.Li))
        self.D = np.empty(self.n)

    @property
    def nnz(self) -> int:
        """Non-zeros of L including its unit diagonal."""
        return int(len(self.Li) + self.n)

    def factor(self, Cx: np.ndarray) -> bool:
        """Numeric factorisation for the values ``Cx``; False if the matrix is not positive definite."""
        return ldl_numeric(self.Cp, self.Ci, np.asarray(Cx, dtype=np.float64), self.parent, self.Lp, self.Li,
                           self.Lx, self.D) == self.n

    def solve(self, b: np.ndarray) -> np.ndarray:
        x = np.array(b, dtype=np.float64)
        if x.ndim == 1:
            return ldl_solve(self.Lp, self.Li, self.Lx, self.D, x)
        for j in range(x.shape[1]):
            x[:, j] = ldl_solve(self.Lp, self.Li, self.Lx, self.D, np.ascontiguousarray(x[:, j]))
        return x

    def log_det(self) -> float:
        return float(log_det(self.D))

    def selected_inverse(self) -> tuple[np.ndarray, np.ndarray]:
        """(Zx, Zd): the inverse on L's strictly lower pattern (aligned with ``Li``) and its diagonal."""
        Zx = np.empty(len(self.Li))
        Zd = np.empty(self.n)
        selected_inverse(self.Lp, self.Li, self.Lx, self.D, Zx, Zd)
        return Zx, Zd

    def lower_matrix(self, Zx: np.ndarray, Zd: np.ndarray) -> sp.csc_matrix:
        """Values aligned with L's pattern as a lower-triangular sparse matrix (diagonal ``Zd``)."""
        cols = np.repeat(np.arange(self.n), np.diff(self.Lp))
        return (sp.csc_matrix((Zx, (self.Li, cols)), shape=(self.n, self.n)) + sp.diags(Zd)).tocsc()
