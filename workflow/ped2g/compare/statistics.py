"""Every comparison method on one set of G draws, as labelled per-draw arrays.

:func:`build_references` fixes, from the observed draws, everything that must be shared by the
observed and the null draws (the skewers, Krzanowski's reference axes, the eigentensors, the g_max
signs); :func:`draw_statistics` then runs every method on a :class:`DrawSet` (observed or null)
and returns ``{name: xarray.DataArray}`` with the draw axis first.

Draws that are not positive definite (see :func:`ped2g.compare.matrices.positive_definite`) are
never repaired. A statistic of one population is NaN on the draws where that population's G is
not positive definite; a statistic of a pair, on the draws where either is not; a statistic of
the whole set (eigenvalues of H, variance along eigentensors), on the draws where any is not.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from . import dimensions, distance, evolvability, gmax, skewers, subspace, tensor
from .matrices import eigh_descending

#: Meaning of every non-draw dimension, for labels and the tidy tables.
AXIS_MEANING = {
    "subspace_axis": "eigenvector of Krzanowski's H from the posterior-mean G matrices (1 = largest eigenvalue)",
    "eigentensor": "eigentensor of the posterior-mean covariance tensor S (1 = largest eigenvalue)",
    "tensor_vector": "eigenvector of the eigentensor, by decreasing |eigenvalue| (1 = leading)",
    "trait": "trait",
}


@dataclass
class DrawSet:
    """G draws ready for comparison.

    Attributes
    ----------
    G : numpy.ndarray, shape (S, m, t, t)
        On the comparison scale.
    G_common : numpy.ndarray, shape (S, m, t, t)
        On the pooled scale shared by all populations of a draw (for the divergence angle).
    divergence : numpy.ndarray, shape (S, t)
        Unit divergence direction of population means on the pooled scale, per draw.
    valid : numpy.ndarray of bool, shape (S, m)
        Whether each G is positive definite.
    """

    G: np.ndarray
    G_common: np.ndarray
    divergence: np.ndarray
    valid: np.ndarray


@dataclass
class References:
    """Quantities fixed once from the observed draws and shared with the null."""

    skewers: np.ndarray                      # (N, t)
    subspace_dims: int
    subspace_eigenvalues: np.ndarray         # (t,)
    subspace_axes: np.ndarray                # (t, t) columns
    tensor: dict[str, np.ndarray]            # from tensor.eigentensors
    tensor_S: np.ndarray                     # (q, q) posterior-mean S
    gmax: np.ndarray                         # (m, t) posterior-mean g_max, sign reference
    gmax_common: np.ndarray                  # (m, t) the same on the pooled scale
    extra: dict[str, object] = field(default_factory=dict)


def _safe(G: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Replace invalid matrices by the identity so batched linear algebra never fails on them."""
    eye = np.broadcast_to(np.eye(G.shape[-1]), G.shape)
    return np.where(valid[..., None, None], G, eye)


def _mean_valid(G: np.ndarray, valid: np.ndarray) -> np.ndarray:
    w = valid.astype(float)[..., None, None]
    return (G * w).sum(0) / w.sum(0)


def build_references(obs: DrawSet, n_skewers: int, subspace_dims: int,
                     rng: np.random.Generator) -> References:
    """Fix the skewers and the reference axes from the observed draws.

    * skewers: ``n_skewers`` uniform unit vectors from ``rng``;
    * Krzanowski axes: eigenvectors of H of the posterior-mean G matrices (means over each
      population's positive-definite draws);
    * eigentensors: of the posterior-mean S over the draws where every G is positive definite,
      the leading ``min(m - 1, q)`` kept;
    * g_max signs: the leading eigenvectors of the posterior-mean G matrices.
    """
    S, m, t, _ = obs.G.shape
    B = skewers.unit_skewers(n_skewers, t, rng)
    G_mean = _mean_valid(obs.G, obs.valid)
    w_h, h = subspace.reference_axes(G_mean, subspace_dims)
    all_valid = obs.valid.all(axis=1)
    S_draws = tensor.covariance_tensor(obs.G[all_valid])
    S_ref = S_draws.mean(axis=0)
    ten = tensor.eigentensors(S_ref, t, n_keep=min(m - 1, tensor.n_elements(t)))
    _, v = eigh_descending(G_mean)
    _, v_common = eigh_descending(_mean_valid(obs.G_common, obs.valid))
    return References(skewers=B, subspace_dims=subspace_dims, subspace_eigenvalues=w_h,
                      subspace_axes=h, tensor=ten, tensor_S=S_ref, gmax=v[..., :, 0],
                      gmax_common=v_common[..., :, 0])


def draw_statistics(ds: DrawSet, refs: References, populations: list[str], traits: list[str],
                    budget_bytes: float = 256e6) -> dict[str, xr.DataArray]:
    """Run every method on every draw of ``ds``.

    Returns
    -------
    dict of xarray.DataArray
        Keyed ``<method>_<statistic>``; dims start with ``draw``; attributes ``method``,
        ``statistic``, ``description`` and ``pairs`` (``"upper"`` for pairwise statistics, whose
        tables keep each unordered pair once).
    """
    valid = ds.valid
    G = _safe(ds.G, valid)
    pair_ok = valid[:, :, None] & valid[:, None, :]
    set_ok = valid.all(axis=1)
    n_eig = refs.tensor["E"].shape[0]
    coords = {"population": populations, "population2": populations, "trait": traits,
              "subspace_axis": np.arange(1, len(traits) + 1), "eigentensor": np.arange(1, n_eig + 1),
              "tensor_vector": np.arange(1, len(traits) + 1)}
    out: dict[str, xr.DataArray] = {}

    def put(method: str, stat: str, dims: tuple[str, ...], values: np.ndarray, ok: np.ndarray,
            description: str, pairs: str = "") -> None:
        ok = ok.reshape(ok.shape + (1,) * (values.ndim - ok.ndim))
        values = np.where(ok, values, np.nan)
        arr = xr.DataArray(values, dims=("draw", *dims), coords={d: coords[d] for d in dims})
        arr.attrs.update(method=method, statistic=stat, description=description, pairs=pairs)
        out[f"{method}_{stat}"] = arr

    pop, pair = ("population",), ("population", "population2")

    sk = skewers.skewer_statistics(G, refs.skewers, budget_bytes)
    put("skewers", "correlation", pair, sk["correlation"], pair_ok,
        "mean vector correlation of the responses to the same random skewers", "upper")
    put("skewers", "angle", pair, sk["angle"], pair_ok,
        "mean angle between the responses to the same random skewers (degrees)", "upper")
    put("skewers", "magnitude_ratio", pair, sk["magnitude_ratio"], pair_ok,
        "geometric mean of |response of population| / |response of population2|", "upper")
    put("skewers", "response_magnitude", pop, sk["response_magnitude"], valid,
        "mean length of the response to a unit random skewer")

    k = refs.subspace_dims
    cs = subspace.common_subspace(G, k)
    put("subspace", "eigenvalue", ("subspace_axis",), cs["eigenvalues"], set_ok,
        f"eigenvalue of Krzanowski's H on this draw (sorted, largest first; k = {k} per population; "
        "between 0 and the number of populations)")
    put("subspace", "projection", ("subspace_axis",),
        np.einsum("ij,sik,kj->sj", refs.subspace_axes, cs["H"], refs.subspace_axes), set_ok,
        "h' H h for the fixed reference axis h: sum over populations of cos^2 of the angle to each subspace")
    put("subspace", "angle", (*pop, "subspace_axis"), subspace.angles_to_axes(cs["A"], refs.subspace_axes),
        valid, "angle between the population's k-dimensional subspace and the fixed reference axis (degrees)")
    put("subspace", "eigengap", pop, cs["eigengap"], valid,
        "(lambda_k - lambda_k+1) / lambda_1 of the population's G; small values mean an ill-determined subspace")

    ten = refs.tensor
    S_draws = tensor.covariance_tensor(G)
    put("tensor", "variance", ("eigentensor",), tensor.project(S_draws, ten["vectors"]), set_ok,
        "among-population variance along the fixed eigentensor, s' S s")
    put("tensor", "coordinate", (*pop, "eigentensor"), tensor.coordinates(G, ten["E"]), valid,
        "coordinate of the population's G on the fixed eigentensor, tr(G E)")
    put("tensor", "vector_variance", (*pop, "eigentensor", "tensor_vector"),
        tensor.variance_along(G, ten["e"]), valid,
        "genetic variance e' G e along an eigenvector e of the fixed eigentensor")

    lead = gmax.leading_axis(G)
    put("gmax", "share", pop, lead["share"], valid, "share of genetic variance along g_max, lambda_1 / tr G")
    put("gmax", "eigengap", pop, lead["eigengap"], valid,
        "(lambda_1 - lambda_2) / lambda_1; small values mean an unstable g_max")
    put("gmax", "loading", (*pop, "trait"), gmax.signed_vectors(lead["vector"], refs.gmax), valid,
        "element of g_max, signed to agree with the g_max of the posterior-mean G")
    put("gmax", "angle_between", pair, gmax.pair_angles(lead["vector"]), pair_ok,
        "angle between the g_max of the two populations (degrees, 0-90)", "upper")
    lead_c = gmax.leading_axis(_safe(ds.G_common, valid))
    put("gmax", "angle_to_divergence", pop,
        gmax.angle(lead_c["vector"], ds.divergence[:, None, :]), valid,
        "angle between g_max and d_max, the leading axis of divergence among population means, "
        "both on the pooled scale (degrees, 0-90)")

    ev = evolvability.evolvability_means(G, refs.skewers, budget_bytes)
    words = {"evolvability": "mean evolvability e = beta'G beta over random unit gradients (exact: tr G / t)",
             "conditional_evolvability": "mean conditional evolvability 1 / (beta'G^-1 beta)",
             "respondability": "mean respondability |G beta|",
             "autonomy": "mean autonomy c(beta) / e(beta)",
             "integration": "1 - mean autonomy"}
    for name, text in words.items():
        put("evolvability", name, pop, ev[name], valid, text)

    dims_ = dimensions.effective_dimensions(G)
    put("dimensions", "effective_dimensions", pop, dims_["kirkpatrick"], valid,
        "effective number of dimensions, sum(lambda) / lambda_1 (between 1 and the number of traits)")
    put("dimensions", "participation_ratio", pop, dims_["participation_ratio"], valid,
        "participation ratio (sum lambda)^2 / sum lambda^2 (between 1 and the number of traits)")

    put("distance", "riemannian", pair, distance.pairwise_distances(G), pair_ok,
        "Riemannian (Foerstner) distance sqrt(sum ln^2 lambda_i(G1^-1 G2))", "upper")
    return out
