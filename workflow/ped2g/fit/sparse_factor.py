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


# ------------------------------------------------------------------------------------------------
# supernodal kernels (docs/methods.md §2.14): the same L, D and selected inverse, stored exactly as
# above (CSC aligned with Li), computed a supernode at a time with small dense kernels
# ------------------------------------------------------------------------------------------------

#: Floating-point licence of the dense loops: sums may be reassociated (so they vectorise) and
#: multiply-adds fused; no assumption about NaN or infinity (the positivity checks stay exact).
_SUMS = {"reassoc", "contract"}
#: Columns of a supernode handled together (factorisation and selected inverse), and the size
#: (product of the three dimensions) above which a product of two panels goes to BLAS.
_CHUNK = 48
_DENSE_PRODUCT = 1 << 16
#: Side of the square tiles in which a gathered symmetric block is mirrored.
_TILE = 32


def supernodes(parent: np.ndarray, Lp: np.ndarray) -> np.ndarray:
    """Start column of each fundamental-type supernode, then n: column j+1 joins j's supernode when
    j+1 is j's parent and column j's row pattern is j+1 followed by column j+1's pattern (equal
    counts suffice, as the pattern of a column minus its parent lies in the parent's pattern)."""
    n = len(Lp) - 1
    if n == 0:
        return np.zeros(1, dtype=np.int64)
    cnt = np.diff(np.asarray(Lp, dtype=np.int64))
    join = (np.asarray(parent[:-1]) == np.arange(1, n)) & (cnt[:-1] == cnt[1:] + 1)
    return np.concatenate([[0], np.flatnonzero(~join) + 1, [n]]).astype(np.int64)


@numba.njit(cache=True)
def _column_supernode(snode, n):
    col_sn = np.empty(n, dtype=np.int64)
    for J in range(len(snode) - 1):
        for j in range(snode[J], snode[J + 1]):
            col_sn[j] = J
    return col_sn


@numba.njit(cache=True)
def _widths(snode, Lp):
    """(max s, max m) over supernodes (s columns, m rows below): the bounds of the dense work
    arrays, which are allocated once per call rather than once per supernode (at 10^5 animals,
    allocating them per supernode cost more page faults than the arithmetic took)."""
    maxs = 1
    maxm = 1
    for J in range(len(snode) - 1):
        w = snode[J + 1] - snode[J]
        maxs = max(maxs, w)
        maxm = max(maxm, Lp[snode[J] + 1] - Lp[snode[J]] - (w - 1))
    return maxs, maxm


@numba.njit(cache=True)
def _panel_sizes(snode, Lp):
    """(max s*(s+m), max m*m) over supernodes (s columns, m rows below)."""
    big = 0
    bigr = 0
    for J in range(len(snode) - 1):
        c0, c1 = snode[J], snode[J + 1]
        s = c1 - c0
        m = Lp[c0 + 1] - Lp[c0] - (s - 1)
        if s * (s + m) > big:
            big = s * (s + m)
        if m * m > bigr:
            bigr = m * m
    return big, bigr


@numba.njit(cache=True)
def _unit_lower_inverse(Lc, out):
    """``out`` = the inverse of the unit lower triangular matrix whose entries below the diagonal are
    those of ``Lc`` (its diagonal and upper triangle are not read), by forward substitution."""
    w = Lc.shape[0]
    for x in range(w):
        for y in range(x):
            v = -Lc[x, y]
            for z in range(y + 1, x):
                v -= Lc[x, z] * out[z, y]
            out[x, y] = v
        out[x, x] = 1.0
        for y in range(x + 1, w):
            out[x, y] = 0.0


@numba.njit(cache=True, fastmath=_SUMS)
def ldl_supernodal(Cp, Ci, Cx, snode, Lp, Li, Lx, D):
    """``C = L D L'`` a supernode at a time (left-looking): ``C`` here is the *lower* triangle
    (diagonal included) in CSC, ``Lp``/``Li`` its symbolic factor and ``snode`` from
    :func:`supernodes`. Fills ``Lx`` and ``D`` exactly as :func:`ldl_numeric`; returns n, or the first
    k with ``d_k <= 0``.

    A supernode J (columns c0..c1-1, rows R below) is a dense panel P (column a, local row r: the
    s columns' own rows first, then R). Each earlier supernode K whose rows reach into J subtracts
    ``L_{rows,K} D_K L_{J,K}'`` (found through linked lists keyed by the supernode of K's next row),
    then the panel is factorised densely.
    """
    n = len(D)
    n_s = len(snode) - 1
    col_sn = _column_supernode(snode, n)
    big, _ = _panel_sizes(snode, Lp)
    buf = np.zeros(max(big, 1))
    maxs, maxm = _widths(snode, Lp)
    maxh = maxs + maxm
    bt_buf = np.empty(maxs * maxm)                     # L_rows,K'          (sK x rem)
    bd_buf = np.empty(maxs * max(maxs, _CHUNK))        # L_JK D_K (nj x sK); the chunk's (nT x w)
    u_buf = np.empty(maxs * maxh)                      # their products     (nj x rem; nT x h - a1)
    b_buf = np.empty(_CHUNK * maxh)                    # the chunk's rows   (w x h - a1)
    lc_buf = np.empty(_CHUNK * _CHUNK)                 # the chunk's unit lower block (below its diagonal)
    ci_buf = np.empty(_CHUNK * _CHUNK)                 # its inverse
    relmap = np.empty(n, dtype=np.int64)
    head = np.full(n_s, -1, dtype=np.int64)
    nxt = np.full(n_s, -1, dtype=np.int64)
    ptr = np.zeros(n_s, dtype=np.int64)
    tmp = np.empty(n)
    for J in range(n_s):
        c0, c1 = snode[J], snode[J + 1]
        s = c1 - c0
        rbase = Lp[c0] + s - 1          # rows below the supernode, in column c0
        m = Lp[c0 + 1] - rbase
        h = s + m
        for a in range(s):
            relmap[c0 + a] = a
        for b in range(m):
            relmap[Li[rbase + b]] = s + b
        P = buf[: s * h].reshape((s, h))
        P[:, :] = 0.0
        for a in range(s):
            j = c0 + a
            for p in range(Cp[j], Cp[j + 1]):
                P[a, relmap[Ci[p]]] += Cx[p]
        # updates from the supernodes linked to J
        K = head[J]
        while K != -1:
            nextK = nxt[K]
            k0, k1 = snode[K], snode[K + 1]
            sK = k1 - k0
            kb = Lp[k0] + sK - 1
            mK = Lp[k0 + 1] - kb
            q = ptr[K]
            q2 = q
            while q2 < mK and Li[kb + q2] < c1:
                q2 += 1
            rem = mK - q
            nj = q2 - q
            if sK * nj * rem >= _DENSE_PRODUCT:
                # one BLAS product: U = (L_JK D_K) L_rows,K'
                Bt = bt_buf[: sK * rem].reshape((sK, rem))
                BD = bd_buf[: nj * sK].reshape((nj, sK))
                for c in range(sK):
                    off = Lp[k0 + c] + (sK - 1 - c) + q
                    for r in range(rem):
                        Bt[c, r] = Lx[off + r]
                    for cc in range(nj):
                        BD[cc, c] = Lx[off + cc] * D[k0 + c]
                U = u_buf[: nj * rem].reshape((nj, rem))
                np.dot(BD, Bt, U)
                for cc in range(nj):
                    col = Li[kb + q + cc] - c0
                    for r in range(cc, rem):
                        P[col, relmap[Li[kb + q + r]]] -= U[cc, r]
            else:
                for cc in range(nj):
                    col = Li[kb + q + cc] - c0
                    for r in range(cc, rem):
                        tmp[r] = 0.0
                    for c in range(sK):
                        off = Lp[k0 + c] + (sK - 1 - c) + q
                        w = Lx[off + cc] * D[k0 + c]
                        if w != 0.0:
                            for r in range(cc, rem):
                                tmp[r] += Lx[off + r] * w
                    for r in range(cc, rem):
                        P[col, relmap[Li[kb + q + r]]] -= tmp[r]
            ptr[K] = q2
            if q2 < mK:
                Jn = col_sn[Li[kb + q2]]
                nxt[K] = head[Jn]
                head[Jn] = K
            K = nextK
        # dense LDL' of the panel, in chunks of columns: the chunk's own w x w block column by
        # column; its rows below by one BLAS product with the inverse of that block (when large
        # enough, else column by column); then the chunk's update of the panel's later columns as
        # one BLAS product
        a1 = 0
        while a1 < s:
            a0 = a1
            a1 = min(a0 + _CHUNK, s)
            w = a1 - a0
            below = (a1 - a0) * (a1 - a0) * (h - a1) >= _DENSE_PRODUCT
            stop = a1 if below else h
            for a in range(a0, a1):
                d = P[a, a]
                if not d > 0.0:
                    return c0 + a
                D[c0 + a] = d
                for r in range(a + 1, stop):
                    P[a, r] /= d
                for c in range(a + 1, a1):
                    f = P[a, c] * d
                    for r in range(c, stop):
                        P[c, r] -= P[a, r] * f
            if below:
                # rows r >= a1 of the chunk's columns: L[r, chunk] = M[r, chunk] Lc^-T D^-1, with
                # Lc the chunk's unit lower block (Lc[x, y] = P[a0 + y, a0 + x]) and M the panel
                # as the earlier chunks left it
                Lc = lc_buf[: w * w].reshape((w, w))
                for x in range(w):
                    for y in range(x):
                        Lc[x, y] = P[a0 + y, a0 + x]
                Ci_ = ci_buf[: w * w].reshape((w, w))
                _unit_lower_inverse(Lc, Ci_)
                nr = h - a1
                Bm = b_buf[: w * nr].reshape((w, nr))
                for a in range(w):
                    for r in range(nr):
                        Bm[a, r] = P[a0 + a, a1 + r]
                X = u_buf[: w * nr].reshape((w, nr))
                np.dot(Ci_, Bm, X)
                for a in range(w):
                    inv_d = 1.0 / D[c0 + a0 + a]
                    for r in range(nr):
                        P[a0 + a, a1 + r] = X[a, r] * inv_d
            nT = s - a1
            if nT > 0:
                nr = h - a1
                Bt = b_buf[: nr * w].reshape((nr, w))         # Bt[r, a] = L[a1 + r, a0 + a]
                BD = bd_buf[: nT * w].reshape((nT, w))
                for r in range(nr):
                    for a in range(w):
                        Bt[r, a] = P[a0 + a, a1 + r]
                for c in range(nT):
                    for a in range(w):
                        BD[c, a] = Bt[c, a] * D[c0 + a0 + a]
                # later columns a block at a time, each from its diagonal down (the lower
                # triangle only, not the whole square)
                for b0 in range(0, nT, _CHUNK):
                    b1 = min(b0 + _CHUNK, nT)
                    U = u_buf[: (b1 - b0) * (nr - b0)].reshape((b1 - b0, nr - b0))
                    np.dot(BD[b0:b1], Bt[b0:].T, U)
                    for c in range(b0, b1):
                        for r in range(c, nr):
                            P[a1 + c, a1 + r] -= U[c - b0, r - b0]
        for a in range(s):
            off = Lp[c0 + a] - a - 1
            for r in range(a + 1, h):
                Lx[off + r] = P[a, r]
        if m > 0:
            ptr[J] = 0
            Jn = col_sn[Li[rbase]]
            nxt[J] = head[Jn]
            head[Jn] = J
    return n


@numba.njit(cache=True, fastmath=_SUMS)
def selected_inverse_supernodal(snode, Lp, Li, Lx, D, Zx, Zd):
    """:func:`selected_inverse` a supernode at a time, from the last to the first.

    For supernode J (columns c0..c1-1, rows R below, m of them) the entries ``Z_RR`` (all on L's
    pattern: R is a clique) are gathered from the supernodes that own R's columns, ``Y = Z_RR L_RJ``
    is one dense product, and Takahashi's equations for the columns of J, last first, need only Y,
    the columns of J already done and ``L``'s own panel.
    """
    n = len(D)
    n_s = len(snode) - 1
    col_sn = _column_supernode(snode, n)
    big, bigr = _panel_sizes(snode, Lp)
    zbuf = np.zeros(max(big, 1))
    rbuf = np.zeros(max(bigr, 1))
    maxs, maxm = _widths(snode, Lp)
    ybuf = np.zeros(maxs * maxm)
    posf = np.empty(maxm, dtype=np.int64)
    maxh = maxs + maxm
    lr_buf = np.empty(maxs * maxm)                     # L_R,J'             (s x m)
    t_buf = np.empty(_CHUNK * maxh)                    # the chunk's sums   (w x h - a1)
    p_buf = np.empty(_CHUNK * maxh)                    # a product added to them
    lc_buf = np.empty(_CHUNK * maxs)                   # (w x nJ)
    lcr_buf = np.empty(_CHUNK * maxm)                  # (w x m)
    zb_buf = np.empty(maxs * maxh)                     # (nJ x h - a1)
    zr_buf = np.empty(maxm * maxs)                     # (m x nJ)
    lg_buf = np.empty(_CHUNK * _CHUNK)                 # the chunk's unit lower block (below its diagonal)
    ci_buf = np.empty(_CHUNK * _CHUNK)                 # its inverse
    s_buf = np.empty(_CHUNK * _CHUNK)                  # L[beyond, chunk]' Z[beyond, chunk]
    lrow_buf = np.empty(_CHUNK * maxh)                 # L[beyond, chunk]'  (w x h - a1)
    for J in range(n_s - 1, -1, -1):
        c0, c1 = snode[J], snode[J + 1]
        s = c1 - c0
        rbase = Lp[c0] + s - 1
        m = Lp[c0 + 1] - rbase
        h = s + m
        Zrr = rbuf[: m * m].reshape((m, m))
        b = 0
        while b < m:
            x = Li[rbase + b]
            K = col_sn[x]
            k0, k1 = snode[K], snode[K + 1]
            e = b + 1
            while e < m and Li[rbase + e] < k1:
                e += 1
            # positions of R[b+1:] in the pattern of K's first column: rows inside K's columns
            # are at fixed places (the dense triangle); those below K by a merge along K's rows
            # below, started by bisection (a scan from x would walk the whole triangle)
            for bb in range(b + 1, e):
                posf[bb] = Li[rbase + bb] - k0 - 1
            if e < m:
                lo = Lp[k0] + (k1 - k0 - 1)
                qq = lo + np.searchsorted(Li[lo: Lp[k0 + 1]], Li[rbase + e])
                for bb in range(e, m):
                    want = Li[rbase + bb]
                    while Li[qq] != want:
                        qq += 1
                    posf[bb] = qq - Lp[k0]
            for a in range(b, e):
                xa = Li[rbase + a]
                Zrr[a, a] = Zd[xa]
                shift = Lp[xa] - (xa - k0)
                for bb in range(a + 1, m):
                    Zrr[a, bb] = Zx[shift + posf[bb]]
            b = e
        # the lower triangle from the upper one, tile by tile (a column-wise write per entry
        # strides through memory; within a tile the rows written stay in cache)
        for i0 in range(0, m, _TILE):
            i1 = min(i0 + _TILE, m)
            for j0 in range(i0, m, _TILE):
                j1 = min(j0 + _TILE, m)
                for i in range(i0, i1):
                    for j in range(max(j0, i + 1), j1):
                        Zrr[j, i] = Zrr[i, j]
        # Yt[a, :] = Z_RR L_R,a
        Yt = ybuf[: s * m].reshape((s, m))
        if s * m * m >= _DENSE_PRODUCT:
            LR = lr_buf[: s * m].reshape((s, m))
            for a in range(s):
                lo = rbase + (Lp[c0 + a] - Lp[c0]) - a
                for q in range(m):
                    LR[a, q] = Lx[lo + q]
            np.dot(LR, Zrr, Yt)
        else:
            for a in range(s):
                lo = rbase + (Lp[c0 + a] - Lp[c0]) - a
                for rr in range(m):
                    acc = 0.0
                    for q in range(m):
                        acc += Zrr[rr, q] * Lx[lo + q]
                    Yt[a, rr] = acc
        # Zt[a, r] = Z[r, a] for r > a (J's own rows kept symmetric: Zt[r, a] too); columns of J
        # in chunks of _CHUNK from the last, the part of each sum over columns beyond the chunk
        # as one dense product
        Zt = zbuf[: s * h].reshape((s, h))
        a1 = s
        while a1 > 0:
            a0 = max(a1 - _CHUNK, 0)
            w = a1 - a0
            nJ = s - a1
            T = t_buf[: w * (h - a1)].reshape((w, h - a1))
            T[:, :] = 0.0
            for a in range(w):
                for rr in range(m):
                    T[a, nJ + rr] = Yt[a0 + a, rr]
            if nJ > 0:
                Lc = lc_buf[: w * nJ].reshape((w, nJ))
                LcR = lcr_buf[: w * m].reshape((w, m))
                for a in range(w):
                    off = Lp[c0 + a0 + a] - (a0 + a) - 1
                    for c in range(nJ):
                        Lc[a, c] = Lx[off + a1 + c]
                    for rr in range(m):
                        LcR[a, rr] = Lx[off + s + rr]
                Zb = zb_buf[: nJ * (h - a1)].reshape((nJ, h - a1))
                ZR = zr_buf[: m * nJ].reshape((m, nJ))
                for c in range(nJ):
                    for r in range(h - a1):
                        Zb[c, r] = Zt[a1 + c, a1 + r]
                    for rr in range(m):
                        ZR[rr, c] = Zt[a1 + c, s + rr]
                Pr = p_buf[: w * (h - a1)].reshape((w, h - a1))
                np.dot(Lc, Zb, Pr)
                T += Pr
                if m > 0:
                    Pn = p_buf[: w * nJ].reshape((w, nJ))
                    np.dot(LcR, ZR, Pn)
                    T[:, :nJ] += Pn
            nr = h - a1
            blas = w * w * nr >= _DENSE_PRODUCT
            S_ = s_buf[: w * w].reshape((w, w))
            if blas:
                # The chunk's rows beyond it at once: with Lg the chunk's unit lower block,
                # Z[r, chunk] = -Lg^-T T[:, r] for every r >= a1 (one product with Lg's inverse);
                # then S = -L[beyond, chunk]' Z[beyond, chunk] is one more product
                Lg = lg_buf[: w * w].reshape((w, w))
                for y in range(w):
                    offy = Lp[c0 + a0 + y] - (a0 + y) - 1
                    for x in range(y + 1, w):
                        Lg[x, y] = Lx[offy + a0 + x]
                Ci_ = ci_buf[: w * w].reshape((w, w))
                _unit_lower_inverse(Lg, Ci_)
                Zc = p_buf[: w * nr].reshape((w, nr))
                np.dot(Ci_.T, T, Zc)
                Lrow = lrow_buf[: w * nr].reshape((w, nr))
                for a in range(w):
                    off = Lp[c0 + a0 + a] - (a0 + a) - 1
                    for r in range(nr):
                        Zt[a0 + a, a1 + r] = -Zc[a, r]
                        Lrow[a, r] = Lx[off + a1 + r]
                    for r in range(a1, s):
                        Zt[r, a0 + a] = Zt[a0 + a, r]
                np.dot(Lrow, Zc.T, S_)
            for a in range(a1 - 1, a0 - 1, -1):
                j = c0 + a
                off = Lp[j] - a - 1          # L[r, a] = Lx[off + r], r > a
                if not blas:
                    # the same, column by column: Z[a, r >= a1], then S[a, b] for the chunk's
                    # columns b >= a (rows b > a are done)
                    for r in range(a1, h):
                        Zt[a, r] = -T[a - a0, r - a1]
                    for c in range(a + 1, a1):
                        lca = Lx[off + c]
                        for r in range(a1, h):
                            Zt[a, r] -= Zt[c, r] * lca
                    for r in range(a1, s):
                        Zt[r, a] = Zt[a, r]
                    for bq in range(a, a1):
                        acc = 0.0
                        for r in range(a1, h):
                            acc += Zt[bq, r] * Lx[off + r]
                        S_[a - a0, bq - a0] = -acc
                # rows of the chunk (row bq of Zt holds Z[bq, c] for every c > a): the sums over
                # the rows beyond the chunk are -S, those inside it remain
                for bq in range(a + 1, a1):
                    acc = -S_[a - a0, bq - a0]
                    for r in range(a + 1, a1):
                        acc += Zt[bq, r] * Lx[off + r]
                    Zt[a, bq] = -acc
                    Zt[bq, a] = -acc
                dj = 1.0 / D[j] + S_[a - a0, a - a0]
                for r in range(a + 1, a1):
                    dj -= Lx[off + r] * Zt[a, r]
                Zt[a, a] = dj
                Zd[j] = dj
                for r in range(a + 1, h):
                    Zx[off + r] = Zt[a, r]
            a1 = a0


def transpose_pattern(Cp: np.ndarray, Ci: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The transpose of the CSC pattern (Cp, Ci) of a square matrix, rows sorted, as (Tp, Ti, take):
    value q of the transpose is value ``take[q]`` of the original. For a symmetric matrix this turns
    the upper triangle's CSC into the lower triangle's and back."""
    n = len(Cp) - 1
    Ci = np.asarray(Ci, dtype=np.int64)
    cols = np.repeat(np.arange(n, dtype=np.int64), np.diff(Cp))
    order = np.lexsort((cols, Ci))
    Tp = np.searchsorted(Ci[order], np.arange(n + 1)).astype(np.int64)
    return Tp, cols[order], order.astype(np.int64)


class Factor:
    """Symbolic analysis of a fixed symmetric pattern with numeric factorisation on demand
    (supernodal kernels; the scalar ones above compute the same numbers).

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
        self.snode = supernodes(self.parent, self.Lp)
        self.lower_p, self.lower_i, self.lower_take = transpose_pattern(self.Cp, self.Ci)
        self.Lx = np.empty(len(self.Li))
        self.D = np.empty(self.n)

    @property
    def nnz(self) -> int:
        """Non-zeros of L including its unit diagonal."""
        return int(len(self.Li) + self.n)

    def factor(self, Cx: np.ndarray) -> bool:
        """Numeric factorisation for the values ``Cx`` (aligned with ``Ci``); False if the matrix is
        not positive definite."""
        lower = np.asarray(Cx, dtype=np.float64)[self.lower_take]
        return ldl_supernodal(self.lower_p, self.lower_i, lower, self.snode, self.Lp, self.Li, self.Lx,
                              self.D) == self.n

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
        selected_inverse_supernodal(self.snode, self.Lp, self.Li, self.Lx, self.D, Zx, Zd)
        return Zx, Zd

    def lower_matrix(self, Zx: np.ndarray, Zd: np.ndarray) -> sp.csc_matrix:
        """Values aligned with L's pattern as a lower-triangular sparse matrix (diagonal ``Zd``)."""
        cols = np.repeat(np.arange(self.n), np.diff(self.Lp))
        return (sp.csc_matrix((Zx, (self.Li, cols)), shape=(self.n, self.n)) + sp.diags(Zd)).tocsc()


@numba.njit(cache=True)
def postorder(parent):
    """A postorder of the forest ``parent`` (-1 at roots): ``order[k]`` is the k-th node visited,
    children (in increasing order) before their parent. Renumbering the unknowns this way leaves
    the fill unchanged and puts every subtree, hence every chain, on consecutive columns."""
    n = len(parent)
    head = np.full(n, -1, dtype=np.int64)
    nxt = np.full(n, -1, dtype=np.int64)
    for j in range(n - 1, -1, -1):
        p = parent[j]
        if p >= 0:
            nxt[j] = head[p]
            head[p] = j
    order = np.empty(n, dtype=np.int64)
    stack = np.empty(n, dtype=np.int64)
    k = 0
    for root in range(n):
        if parent[root] != -1:
            continue
        top = 0
        stack[0] = root
        while top >= 0:
            v = stack[top]
            c = head[v]
            if c == -1:
                order[k] = v
                k += 1
                top -= 1
            else:
                head[v] = nxt[c]
                top += 1
                stack[top] = c
    return order


@numba.njit(cache=True)
def _amalgamate(snode, Lp, Li, parent, max_zero_fraction, small_width, small_zero_fraction):
    n = len(Lp) - 1
    n_s = len(snode) - 1
    starts = np.empty(n_s + 1, dtype=np.int64)
    last = np.empty(n_s, dtype=np.int64)     # original supernode whose rows below close each group
    g = 0
    starts[0] = 0
    cur = 0
    z = 0
    for J in range(1, n_s + 1):
        if J < n_s:
            g0, g1 = snode[cur], snode[J]
            p0, p1 = snode[J], snode[J + 1]
            sG, sP = g1 - g0, p1 - p0
            mG = Lp[g1] - Lp[g1 - 1]                     # rows below the group's last column
            mP = Lp[p0 + 1] - Lp[p0] - (sP - 1)
            if parent[g1 - 1] == p0:
                extra = sG * (sP + mP - mG)
                s = sG + sP
                nnz = s * (s - 1) // 2 + s * mP
                frac = (z + extra) / max(nnz, 1)
                if frac <= max_zero_fraction or (s <= small_width and frac <= small_zero_fraction):
                    z += extra
                    continue
        last[g] = J - 1
        g += 1
        starts[g] = snode[J] if J < n_s else n
        cur = J
        z = 0
    starts = starts[: g + 1]
    newLp = np.zeros(n + 1, dtype=np.int64)
    for G in range(g):
        c0, c1 = starts[G], starts[G + 1]
        K = last[G]
        k0 = snode[K]
        m = Lp[k0 + 1] - Lp[k0] - (snode[K + 1] - k0 - 1)
        for j in range(c0, c1):
            newLp[j + 1] = newLp[j] + (c1 - 1 - j) + m
    newLi = np.empty(newLp[n], dtype=np.int64)
    for G in range(g):
        c0, c1 = starts[G], starts[G + 1]
        K = last[G]
        k0 = snode[K]
        rb = Lp[k0] + (snode[K + 1] - k0 - 1)
        m = Lp[k0 + 1] - rb
        for j in range(c0, c1):
            q = newLp[j]
            for r in range(j + 1, c1):
                newLi[q] = r
                q += 1
            for b in range(m):
                newLi[q] = Li[rb + b]
                q += 1
    return starts, newLp, newLi


def amalgamate(snode: np.ndarray, Lp: np.ndarray, Li: np.ndarray, parent: np.ndarray,
               max_zero_fraction: float = 0.05, small_width: int = 32, small_zero_fraction: float = 0.3):
    """Relaxed supernodes: merge a supernode with the next one when the next starts at the parent
    of its last column and the merged panel's stored zeros stay a small fraction of its entries
    (``max_zero_fraction``, or ``small_zero_fraction`` for panels of at most ``small_width``
    columns). Returns (snode, Lp, Li) of the enlarged pattern: it contains the original one, each
    supernode's rows below it are those of its last merged part, so it is still closed under
    elimination and the supernodal kernels give the same L, D and Z (zeros where the pattern grew)."""
    return _amalgamate(np.asarray(snode, dtype=np.int64), np.asarray(Lp, dtype=np.int64),
                       np.asarray(Li, dtype=np.int64), np.asarray(parent, dtype=np.int64),
                       float(max_zero_fraction), int(small_width), float(small_zero_fraction))
