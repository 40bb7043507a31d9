"""Estimating a null G for each dummy population from simulated breeding values.

Two estimators (docs/methods.md §5.1 step 3, §5.2), both vectorised over draws:

* ``mendelian`` (the default): ``G~_j = (1/n_j) sum_{i in j} phi_i phi_i' / b_i``, where
  ``phi_i = u_i - (u_sire + u_dam)/2`` is animal i's Mendelian-sampling deviation and ``b_i`` its
  Mendelian-sampling coefficient (Mrode 2014, p. 25). The ``phi_i`` are independent with
  ``var(phi_i) = b_i G`` (Henderson's decomposition A = T D T'), so ``E[G~_j] = G`` exactly,
  whatever the relatedness and inbreeding of the animals. Over all animals of a pedigree it is
  the estimate of G from known breeding values, ``U' A^-1 U / n`` (``A^-1 = (I-P)' D^-1 (I-P)``,
  Mrode 2014 p. 27). Note what follows: the ``phi_i / sqrt(b_i)`` are independent N(0, G)
  vectors, so the pedigree's relatedness does not enter this estimator's spread - a dummy
  population's null G varies like the mean of n_j independent outer products (Wishart with n_j
  degrees of freedom, divided by n_j), not like a sample covariance among relatives.
* ``sample``: the sample covariance of the breeding values, ``(1/(n_j-1)) sum (u_i - u_bar)
  (u_i - u_bar)'``, as the randomisation null was first described (Aguirre et al. 2014,
  Heredity 112:21-29). Relatives share breeding values, so ``E = c_j G`` with
  ``c_j = (tr A_j - 1'A_j 1 / n_j) / (n_j - 1) = 1 + Fbar_j - abar_j`` (exact; Fbar_j the mean
  inbreeding and abar_j the mean off-diagonal relationship of the n_j animals): it estimates a
  G shrunk by relatedness, not the base-population G the observed posterior estimates.

:func:`relatedness_deflation` computes ``c_j`` from the pedigree without forming A.
"""

from __future__ import annotations

import numpy as np

from ..pedigree.core import Pedigree
from .shuffle import block_bounds

ESTIMATORS = ("mendelian", "sample")

ESTIMATOR_DESCRIPTION = {
    "mendelian": ("mean of phi_i phi_i'/b_i over the Mendelian-sampling deviations phi_i of a dummy "
                  "population's animals; unbiased for G"),
    "sample": ("sample covariance (divisor n_j - 1) of a dummy population's simulated breeding "
               "values; expectation c G with c = 1 + Fbar - abar < 1 among relatives"),
}

DEFAULT_ESTIMATOR = "mendelian"

DEFAULT_REASON = (
    "mendelian is the default because it is unbiased for the G the breeding values were "
    "simulated with, whatever the relatedness and inbreeding of the animals, so null G's are on "
    "the scale of the observed posterior G's (which estimate the base-population G) and "
    "scale-sensitive statistics (tensor eigenvalues, response sizes) are comparable; the sample "
    "covariance is shrunk by relatedness by the factor c (reported per population), so with it "
    "prefer scale-free statistics")


def _check_sizes(sizes: np.ndarray, n_pooled: int, minimum: int, estimator: str) -> np.ndarray:
    bounds = block_bounds(sizes)
    if bounds[-1] != n_pooled:
        raise ValueError(f"population sizes add up to {bounds[-1]} but {n_pooled} animals are pooled")
    small = np.flatnonzero(np.diff(bounds) < minimum)
    if small.size:
        raise ValueError(f"the {estimator} estimator needs at least {minimum} animals per population; "
                         f"population {int(small[0])} has {int(np.diff(bounds)[small[0]])}")
    return bounds


def dummy_covariances(values: np.ndarray, perm: np.ndarray, sizes: list[int] | np.ndarray,
                      centre: bool) -> np.ndarray:
    """Second-moment matrices of each dummy population's values, per draw.

    Parameters
    ----------
    values
        Shape (S, N, t): a t-vector per pooled animal and draw.
    perm
        Shape (S, N): per draw, the pooled animals in shuffled order (see
        :func:`ped2g.null.shuffle.shuffle_permutations`); dummy population j takes the block
        ``bounds[j]:bounds[j+1]`` of it.
    sizes
        The m population sizes, summing to N.
    centre
        True: sample covariance ``X_c' X_c / (n_j - 1)`` with ``X_c`` centred on the dummy
        population's mean. False: ``X' X / n_j`` (values of known mean zero).

    Returns
    -------
    numpy.ndarray, shape (S, m, t, t)
    """
    values = np.asarray(values, dtype=float)
    S, N, t = values.shape
    if perm.shape != (S, N):
        raise ValueError(f"perm has shape {perm.shape}, expected {(S, N)}")
    bounds = _check_sizes(np.asarray(sizes), N, 2 if centre else 1, "sample" if centre else "mendelian")
    # Gather the shuffled rows with one flat np.take (faster than take_along_axis here).
    flat = (np.asarray(perm, dtype=np.int64) + (np.arange(S, dtype=np.int64) * N)[:, None]).ravel()
    shuffled = np.take(values.reshape(S * N, t), flat, axis=0).reshape(S, N, t)
    del flat
    out = np.empty((S, len(bounds) - 1, t, t))
    for j in range(len(bounds) - 1):  # loop over populations (few), never over draws
        X = shuffled[:, bounds[j]:bounds[j + 1]]
        n_j = X.shape[1]
        if centre:
            X = X - X.mean(axis=1, keepdims=True)
        out[:, j] = np.matmul(np.swapaxes(X, 1, 2), X) / (n_j - 1 if centre else n_j)
    return 0.5 * (out + np.swapaxes(out, -1, -2))


def mendelian_estimator(phi: np.ndarray, b: np.ndarray, perm: np.ndarray,
                        sizes: list[int] | np.ndarray) -> np.ndarray:
    """Unbiased null G per dummy population from Mendelian-sampling deviations.

    ``G~_j = (1/n_j) sum_{i in j} phi_i phi_i' / b_i``; ``E[G~_j] = G`` because the ``phi_i`` are
    independent with ``var(phi_i) = b_i G`` (Mrode 2014, p. 25: A = T D T', D = diag(b)).

    Parameters
    ----------
    phi
        Shape (S, N, t): Mendelian-sampling deviations of the pooled animals.
    b
        Shape (N,): their Mendelian-sampling coefficients (all > 0).
    perm, sizes
        As in :func:`dummy_covariances`.

    Returns
    -------
    numpy.ndarray, shape (S, m, t, t)
    """
    b = np.asarray(b, dtype=float)
    if b.shape != (np.shape(phi)[1],):
        raise ValueError(f"b has shape {b.shape}, expected ({np.shape(phi)[1]},)")
    if np.any(~(b > 0)):
        raise ValueError("Mendelian-sampling coefficients must be positive")
    z = np.asarray(phi, dtype=float) / np.sqrt(b)[None, :, None]
    return dummy_covariances(z, perm, sizes, centre=False)


def sample_covariance_estimator(u: np.ndarray, perm: np.ndarray,
                                sizes: list[int] | np.ndarray) -> np.ndarray:
    """Sample covariance of each dummy population's breeding values (divisor n_j - 1).

    Its expectation is ``c G`` with ``c < 1`` for related animals; see
    :func:`relatedness_deflation`.

    Parameters
    ----------
    u
        Shape (S, N, t): breeding values of the pooled animals.
    perm, sizes
        As in :func:`dummy_covariances`.

    Returns
    -------
    numpy.ndarray, shape (S, m, t, t)
    """
    return dummy_covariances(u, perm, sizes, centre=True)


def descendant_weights(ped: Pedigree, x: np.ndarray) -> np.ndarray:
    """``w = T' x`` for the pedigree's ``T = (I - P)^-1`` (Mrode 2014, p. 25), without forming T.

    ``w`` solves ``(I - P)' w = x``: ``w_i = x_i + 1/2 sum_{k: i parent of k} w_k``, filled from
    the youngest generation back (animals of one generation are never parents of each other).
    Selfing (sire = dam) passes both halves to the one parent, as in T.
    """
    w = np.asarray(x, dtype=float).copy()
    if w.shape != (ped.n,):
        raise ValueError(f"x has shape {w.shape}, expected ({ped.n},)")
    for members in reversed(ped.generations):
        for parent in (ped.sire[members], ped.dam[members]):
            known = parent >= 0
            np.add.at(w, parent[known], 0.5 * w[members[known]])
    return w


def relationship_quadratic(ped: Pedigree, x: np.ndarray) -> float:
    """``x' A x`` for the pedigree's additive relationship matrix A, in O(n) without forming A.

    ``x' A x = sum_i b_i (T' x)_i^2`` from ``A = T D T'``, ``D = diag(b)`` (Mrode 2014, p. 25).
    """
    w = descendant_weights(ped, x)
    return float(np.sum(ped.mendelian * w * w))


def relatedness_deflation(ped: Pedigree, members: np.ndarray) -> float:
    """Expected ratio of the sample covariance of breeding values to G for a set of animals.

    ``c = (tr A_S - 1'A_S 1 / n) / (n - 1) = 1 + Fbar - abar`` for the n animals S (A_S their
    block of A, Fbar their mean inbreeding, abar the mean of the off-diagonal entries of A_S):
    ``E[(1/(n-1)) sum (u_i - u_bar)(u_i - u_bar)'] = c G`` when ``U ~ MatrixNormal(0, A, G)``
    (docs/methods.md §5.2; exact). ``nan`` for fewer than two animals.
    """
    members = np.asarray(members, dtype=np.int64)
    n = members.size
    if n < 2:
        return float("nan")
    x = np.zeros(ped.n)
    x[members] = 1.0
    trace = float(np.sum(1.0 + ped.inbreeding[members]))
    total = relationship_quadratic(ped, x)
    return (trace - total / n) / (n - 1)


def pooled_deflation(peds: list[Pedigree], members: list[np.ndarray]) -> float:
    """Expected deflation ``c`` of a dummy population drawn at random from several pedigrees.

    The pedigrees are unrelated to each other (A block-diagonal). A dummy population of any size
    drawn uniformly without replacement from the N pooled animals has expected sample
    covariance ``c G`` (if every population had the same G) with
    ``c = 1 + Fbar_pool - abar_pool``, ``abar_pool = sum_{i != k} a_ik / (N (N - 1))`` over all
    pooled pairs (pairs from different pedigrees contribute 0). Derived from
    ``P(i in D) = n/N`` and ``P(i, k in D) = n(n-1)/(N(N-1))``.
    """
    N = sum(int(np.size(m)) for m in members)
    if N < 2:
        return float("nan")
    trace = 0.0
    off = 0.0
    for ped, mem in zip(peds, members):
        mem = np.asarray(mem, dtype=np.int64)
        x = np.zeros(ped.n)
        x[mem] = 1.0
        tr = float(np.sum(1.0 + ped.inbreeding[mem]))
        trace += tr
        off += relationship_quadratic(ped, x) - tr
    return trace / N - off / (N * (N - 1))
