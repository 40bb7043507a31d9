"""Log-density of many independent small multivariate normals, each with its own covariance.

For records i = 1..n with residual vectors r_i (k traits) and covariances Sigma_i::

    log p(r_i) = -1/2 z_i' z_i - sum_j log L_i[j, j] - (k_i / 2) log(2 pi),
    Sigma_i = L_i L_i' (Cholesky),  L_i z_i = r_i (forward substitution)

The Cholesky factorisation and the forward substitution are unrolled over the k traits, so the
graph is made of elementwise operations on length-n vectors only. PyTensor fuses them into a few
loops that compile natively under nutpie's numba backend (no batched LAPACK call, no eigh in
object mode), the cost is O(n k^3) per evaluation, and the gradient is finite whenever every
Sigma_i is positive definite (also when, e.g., Sigma_i = lambda_i G + R with G proportional to R,
where eigenvalue-based forms have degenerate eigenvalues and undefined derivatives).

Missing values are handled exactly: with an observed mask o_i (1 observed, 0 missing), the
density of the observed sub-vector equals the full formula applied to the padded covariance
``o_j o_l Sigma_jl + (1 - o_j) delta_jl`` and residual ``o_j r_j`` (the padded coordinates are
independent standard normals at 0) minus their constant ``-1/2 log(2 pi)`` each.

Reference: the Cholesky-Banachiewicz recursion, e.g. Golub & Van Loan, *Matrix Computations*
(4th ed., 2013), Algorithm 4.2.1 [M].

The engines no longer build this graph: their likelihoods are Ops with numba kernels
(:mod:`ped2g.fit.scaled_pair_op` for the marginal engine, :mod:`ped2g.fit.observed_normal_op`
for the latent one), which compile faster. :func:`mvn_logp_entries` stays as the unrolled
reference that benchmarks/likelihood_benchmark.py measures them against.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
import pytensor.tensor as pt

LOG_2PI = float(np.log(2.0 * np.pi))

CovEntry = Callable[[int, int], "pt.TensorLike"]


def mvn_logp_entries(resid: Sequence, cov_entry: CovEntry, observed=None) -> pt.TensorVariable:
    """Per-record log-density from residual columns and a function giving covariance entries.

    Parameters
    ----------
    resid
        k tensors (or arrays), the residual of each trait, each of shape (n,). Missing cells must
        hold a finite value (any; they are masked).
    cov_entry
        ``cov_entry(j, l)`` for ``j >= l`` returns entry (j, l) of every record's covariance,
        broadcastable to (n,) (a scalar when all records share it). Only the lower triangle is
        asked for.
    observed
        Optional (n, k) array or tensor of 0/1 (or bool): which cells are observed. None means
        all observed.

    Returns
    -------
    pytensor.tensor.TensorVariable
        Shape (n,): log-density of each record's observed traits.
    """
    k = len(resid)
    r = [pt.as_tensor_variable(x) for x in resid]
    if observed is not None:
        obs = pt.as_tensor_variable(observed)
        o = [pt.cast(obs[:, j], "float64") for j in range(k)]
        r = [o[j] * r[j] for j in range(k)]

        def entry(j: int, l: int):
            value = cov_entry(j, l)
            if j == l:
                return o[j] * value + (1.0 - o[j])
            return o[j] * o[l] * value
    else:
        o = None
        entry = cov_entry

    L: dict[tuple[int, int], pt.TensorVariable] = {}
    z: list[pt.TensorVariable] = []
    log_diag = 0.0
    for j in range(k):
        for l in range(j):
            s = entry(j, l)
            for m in range(l):
                s = s - L[j, m] * L[l, m]
            L[j, l] = s / L[l, l]
        d = entry(j, j)
        for m in range(j):
            d = d - L[j, m] ** 2
        L[j, j] = pt.sqrt(d)
        log_diag = log_diag + pt.log(L[j, j])
        zj = r[j]
        for m in range(j):
            zj = zj - L[j, m] * z[m]
        z.append(zj / L[j, j])
    quad = z[0] ** 2
    for j in range(1, k):
        quad = quad + z[j] ** 2
    if o is None:
        n_obs = float(k)
    else:
        n_obs = o[0]
        for j in range(1, k):
            n_obs = n_obs + o[j]
    return -0.5 * quad - log_diag - 0.5 * LOG_2PI * n_obs


def batched_mvn_logp(resid, cov, observed=None) -> pt.TensorVariable:
    """Per-record log-density with residuals (n, k) and covariances (n, k, k) or (k, k).

    A convenience wrapper of :func:`mvn_logp_entries` (which avoids slicing full tensors when
    the entries can be built directly, e.g. ``lambda_i G + R``).

    Returns
    -------
    pytensor.tensor.TensorVariable
        Shape (n,).
    """
    resid = pt.as_tensor_variable(resid)
    cov = pt.as_tensor_variable(cov)
    k = int(resid.type.shape[1]) if resid.type.shape[1] is not None else None
    if k is None:
        raise ValueError("batched_mvn_logp needs the number of traits to be known (static shape)")
    if cov.ndim == 2:
        return mvn_logp_entries([resid[:, j] for j in range(k)], lambda j, l: cov[j, l], observed)
    return mvn_logp_entries([resid[:, j] for j in range(k)], lambda j, l: cov[:, j, l], observed)


def scaled_pair_logp(resid: Sequence, lam, G, R) -> pt.TensorVariable:
    """Total log-density of records with covariances ``lam_i G + R`` (the rotated animal model).

    One Op with a numba kernel that returns value and gradient in one pass
    (:mod:`ped2g.fit.scaled_pair_op`), rather than the unrolled graph of :func:`mvn_logp_entries`,
    whose many small nodes numba compiles one by one (192 nodes in the marginal engine's
    log-density and gradient at 4 traits, against 118 with the Op).

    Parameters
    ----------
    resid
        k tensors of shape (n,), or one (n, k) tensor.
    lam
        Shape (n,): the eigenvalue of each rotated record.
    G, R
        (k, k) tensors.

    Returns
    -------
    pytensor.tensor.TensorVariable
        A scalar: the sum over records.
    """
    from .scaled_pair_op import scaled_pair_op

    if isinstance(resid, (list, tuple)):
        resid = pt.stack([pt.as_tensor_variable(x) for x in resid], axis=1)
    return scaled_pair_op(resid, lam, G, R)[0]
