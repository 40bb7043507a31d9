"""The exact marginal log-likelihood of the animal model from Henderson's mixed-model equations,
with its gradient, by sparse factorisation (docs/methods.md §2.14).

Model (standardised scale; records r, traits k; docs/methods.md §2.1)::

    y = X b + Z a + sum_c Z_c u_c + e,   a ~ N(0, A (x) G),  u_c ~ N(0, I (x) C_c),  e_r ~ N(0, R)

All random effects (the breeding values and every extra effect) are integrated out; the fixed
effects ``b`` stay outside (the caller passes the residuals ``y - X b``, missing cells 0). With
``W`` the random-effect design over the observed cells, ``Gamma`` the prior covariance of all
random effects and ``R~`` the block-diagonal residual covariance (block of record r: ``R_oo`` of its
observed traits)::

    C = W' R~^-1 W + Gamma^-1                      (sparse, symmetric positive definite)
    log|V| = log|C| + log|Gamma| + log|R~|
    e' V^-1 e = e' R~^-1 e - r' C^-1 r,  r = W' R~^-1 e

and the gradient needs only the entries of ``C^-1`` on the pattern of ``C`` (its selected inverse,
:mod:`ped2g.fit.sparse_factor`) and the solution ``c^ = C^-1 r``.

Layout. Random effects are grouped in *blocks* of ``t`` unknowns (one block per animal, then one
per level of each extra effect, in the order of ``FitData.random``); unknown ``(block, k)`` is
scalar ``block * t + k`` before the fill-reducing permutation. Every entry of ``C`` is a sum of
*terms* ``coef x M_m[k, l]`` where the small matrices ``M_m`` are ``G^-1``, each ``C_c^-1`` and, per
pattern of observed traits ``p``, ``(R_oo)^-1`` padded with zeros. :func:`build_design` lists these
terms once per design (position in the lower triangle of the permuted ``C``, which entry of which
small matrix, coefficient), so each evaluation only fills values; the same list gives
``d log|C| / d M_m = sum coef x (C^-1 at the term's position)``.

A record whose level of an extra effect is ``-1`` (unknown) gets no contribution from that effect.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numba
import numpy as np
import scipy.sparse as sp

from . import sparse_factor as sf
from .kernel_cache import forget_if_changed
from .sparse_factor import ldl_solve, ldl_supernodal, selected_inverse_supernodal

LOG_2PI = math.log(2.0 * math.pi)


@dataclass
class Design:
    """What :func:`build_design` computes once for a design (pattern, ordering, index maps)."""

    t: int
    n_animals: int
    n_levels: np.ndarray        # (1 + n_effects,): animals, then levels of each extra effect
    block_offsets: np.ndarray   # first block of the animals and of each extra effect
    patterns: np.ndarray        # (n_patterns, t) int8: observed traits of each pattern
    rec_pattern: np.ndarray     # (n_records,)
    rec_index: np.ndarray       # (n_records, 1 + n_effects, t): permuted unknown, -1 if none
    term_pos: np.ndarray
    term_midx: np.ndarray
    term_coef: np.ndarray
    Cp: np.ndarray              # lower triangle of the permuted C (diagonal included), CSC
    Ci: np.ndarray              # row of each stored entry
    Cj: np.ndarray              # column of each stored entry
    snode: np.ndarray           # first column of each supernode of L, then n_unknowns
    Lp: np.ndarray
    Li: np.ndarray
    c_to_l: np.ndarray
    perm: np.ndarray            # perm[j]: original scalar unknown at permuted position j
    const: float                # -1/2 (n_obs log 2 pi + t log|A|)
    n_obs: int
    log_det_A: float
    #: The one-trait design of the same records, when the canonical route applies (no extra
    #: effect, every cell observed, t > 1; :func:`canonical_logp_and_grad`), else None.
    univariate: "Design | None" = None
    #: Whether the structures of the general route (the t-trait system) were built; a canonical
    #: design holds them only when :func:`build_design` was asked to keep them.
    general: bool = True

    @property
    def n_unknowns(self) -> int:
        """Random-effect unknowns of the t-trait system (every block times t)."""
        return int(self.block_offsets[-1]) * self.t

    @property
    def factor_nnz(self) -> int:
        """Non-zeros of the general route's factor L (unit diagonal included)."""
        self._need_general()
        return int(len(self.Li) + self.n_unknowns)

    def _need_general(self) -> None:
        if not self.general:
            raise ValueError("this design holds the canonical route only; build it with keep_general=True "
                             "for the general route")

    @property
    def canonical(self) -> bool:
        """Whether the likelihood goes by the canonical route (:func:`canonical_logp_and_grad`)."""
        return self.univariate is not None

    def likelihood_inputs(self) -> tuple:
        """The structural arrays the likelihood kernel takes: the one-trait design's on the
        canonical route, else :meth:`inputs`."""
        return self.univariate.inputs() if self.univariate is not None else self.inputs()

    def inputs(self) -> tuple:
        """The structural arrays in the order the kernels take them (after resid, G, R, covs)."""
        self._need_general()
        return (self.term_pos, self.term_midx, self.term_coef, self.Cp, self.Ci, self.Cj, self.snode, self.Lp,
                self.Li, self.c_to_l, self.rec_pattern, self.rec_index, self.patterns, self.n_levels,
                np.array([self.const]))


#: Names of the structural inputs (``pm.Data`` names in the sparse engine's model).
INPUT_NAMES = ("term_pos", "term_midx", "term_coef", "Cp", "Ci", "Cj", "snode", "Lp", "Li", "c_to_l",
               "rec_pattern", "rec_index", "patterns", "n_levels", "const")


def build_design(ped, record_animal: np.ndarray, observed: np.ndarray,
                 effects: list[tuple[np.ndarray, int]] = (), canonical: bool = True,
                 keep_general: bool = False) -> Design:
    """Pattern, ordering, symbolic factorisation and index maps of the mixed-model equations.

    Parameters
    ----------
    ped : ped2g.pedigree.core.Pedigree
    record_animal : (n_records,) pedigree position of each record's animal
    observed : (n_records, t) bool, observed trait cells (every record has at least one)
    effects : list of (level, n_levels) per extra random effect; ``level`` (n_records,) int, ``-1``
        for a record that gets no contribution from the effect
    canonical : build the one-trait design of the canonical route where it applies (no extra
        effect, every cell observed, more than one trait)
    keep_general : where the canonical route applies, also build the general route's structures
        (to compare the two routes; at 100,000 animals and 4 traits they take about ten times the
        one-trait design's time and memory, and a fit never uses them)
    """
    from ..pedigree.relationships import log_det_relationship, relationship_inverse

    observed = np.asarray(observed, dtype=bool)
    n_rec, t = observed.shape
    if np.any(~observed.any(axis=1)):
        raise ValueError("every record needs at least one observed trait")
    tt = t * t
    n_a = ped.n
    sizes = [n_a] + [int(n) for _, n in effects]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    n_b = int(offsets[-1])
    n_u = n_b * t
    n_gamma = 1 + len(effects)
    on_canonical = canonical and t > 1 and not effects and bool(observed.all())
    if on_canonical and not keep_general:
        uni = build_design(ped, record_animal, np.ones((n_rec, 1), dtype=bool), [], canonical=False)
        n_obs = int(observed.sum())
        empty = np.zeros(0, dtype=np.int64)
        return Design(univariate=uni, general=False, t=t, n_animals=n_a, n_levels=np.asarray(sizes, dtype=np.int64),
                      block_offsets=offsets, patterns=np.ones((1, t), dtype=np.int8), rec_pattern=uni.rec_pattern,
                      rec_index=np.zeros((0, 1, t), dtype=np.int64), term_pos=empty, term_midx=empty,
                      term_coef=np.zeros(0), Cp=empty, Ci=empty, Cj=empty, snode=empty, Lp=empty, Li=empty,
                      c_to_l=empty, perm=empty, const=-0.5 * (n_obs * LOG_2PI + t * uni.log_det_A), n_obs=n_obs,
                      log_det_A=uni.log_det_A)

    # blocks of each record: animal, then one level per extra effect (-1 = none)
    rb = np.full((n_rec, n_gamma), -1, dtype=np.int64)
    rb[:, 0] = np.asarray(record_animal, dtype=np.int64)
    for c, (level, n) in enumerate(effects):
        level = np.asarray(level, dtype=np.int64)
        if np.any(level >= n) or np.any(level < -1):
            raise ValueError(f"extra effect {c}: levels must lie in -1..{n - 1}")
        rb[:, 1 + c] = np.where(level >= 0, offsets[1 + c] + level, -1)
    patterns, rec_pattern = np.unique(observed, axis=0, return_inverse=True)
    rec_pattern = rec_pattern.ravel().astype(np.int64)
    n_pat = len(patterns)

    # pairs of blocks that share a record, per pattern, with counts
    us, vs, ps = [], [], []
    for f1 in range(n_gamma):
        for f2 in range(n_gamma):
            ok = (rb[:, f1] >= 0) & (rb[:, f2] >= 0)
            us.append(rb[ok, f1]); vs.append(rb[ok, f2]); ps.append(rec_pattern[ok])
    u = np.concatenate(us); v = np.concatenate(vs); p = np.concatenate(ps)
    key, count = np.unique((u * n_b + v) * n_pat + p, return_counts=True)
    p_pair = key % n_pat
    uv = key // n_pat
    u_pair, v_pair = uv // n_b, uv % n_b

    Ainv = relationship_inverse(ped).tocoo()
    level_blocks = np.arange(n_a, n_b, dtype=np.int64)
    block_pattern = sp.coo_matrix(
        (np.ones(Ainv.nnz + len(level_blocks) + len(u_pair)),
         (np.concatenate([Ainv.row, level_blocks, u_pair]), np.concatenate([Ainv.col, level_blocks, v_pair]))),
        shape=(n_b, n_b)).tocsc()
    perm_b = sf.fill_reducing_order(block_pattern)
    # postorder of the block elimination tree (same fill; chains of blocks on consecutive columns)
    Bu = sp.triu(block_pattern.tocsr()[perm_b][:, perm_b], format="csc")
    Bu.sort_indices()
    block_parent = sf.symbolic(Bu.indptr, Bu.indices)[0]
    perm_b = perm_b[sf.postorder(block_parent)]
    perm = (perm_b[:, None] * t + np.arange(t)[None, :]).ravel()
    iperm = np.empty(n_u, dtype=np.int64)
    iperm[perm] = np.arange(n_u)

    kk, ll = np.divmod(np.arange(tt), t)
    rows, cols, midx, coef = [], [], [], []
    # G^-1 (x) A^-1
    ai, aj = Ainv.row.astype(np.int64), Ainv.col.astype(np.int64)
    rows.append((ai[:, None] * t + kk).ravel()); cols.append((aj[:, None] * t + ll).ravel())
    midx.append(np.broadcast_to(np.arange(tt), (len(ai), tt)).ravel())
    coef.append(np.repeat(Ainv.data, tt))
    # C_c^-1 (x) I
    for c in range(len(effects)):
        b = np.arange(offsets[1 + c], offsets[2 + c], dtype=np.int64)
        rows.append((b[:, None] * t + kk).ravel()); cols.append((b[:, None] * t + ll).ravel())
        midx.append(np.broadcast_to((1 + c) * tt + np.arange(tt), (len(b), tt)).ravel())
        coef.append(np.ones(len(b) * tt))
    # records: (R_oo)^-1 padded, for each pair of blocks sharing a record
    for q in range(n_pat):
        obs = np.flatnonzero(patterns[q])
        ko, lo = np.repeat(obs, len(obs)), np.tile(obs, len(obs))
        sel = p_pair == q
        uq, vq, cq = u_pair[sel], v_pair[sel], count[sel]
        rows.append((uq[:, None] * t + ko).ravel()); cols.append((vq[:, None] * t + lo).ravel())
        midx.append(np.broadcast_to((n_gamma + q) * tt + ko * t + lo, (len(uq), len(ko))).ravel())
        coef.append(np.repeat(cq.astype(float), len(ko)))
    prow = iperm[np.concatenate(rows)]
    pcol = iperm[np.concatenate(cols)]
    midx = np.concatenate(midx).astype(np.int64)
    coef = np.concatenate(coef)
    # the lower triangle: entry (max, min) of each term, keyed column-major
    lower = prow >= pcol
    prow, pcol, midx, coef = prow[lower], pcol[lower], midx[lower], coef[lower]
    ckey = pcol * n_u + prow
    ukeys = np.unique(ckey)
    pos = np.searchsorted(ukeys, ckey)
    Cj = ukeys // n_u
    Ci = ukeys % n_u
    Cp = np.searchsorted(Cj, np.arange(n_u + 1)).astype(np.int64)
    n_mats = n_gamma + n_pat
    tkey, tinv = np.unique(pos * (n_mats * tt) + midx, return_inverse=True)
    term_coef = np.bincount(tinv.ravel(), weights=coef, minlength=len(tkey))
    term_pos = (tkey // (n_mats * tt)).astype(np.int64)
    term_midx = (tkey % (n_mats * tt)).astype(np.int64)

    Up, Ui, _ = sf.transpose_pattern(Cp, Ci)
    parent, Lp, Li = sf.symbolic(Up, Ui)
    snode, Lp, Li = sf.amalgamate(sf.supernodes(parent, Lp), Lp, Li, parent)
    nnzL = len(Li)
    lkeys = np.repeat(np.arange(n_u, dtype=np.int64), np.diff(Lp)) * n_u + Li
    off = Ci != Cj
    c_to_l = nnzL + Cj.copy()
    c_to_l[off] = np.searchsorted(lkeys, Cj[off] * n_u + Ci[off])
    if np.any(lkeys[c_to_l[off]] != Cj[off] * n_u + Ci[off]):
        raise AssertionError("pattern of C not contained in the pattern of L")

    rec_index = np.full((n_rec, n_gamma, t), -1, dtype=np.int64)
    for f in range(n_gamma):
        ok = rb[:, f] >= 0
        idx = iperm[rb[:, f, None] * t + np.arange(t)[None, :]]
        rec_index[:, f, :] = np.where(ok[:, None] & observed, idx, -1)
    n_obs = int(observed.sum())
    log_det_A = float(log_det_relationship(ped))
    univariate = None
    if on_canonical:
        univariate = build_design(ped, record_animal, np.ones((n_rec, 1), dtype=bool), [], canonical=False)
    return Design(univariate=univariate, t=t, n_animals=n_a, n_levels=np.asarray(sizes, dtype=np.int64),
                  block_offsets=offsets,
                  patterns=patterns.astype(np.int8), rec_pattern=rec_pattern, rec_index=rec_index,
                  term_pos=term_pos, term_midx=term_midx, term_coef=term_coef, Cp=Cp, Ci=Ci, Cj=Cj,
                  snode=snode, Lp=Lp, Li=Li, c_to_l=c_to_l.astype(np.int64), perm=perm,
                  const=-0.5 * (n_obs * LOG_2PI + t * log_det_A), n_obs=n_obs, log_det_A=log_det_A)


def design_for(data) -> Design:
    """:func:`build_design` for a :class:`ped2g.fit.data.FitData`."""
    return build_design(data.pedigree, data.record_animal, ~data.missing,
                        [(eff.level, eff.n_levels) for eff in data.random])


# ------------------------------------------------------------------------------------------------
# kernels
# ------------------------------------------------------------------------------------------------

@numba.njit(cache=True)
def _chol_inv_factor(M):
    """(ok, L^-1, log|M|) with ``M = L L'`` (symmetrised); ok False if M is not positive definite."""
    m = M.shape[0]
    L = np.zeros((m, m))
    ld = 0.0
    for j in range(m):
        for i in range(j, m):
            s = 0.5 * (M[i, j] + M[j, i])
            for q in range(j):
                s -= L[i, q] * L[j, q]
            if i == j:
                if not s > 0.0:
                    return False, L, 0.0
                L[j, j] = math.sqrt(s)
                ld += 2.0 * math.log(L[j, j])
            else:
                L[i, j] = s / L[j, j]
    Li = np.zeros((m, m))
    for c in range(m):
        Li[c, c] = 1.0 / L[c, c]
        for i in range(c + 1, m):
            s = 0.0
            for q in range(c, i):
                s -= L[i, q] * Li[q, c]
            Li[i, c] = s / L[i, i]
    return True, Li, ld


@numba.njit(cache=True)
def _chol_inv_logdet(M, idx):
    """Inverse and log-determinant of ``M[idx][:, idx]`` (symmetrised) by Cholesky; ok False if
    that block is not positive definite."""
    m = len(idx)
    sub = np.empty((m, m))
    for i in range(m):
        for j in range(m):
            sub[i, j] = M[idx[i], idx[j]]
    ok, Li, ld = _chol_inv_factor(sub)
    if not ok:
        return False, np.zeros((m, m)), 0.0
    inv = np.zeros((m, m))       # M^-1 = L^-T L^-1
    for i in range(m):
        for j in range(m):
            s = 0.0
            for q in range(max(i, j), m):
                s += Li[q, i] * Li[q, j]
            inv[i, j] = s
    return True, inv, ld


@numba.njit(cache=True)
def _small_matrices(G, R, covs, patterns, n_levels):
    """(ok, mats, log|Gamma| without t log|A|, log|R_oo| per pattern)."""
    t = G.shape[0]
    n_c = covs.shape[0]
    n_gamma = 1 + n_c
    n_pat = patterns.shape[0]
    mats = np.zeros((n_gamma + n_pat, t, t))
    pat_ld = np.zeros(n_pat)
    every = np.arange(t)
    ok, inv, ld = _chol_inv_logdet(G, every)
    if not ok:
        return False, mats, 0.0, pat_ld
    mats[0] = inv
    ld_gamma = n_levels[0] * ld
    for c in range(n_c):
        ok, inv, ld = _chol_inv_logdet(covs[c], every)
        if not ok:
            return False, mats, 0.0, pat_ld
        mats[1 + c] = inv
        ld_gamma += n_levels[1 + c] * ld
    for p in range(n_pat):
        idx = np.flatnonzero(patterns[p])
        ok, inv, ld = _chol_inv_logdet(R, idx)
        if not ok:
            return False, mats, 0.0, pat_ld
        for a in range(len(idx)):
            for b in range(len(idx)):
                mats[n_gamma + p, idx[a], idx[b]] = inv[a, b]
        pat_ld[p] = ld
    return True, mats, ld_gamma, pat_ld


@numba.njit(cache=True)
def _assemble(mats, term_pos, term_midx, term_coef, n_c_entries):
    flat = mats.ravel()
    Cx = np.zeros(n_c_entries)
    for q in range(len(term_pos)):
        Cx[term_pos[q]] += term_coef[q] * flat[term_midx[q]]
    return Cx


@numba.njit(cache=True)
def _right_hand_side(resid, mats, n_gamma, rec_pattern, rec_index, n_u):
    """(r = W' R~^-1 e, e' R~^-1 e)."""
    n_rec, t = resid.shape
    n_f = rec_index.shape[1]
    rhs = np.zeros(n_u)
    quad = 0.0
    Pe = np.zeros(t)
    for r in range(n_rec):
        P = mats[n_gamma + rec_pattern[r]]
        for k in range(t):
            s = 0.0
            for l in range(t):
                s += P[k, l] * resid[r, l]
            Pe[k] = s
            quad += resid[r, k] * s
        for f in range(n_f):
            for k in range(t):
                q = rec_index[r, f, k]
                if q >= 0:
                    rhs[q] += Pe[k]
    return rhs, quad


@numba.njit(cache=True)
def mme_logp_and_grad(resid, G, R, covs, term_pos, term_midx, term_coef, Cp, Ci, Cj, snode, Lp, Li, c_to_l,
                      rec_pattern, rec_index, patterns, n_levels, const):
    """(log L, d/d resid, d/dG, d/dR, d/dcovs); -inf and zeros where a matrix is not positive definite."""
    n_rec, t = resid.shape
    n_c = covs.shape[0]
    n_gamma = 1 + n_c
    n_pat = patterns.shape[0]
    tt = t * t
    n_u = len(Cp) - 1
    fail = (-np.inf, np.zeros((n_rec, t)), np.zeros((t, t)), np.zeros((t, t)), np.zeros((n_c, t, t)))
    ok, mats, ld_gamma, pat_ld = _small_matrices(G, R, covs, patterns, n_levels)
    if not ok:
        return fail
    Cx = _assemble(mats, term_pos, term_midx, term_coef, len(Ci))
    Lx = np.empty(len(Li))
    D = np.empty(n_u)
    if ldl_supernodal(Cp, Ci, Cx, snode, Lp, Li, Lx, D) != n_u:
        return fail
    rhs, quad = _right_hand_side(resid, mats, n_gamma, rec_pattern, rec_index, n_u)
    chat = ldl_solve(Lp, Li, Lx, D, rhs.copy())
    for q in range(n_u):
        quad -= rhs[q] * chat[q]
    ld_c = 0.0
    for q in range(n_u):
        ld_c += math.log(D[q])
    count = np.zeros(n_pat)
    ld_r = 0.0
    for r in range(n_rec):
        count[rec_pattern[r]] += 1.0
        ld_r += pat_ld[rec_pattern[r]]
    value = const[0] - 0.5 * (ld_c + ld_gamma + ld_r + quad)

    # gradient: T_m = d(log|C| + Q) / d M_m (off-diagonal stored entries counted for both triangles)
    nnzL = len(Li)
    Zx = np.empty(nnzL)
    Zd = np.empty(n_u)
    selected_inverse_supernodal(snode, Lp, Li, Lx, D, Zx, Zd)
    T = np.zeros((n_gamma + n_pat) * tt)
    for q in range(len(term_pos)):
        pos = term_pos[q]
        i, j = Ci[pos], Cj[pos]
        cl = c_to_l[pos]
        z = Zx[cl] if cl < nnzL else Zd[cl - nnzL]
        m = term_midx[q]
        if m < n_gamma * tt:
            z += chat[i] * chat[j]
        w = 1.0 if i == j else 2.0
        T[m] += w * term_coef[q] * z
    d_resid = np.zeros((n_rec, t))
    et = np.zeros(t)
    n_f = rec_index.shape[1]
    for r in range(n_rec):
        p = rec_pattern[r]
        for k in range(t):
            if patterns[p, k]:
                s = resid[r, k]
                for f in range(n_f):
                    qi = rec_index[r, f, k]
                    if qi >= 0:
                        s -= chat[qi]
                et[k] = s
            else:
                et[k] = 0.0
        P = mats[n_gamma + p]
        base = (n_gamma + p) * tt
        for k in range(t):
            s = 0.0
            for l in range(t):
                s += P[k, l] * et[l]
                T[base + k * t + l] += et[k] * et[l]
            d_resid[r, k] = -s
    T3 = T.reshape((n_gamma + n_pat, t, t))
    dG = np.zeros((t, t))
    dcovs = np.zeros((n_c, t, t))
    for g in range(n_gamma):
        H = mats[g]
        Ts = 0.5 * (T3[g] + T3[g].T)
        out = 0.5 * (H @ Ts @ H - n_levels[g] * H)
        if g == 0:
            dG[:, :] = out
        else:
            dcovs[g - 1] = out
    dR = np.zeros((t, t))
    for p in range(n_pat):
        idx = np.flatnonzero(patterns[p])
        m = len(idx)
        P = np.empty((m, m))
        Tp = np.empty((m, m))
        for a in range(m):
            for b in range(m):
                P[a, b] = mats[n_gamma + p, idx[a], idx[b]]
                Tp[a, b] = 0.5 * (T3[n_gamma + p, idx[a], idx[b]] + T3[n_gamma + p, idx[b], idx[a]])
        out = 0.5 * (P @ Tp @ P - count[p] * P)
        for a in range(m):
            for b in range(m):
                dR[idx[a], idx[b]] += out[a, b]
    return value, d_resid, dG, dR, dcovs


@numba.njit(cache=True)
def canonical_frame(G, R):
    """(ok, W, lambda, log|R|) with ``W R W' = I`` and ``W G W' = diag(lambda)``: ``R = L L'``,
    ``L^-1 G L^-T = Q diag(lambda) Q'``, ``W = Q' L^-1``. ok is False unless G and R are positive
    definite."""
    t = G.shape[0]
    ok, Lr_inv, ld_r = _chol_inv_factor(R)
    if not ok:
        return False, np.zeros((t, t)), np.ones(t), 0.0
    M = Lr_inv @ G @ Lr_inv.T
    lam, Q = np.linalg.eigh(0.5 * (M + M.T))
    if not lam[0] > 0.0:
        return False, np.zeros((t, t)), np.ones(t), 0.0
    return True, Q.T @ Lr_inv, lam, ld_r


@numba.njit(cache=True)
def canonical_logp_and_grad(resid, G, R, covs, term_pos, term_midx, term_coef, Cp, Ci, Cj, snode, Lp, Li, c_to_l,
                            rec_pattern, rec_index, patterns, n_levels, const):
    """(log L, d/d resid, d/dG, d/dR, d/dcovs) by the canonical route, for designs with no extra
    effect and every cell observed; the structural arrays are those of the one-trait design.

    ``W`` with ``W R W' = I`` and ``W G W' = Lambda`` (diagonal) turns the model into t independent
    one-trait models of ``y* = y W'`` (residual variance 1, genetic variance ``lambda_k``). For a
    fixed ``W``, ``log L(G, R) = l*(W G W', W R W', e W') + n log|det W|``, so the gradients are
    ``W' (d l*/d G*) W`` and ``W' (d l*/d R*) W``, where ``d l*/d G* = (Lambda^-1 T* Lambda^-1 -
    n_a Lambda^-1) / 2`` and ``d l*/d R* = (U* - n I) / 2``. The diagonals of ``T*`` and ``U*`` come from
    each one-trait kernel; off the diagonal the traits are independent given y, so
    ``U*_kl = e^*_k' e^*_l`` and ``T*_kl = u^*_k' A^-1 u^*_l = lambda_k e^*_k' (y*_l - e^*_l)`` (from
    the one-trait equations ``Z'(y*_k - Z u^*_k) = A^-1 u^*_k / lambda_k``).
    """
    n_rec, t = resid.shape
    n_c = covs.shape[0]
    fail = (-np.inf, np.zeros((n_rec, t)), np.zeros((t, t)), np.zeros((t, t)), np.zeros((n_c, t, t)))
    ok, W, lam, ld_r = canonical_frame(G, R)
    if not ok:
        return fail
    ystar = np.ascontiguousarray(resid @ W.T)
    value = -0.5 * n_rec * ld_r
    E = np.empty((n_rec, t))
    dGs = np.zeros((t, t))     # d l* / d G*: diagonal from each one-trait kernel, then the cross terms
    dRs = np.zeros((t, t))
    one = np.ones((1, 1))
    none = np.zeros((0, 1, 1))
    col = np.empty((n_rec, 1))
    for k in range(t):
        for r in range(n_rec):
            col[r, 0] = ystar[r, k]
        g = np.full((1, 1), lam[k])
        v, d_res, dg, dr, _ = mme_logp_and_grad(col, g, one, none, term_pos, term_midx, term_coef, Cp, Ci, Cj,
                                                snode, Lp, Li, c_to_l, rec_pattern, rec_index, patterns, n_levels,
                                                const)
        if v == -np.inf:
            return fail
        value += v
        for r in range(n_rec):
            E[r, k] = -d_res[r, 0]
        dGs[k, k] = dg[0, 0]
        dRs[k, k] = dr[0, 0]
    for k in range(t):
        for l in range(k):
            u = 0.0
            a = 0.0
            b = 0.0
            for r in range(n_rec):
                u += E[r, k] * E[r, l]
                a += E[r, k] * (ystar[r, l] - E[r, l])
                b += E[r, l] * (ystar[r, k] - E[r, k])
            dRs[k, l] = dRs[l, k] = 0.5 * u                                              # U*_kl / 2
            dGs[k, l] = dGs[l, k] = 0.25 * (lam[k] * a + lam[l] * b) / (lam[k] * lam[l])   # T*_kl / 2 lam_k lam_l
    dG = W.T @ dGs @ W
    dR = W.T @ dRs @ W
    d_resid = -(E @ W)
    return value, d_resid, dG, dR, np.zeros((n_c, t, t))


@numba.njit(cache=True)
def mme_effects(resid, G, R, covs, noise, term_pos, term_midx, term_coef, Cp, Ci, Cj, snode, Lp, Li, c_to_l,
                rec_pattern, rec_index, patterns, n_levels, const):
    """Random effects given each draw s (permuted order), ``c^_s + L'^-1 D^-1/2 noise_s``.

    ``resid`` (S, n_records, t), ``G``/``R`` (S, t, t), ``covs`` (S, n_c, t, t), ``noise`` (S, n_u):
    standard normal draws for a draw from the conditional distribution N(C^-1 r, C^-1), zeros for
    its mean. Returns (S, n_u) and ok (S,) (False where a matrix was not positive definite).
    """
    S = resid.shape[0]
    n_u = len(Cp) - 1
    t = G.shape[1]
    n_gamma = 1 + covs.shape[1]
    out = np.zeros((S, n_u))
    good = np.zeros(S, dtype=np.bool_)
    Lx = np.empty(len(Li))
    D = np.empty(n_u)
    for s in range(S):
        ok, mats, _, _ = _small_matrices(G[s], R[s], covs[s], patterns, n_levels)
        if not ok:
            continue
        Cx = _assemble(mats, term_pos, term_midx, term_coef, len(Ci))
        if ldl_supernodal(Cp, Ci, Cx, snode, Lp, Li, Lx, D) != n_u:
            continue
        rhs, _ = _right_hand_side(resid[s], mats, n_gamma, rec_pattern, rec_index, n_u)
        chat = ldl_solve(Lp, Li, Lx, D, rhs)
        x = np.empty(n_u)
        for q in range(n_u):
            x[q] = noise[s, q] / math.sqrt(D[q])
        for j in range(n_u - 1, -1, -1):    # L' x = D^-1/2 noise, backward
            v = x[j]
            for p in range(Lp[j], Lp[j + 1]):
                v -= Lx[p] * x[Li[p]]
            x[j] = v
        for q in range(n_u):
            out[s, q] = chat[q] + x[q]
        good[s] = True
    return out, good


# These kernels call sparse_factor's: numba's cache alone would keep its old code after it changes.
forget_if_changed([mme_logp_and_grad, canonical_logp_and_grad, mme_effects], [__file__, sf.__file__])


# ------------------------------------------------------------------------------------------------
# NumPy-level helpers
# ------------------------------------------------------------------------------------------------

def _covs_array(covs, t: int) -> np.ndarray:
    if covs is None or len(covs) == 0:
        return np.zeros((0, t, t))
    return np.ascontiguousarray(np.asarray(covs, dtype=np.float64).reshape(-1, t, t))


def logp_and_grad(design: Design, resid, G, R, covs=(), canonical: bool | None = None) -> tuple:
    """(log L, d/d resid, d/dG, d/dR, d/dcovs) at residuals ``resid = y - X b`` (missing cells 0).

    By the canonical route where the design has it (``canonical=False`` forces the general one)."""
    t = design.t
    args = (np.ascontiguousarray(resid, dtype=np.float64), np.ascontiguousarray(G, dtype=np.float64),
            np.ascontiguousarray(R, dtype=np.float64), _covs_array(covs, t))
    if design.canonical and canonical is not False:
        return canonical_logp_and_grad(*args, *design.univariate.inputs())
    return mme_logp_and_grad(*args, *design.inputs())


def effects(design: Design, resid, G, R, covs=None, noise=None) -> tuple[np.ndarray, np.ndarray]:
    """Random effects per draw in the original block order: ((S, n_blocks, t), ok (S,)).

    Batched over a leading draw axis (``resid`` (S, n, t), ``G``/``R`` (S, t, t), ``covs``
    (S, n_c, t, t)); ``noise`` (S, n_unknowns) standard normal for draws from the conditional
    distribution, None for the conditional means (BLUP with known covariances).
    """
    resid = np.ascontiguousarray(resid, dtype=np.float64)
    S = resid.shape[0]
    t = design.t
    if design.canonical:
        return _canonical_effects(design, resid, np.asarray(G, dtype=np.float64), np.asarray(R, dtype=np.float64),
                                  noise)
    n_c = len(design.n_levels) - 1
    covs = np.zeros((S, 0, t, t)) if covs is None or n_c == 0 else np.ascontiguousarray(covs, dtype=np.float64)
    noise = np.zeros((S, design.n_unknowns)) if noise is None else np.ascontiguousarray(noise, dtype=np.float64)
    out, ok = mme_effects(resid, np.ascontiguousarray(G, dtype=np.float64), np.ascontiguousarray(R, dtype=np.float64),
                          covs, noise, *design.inputs())
    orig = np.empty_like(out)
    orig[:, design.perm] = out
    return orig.reshape(S, -1, t), ok


def _canonical_effects(design: Design, resid, G, R, noise) -> tuple[np.ndarray, np.ndarray]:
    """:func:`effects` by the canonical route: per draw, the one-trait effects of each canonical
    trait (genetic variance ``lambda_k``, residual variance 1) from ``N(C_k^-1 r_k, C_k^-1)``, turned
    back by ``u_i = W^-1 u*_i``. ``noise`` (S, n_blocks * t) is used trait by trait."""
    uni = design.univariate
    S, _, t = resid.shape
    n_b = uni.n_unknowns
    ok = np.ones(S, dtype=bool)
    ystar = np.zeros_like(resid)
    lam = np.ones((S, t))
    Winv = np.zeros((S, t, t))
    for s in range(S):
        good, W, lam[s], _ = canonical_frame(np.ascontiguousarray(G[s]), np.ascontiguousarray(R[s]))
        if not good:
            ok[s] = False
            continue
        Winv[s] = np.linalg.inv(W)
        ystar[s] = resid[s] @ W.T
    ustar = np.empty((S, n_b, t))
    one = np.ones((S, 1, 1))
    for k in range(t):
        eps = np.zeros((S, n_b)) if noise is None else np.ascontiguousarray(noise[:, k * n_b:(k + 1) * n_b])
        out, good = mme_effects(np.ascontiguousarray(ystar[:, :, k:k + 1]), np.ascontiguousarray(lam[:, k, None, None]),
                                one, np.zeros((S, 0, 1, 1)), eps, *uni.inputs())
        ok &= good
        ustar[:, uni.perm, k] = out
    return np.einsum("sbk,slk->sbl", ustar, Winv), ok


def apply_v_inverse(design: Design, resid, G, R, covs=()) -> np.ndarray:
    """``V^-1 e`` on the observed cells (0 elsewhere): ``R~^-1 (e - W c^)``, minus the residual gradient."""
    return -logp_and_grad(design, resid, G, R, covs)[1]


def generalised_least_squares(design: Design, y0: np.ndarray, X: np.ndarray, G, R, covs=()) -> np.ndarray:
    """The fixed effects ``b`` (p, t) maximising the likelihood with the covariances held:
    ``X~' V^-1 X~ b = X~' V^-1 y`` with ``X~`` the trait-expanded design over observed cells. Costs
    p t + 1 evaluations (for checks, not for sampling)."""
    p = X.shape[1]
    t = design.t
    observed = design.patterns[design.rec_pattern].astype(bool)
    M = np.empty((p * t, p * t))
    for x in range(p):
        for k in range(t):
            col = np.zeros(y0.shape)
            col[:, k] = X[:, x]
            col[~observed] = 0.0
            M[:, x * t + k] = (X.T @ apply_v_inverse(design, col, G, R, covs)).ravel()
    rhs = (X.T @ apply_v_inverse(design, np.where(observed, y0, 0.0), G, R, covs)).ravel()
    return np.linalg.solve(M, rhs).reshape(p, t)


def coefficient_matrix(design: Design, G, R, covs=()) -> sp.csc_matrix:
    """The permuted coefficient matrix ``C`` (full, symmetric) for these covariances, as scipy sparse
    (for checks and benchmarks)."""
    t = design.t
    ok, mats, _, _ = _small_matrices(np.asarray(G, dtype=np.float64), np.asarray(R, dtype=np.float64),
                                     _covs_array(covs, t), design.patterns, design.n_levels)
    if not ok:
        raise ValueError("a covariance matrix is not positive definite")
    Cx = _assemble(mats, design.term_pos, design.term_midx, design.term_coef, len(design.Ci))
    n = design.n_unknowns
    lower = sp.csc_matrix((Cx, design.Ci, design.Cp), shape=(n, n))
    return (lower + sp.tril(lower, -1).T).tocsc()
