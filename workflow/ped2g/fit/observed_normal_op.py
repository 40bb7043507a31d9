"""The latent engine's record likelihood as one PyTensor Op: every record's observed traits.

For records i = 1..n with residual rows r_i (k traits, some missing) and one residual covariance R::

    log L = sum_i log N(r_i,o | 0, R_oo),     o = the traits observed in record i

the density of the observed traits only, which is the exact marginal of the normal over the
missing ones. Records are grouped by their pattern of observed traits; each pattern's R_oo is
factorised once (Cholesky-Banachiewicz, Golub & Van Loan, *Matrix Computations*, 4th ed.,
Algorithm 4.2.1 [M]), so a call costs O(patterns x k^3 + n k^2). The gradient comes in the same
pass, from the standard identities for the normal log-density (Petersen & Pedersen, *The Matrix
Cookbook*, 2012, eqs. 57 and 61 [M])::

    d log N / d r_i,o = -R_oo^-1 r_i,o = -w_i
    d log N / d R_oo  = -1/2 (R_oo^-1 - w_i w_i')

(zero for the missing cells). The function is defined on the symmetric part of R, so its gradient
with respect to every entry is the symmetric matrix above. Where an R_oo is not positive definite
the log-likelihood is -inf (NUTS treats the step as divergent).

Why an Op: the same algebra written as PyTensor operations (a Cholesky unrolled over the traits)
is dozens of small graph nodes per copy, each type-inferred and compiled by numba; this kernel is
compiled once and cached on disk.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import pytensor.tensor as pt
from pytensor.gradient import DisconnectedType
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op

from .numba_ops import register_kernel

LOG_2PI = math.log(2.0 * math.pi)


def observed_patterns(observed: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The distinct rows of the (records, traits) observed mask and each record's row among them.

    Returns ``(patterns, index)``: ``patterns`` (p, k) int64 0/1, ``index`` (n,) int64, with
    ``patterns[index] == observed``.
    """
    observed = np.asarray(observed, dtype=bool)
    patterns, index = np.unique(observed, axis=0, return_inverse=True)
    return patterns.astype(np.int64), np.asarray(index, dtype=np.int64).reshape(-1)


@numba.njit(cache=True)
def observed_normal_logp_and_grad(resid, R, pattern, patterns):
    """(log L, d log L / d resid, d log L / dR); see the module docstring."""
    n, k = resid.shape
    p = patterns.shape[0]
    d_resid = np.zeros((n, k))
    dR = np.zeros((k, k))
    S = np.empty((k, k))
    for j in range(k):
        for l in range(k):
            S[j, l] = 0.5 * (R[j, l] + R[l, j])
    idx = np.zeros((p, k), dtype=np.int64)
    size = np.zeros(p, dtype=np.int64)
    inv = np.zeros((p, k, k))
    log_det = np.zeros(p)
    L = np.zeros((k, k))
    M = np.zeros((k, k))
    for q in range(p):
        m = 0
        for j in range(k):
            if patterns[q, j] != 0:
                idx[q, m] = j
                m += 1
        size[q] = m
        # L L' = S_oo (lower triangular L), then M = L^-1 and S_oo^-1 = M'M
        for a in range(m):
            for b in range(a + 1):
                v = S[idx[q, a], idx[q, b]]
                for c in range(b):
                    v -= L[a, c] * L[b, c]
                if a == b:
                    if not v > 0.0:
                        return -np.inf, np.zeros((n, k)), np.zeros((k, k))
                    L[a, a] = math.sqrt(v)
                    log_det[q] += 2.0 * math.log(L[a, a])
                else:
                    L[a, b] = v / L[b, b]
        for c in range(m):
            for a in range(c, m):
                if a == c:
                    M[a, c] = 1.0 / L[a, a]
                    continue
                v = 0.0
                for b in range(c, a):
                    v -= L[a, b] * M[b, c]
                M[a, c] = v / L[a, a]
        for a in range(m):
            for b in range(m):
                v = 0.0
                for c in range(max(a, b), m):
                    v += M[c, a] * M[c, b]
                inv[q, a, b] = v
    total = 0.0
    count = np.zeros(p)
    outer = np.zeros((p, k, k))
    w = np.empty(k)
    for i in range(n):
        q = pattern[i]
        m = size[q]
        count[q] += 1.0
        quad = 0.0
        for a in range(m):
            v = 0.0
            for b in range(m):
                v += inv[q, a, b] * resid[i, idx[q, b]]
            w[a] = v
            quad += resid[i, idx[q, a]] * v
            d_resid[i, idx[q, a]] = -v
        for a in range(m):
            for b in range(a + 1):
                outer[q, a, b] += w[a] * w[b]
        total -= 0.5 * quad
    for q in range(p):
        m = size[q]
        total -= 0.5 * count[q] * (m * LOG_2PI + log_det[q])
        for a in range(m):
            for b in range(a + 1):
                g = -0.5 * (count[q] * inv[q, a, b] - outer[q, a, b])
                ja, jb = idx[q, a], idx[q, b]
                dR[ja, jb] += g
                if a != b:
                    dR[jb, ja] += g
    return total, d_resid, dR


class ObservedNormalLogp(Op):
    """Outputs (log L, d log L / d resid, d log L / dR) for inputs (resid, R, pattern, patterns).

    The gradient outputs are what :meth:`L_op` returns, so a NUTS gradient costs one kernel call.
    Only the first output is differentiable, with respect to resid and R.
    """

    __props__ = ()

    def make_node(self, resid, R, pattern, patterns):
        resid = pt.as_tensor_variable(resid, dtype="float64")
        R = pt.as_tensor_variable(R, dtype="float64")
        pattern = pt.as_tensor_variable(pattern, dtype="int64")
        patterns = pt.as_tensor_variable(patterns, dtype="int64")
        if resid.ndim != 2 or R.ndim != 2 or pattern.ndim != 1 or patterns.ndim != 2:
            raise TypeError("ObservedNormalLogp needs resid (n, k), R (k, k), pattern (n,) and patterns (p, k)")
        return Apply(self, [resid, R, pattern, patterns], [pt.dscalar(), resid.type(), R.type()])

    def perform(self, node, inputs, output_storage):
        resid, R = (np.asarray(x, dtype=np.float64) for x in inputs[:2])
        pattern, patterns = (np.asarray(x, dtype=np.int64) for x in inputs[2:])
        total, d_resid, dR = observed_normal_logp_and_grad(resid, R, pattern, patterns)
        output_storage[0][0] = np.asarray(total)
        output_storage[1][0] = d_resid
        output_storage[2][0] = dR

    def infer_shape(self, fgraph, node, shapes):
        return [(), shapes[0], shapes[1]]

    def connection_pattern(self, node):
        return [[True, True, True], [True, True, True], [False, False, False], [False, False, False]]

    def L_op(self, inputs, outputs, output_grads):
        g = output_grads[0]
        for other in output_grads[1:]:
            if not isinstance(other.type, DisconnectedType):
                raise NotImplementedError("only the log-likelihood output of ObservedNormalLogp is differentiable")
        return [g * outputs[1], g * outputs[2], DisconnectedType()(), DisconnectedType()()]


observed_normal_op = ObservedNormalLogp()


def _observed_normal(op):
    def observed_normal(resid, R, pattern, patterns):
        total, d_resid, dR = observed_normal_logp_and_grad(resid, R, pattern, patterns)
        return np.asarray(total), d_resid, dR

    return observed_normal


register_kernel(ObservedNormalLogp, __file__, _observed_normal)
