"""The latent engine: breeding values sampled as parameters, in a non-centred form.

Model (standardised scale, ``t`` traits, animals ``i`` of the pruned pedigree, records ``r``)::

    y_r = x_r' B + a_{animal(r)} + sum_k u_{k, level_k(r)} + e_r,     e_r ~ N(0, R)
    a   = T D^{1/2} W L_G'            W ~ N(0, I)  (n x t),  G = L_G L_G'
    u_k = V_k L_k'                    V_k ~ N(0, I) (levels x t), Sigma_k = L_k L_k'

``A = T D T'`` with ``T = (I - P)^{-1}`` (P holds 1/2 at each known parent) and ``D = diag(b)``,
the Mendelian-sampling coefficients that carry the parents' inbreeding (Mrode 2014, p. 25;
Quaas 1976). So ``vec(a) ~ N(0, G kron A)`` (trait-major stacking, docs/methods.md §0.2) without ever
forming A or a factor of it: the product by T is the recursion

    a_i = m_i + (a_sire(i) + a_dam(i)) / 2,      m = D^{1/2} W L_G',

done in one pass over the animals in generation order (every parent comes before its offspring)
by one PyTensor Op (:mod:`ped2g.fit.pedigree_op`) around the pedigree's one recursion
(:mod:`ped2g.pedigree.recursion`; its gradient is the pass back up with T'), so a gradient costs O(animals x traits) plus O(records x traits^2) and the
compiled graph does not grow with the depth of the pedigree. Records with missing trait values
contribute the density of their observed traits only (an exact marginal), through one more Op
(:mod:`ped2g.fit.observed_normal_op`).

Assumptions stated plainly: additive genetic effects only (no dominance or epistasis), Gaussian
residuals with one R for every record, founders of the pruned pedigree unrelated and non-inbred
and drawn from one base population with covariance G, no selection on unrecorded traits. Effects
not in the model (shared environment of relatives, maternal effects, assortative mating) are
absorbed into G when relatives share them.

Cautions: (1) the elements of G mix far more slowly here than in the marginal engine (bulk ESS
per draw of a few percent on the benchmark data, against most of one for the marginal engine;
see benchmarks/fit_benchmark.py), so use this engine where the marginal one does not apply and
expect to need long chains; the fit stage's R-hat/ESS checks say when the chains are too short.
(2) Every draw of the standardised breeding values ``w_animal`` is kept in the trace:
``8 x animals x traits x chains x draws`` bytes (1 GB for 8,000 animals, 4 traits, 4 x 1,000
draws). (3) nutpie compiles the model with numba; expect tens of seconds before sampling starts.

The engine's object for the interface of :mod:`ped2g.fit.engine` is :class:`LatentEngine`.
"""

from __future__ import annotations

import numpy as np

from ..pedigree.core import Pedigree
from ..config import with_defaults
from .data import FitData

__all__ = ["LatentEngine", "applicable", "build_model", "breeding_values", "generation_layout",
           "NUTPIE_OPTIONS"]

#: Extra options for ``nutpie.sample`` with this engine. The low-rank modified mass matrix adapts
#: to the correlation between the scale of G and the standardised breeding values; on the
#: benchmark data (n = 500, 4 traits, 2 chains of 300 + 300) it raised the minimum bulk ESS over
#: G from 13 to 33 for about twice the sampling time.
NUTPIE_OPTIONS = {"low_rank_modified_mass_matrix": True}


# --------------------------------------------------------------------------------------------
# Pedigree layout
# --------------------------------------------------------------------------------------------

def generation_layout(ped: Pedigree) -> dict[str, np.ndarray]:
    """Reorder a pedigree by generation so that each generation is one contiguous block.

    Returns
    -------
    dict with
        ``order`` (n,): pedigree positions in generation order (generation 0 first);
        ``rank`` (n,): inverse permutation, ``rank[order] = arange(n)``;
        ``sire``, ``dam`` (n,): parents as positions in the *generation order*, ``n`` (a zero
        sentinel row) when unknown;
        ``bounds`` (n_generations + 1,): block boundaries, generation g is ``bounds[g]:bounds[g+1]``;
        ``sqrt_b`` (n,): square roots of the Mendelian-sampling coefficients, generation order.
    """
    n = ped.n
    blocks = [g for g in ped.generations if len(g)]
    order = np.concatenate(blocks) if blocks else np.zeros(0, dtype=np.int64)
    rank = np.empty(n, dtype=np.int64)
    rank[order] = np.arange(n)
    sire = ped.sire[order]
    dam = ped.dam[order]
    sire_g = np.where(sire >= 0, rank[np.maximum(sire, 0)], n)
    dam_g = np.where(dam >= 0, rank[np.maximum(dam, 0)], n)
    bounds = np.concatenate([[0], np.cumsum([len(g) for g in blocks])]).astype(np.int64)
    # Every parent sits in an earlier block (the recursion below relies on it).
    block_of = np.repeat(np.arange(len(blocks)), np.diff(bounds))
    for par in (sire_g, dam_g):
        known = par < n
        if np.any(block_of[par[known]] >= block_of[known]):
            raise ValueError("pedigree generations are inconsistent: a parent is not in an earlier generation")
    b = ped.mendelian[order]
    if np.any(b <= 0):
        raise ValueError("Mendelian-sampling coefficients must be positive (inbreeding F < 1)")
    return {"order": order, "rank": rank, "sire": sire_g.astype(np.int64), "dam": dam_g.astype(np.int64),
            "bounds": bounds, "sqrt_b": np.sqrt(b)}


# --------------------------------------------------------------------------------------------
# Engine interface
# --------------------------------------------------------------------------------------------

def applicable(data: FitData) -> tuple[bool, str]:
    """Whether the latent engine can fit ``data``, and why.

    It handles every design the fit stage accepts (any pedigree size, missing trait values,
    repeated records, extra random effects); its cost per gradient is linear in the number of
    animals and records.
    """
    return True, (f"latent engine: {data.pedigree.n} animals x {data.n_traits} traits sampled as "
                  "non-centred parameters; cost per gradient linear in animals and records")


def build_model(data: FitData, model_config: dict, animal_effect=None):
    """Build the latent-engine PyMC model on the standardised scale.

    Parameters
    ----------
    data : FitData
    model_config : dict
        ``config["model"]``: ``priors`` and ``fixed_covariances`` (original units).
    animal_effect : callable, optional
        ``animal_effect(w, chol_G, layout) -> a`` replaces the pedigree recursion (rows of ``a``
        in the generation order of ``layout``); used only by benchmark baselines (for example a
        dense Cholesky factor of A). None: the recursion.

    Returns
    -------
    pymc.Model
        With Deterministics ``G``, ``R`` (t, t), ``beta`` (p, t) and ``cov_<name>`` per extra
        random effect; free variables ``w_animal`` (n, t; rows in the generation order of
        :func:`generation_layout`) and ``v_<name>`` (levels, t). Large arrays (records, design
        matrix, parent and level indices) enter as ``pm.Data``, so the graph has no large
        constants.
    """
    import pymc as pm
    import pytensor.tensor as pt

    from .observed_normal_op import observed_normal_op, observed_patterns
    from .pedigree_op import down_product
    from .priors import covariance_prior, fixed_covariances, fixed_effects_prior

    ped = data.pedigree
    t = data.n_traits
    n = ped.n
    priors = dict(with_defaults(model_config, "model")["priors"])
    fixed = fixed_covariances(model_config, np.asarray(data.y_scale, dtype=float), list(data.traits))
    lay = generation_layout(ped)
    y = np.asarray(data.y, dtype=float)
    patterns, pattern = observed_patterns(~np.isnan(y))
    rec_animal = lay["rank"][np.asarray(data.record_animal, dtype=np.int64)]
    X = np.asarray(data.X, dtype=float)
    coords = {"trait": list(data.traits), "trait2": list(data.traits), "x_name": list(data.x_names)}

    with pm.Model(coords=coords) as model:
        if animal_effect is None:
            sire = pm.Data("gen_sire", lay["sire"])
            dam = pm.Data("gen_dam", lay["dam"])
            sqrt_b = pm.Data("gen_sqrt_b", lay["sqrt_b"])

        G, chol_G = covariance_prior("G", t, priors, None if fixed is None else fixed["G"])
        R, chol_R = covariance_prior("R", t, priors, None if fixed is None else fixed["R"])
        beta_raw = fixed_effects_prior(X.shape[1], t, priors)
        if "beta" not in model.named_vars:
            pm.Deterministic("beta", beta_raw)

        w = pm.Normal("w_animal", 0.0, 1.0, shape=(n, t))
        if animal_effect is None:
            # Breeding values a = T D^1/2 W L_G' (generation order), T by one pass down the
            # pedigree: one Op whatever the pedigree's depth (ped2g.fit.pedigree_op).
            a = down_product(sqrt_b[:, None] * pt.dot(w, chol_G.T), sire, dam)
        else:
            a = animal_effect(w, chol_G, lay)

        effects = []
        for eff in data.random:
            _, chol_k = covariance_prior(f"cov_{eff.name}", t, priors)
            v = pm.Normal(f"v_{eff.name}", 0.0, 1.0, shape=(eff.n_levels, t))
            effects.append((eff, pt.dot(v, chol_k.T)))

        # One residual matrix for every record (missing cells hold 0, which the Op ignores).
        mu = pt.dot(pm.Data("X", X), beta_raw) + a[pm.Data("record_animal", rec_animal)]
        for eff, u in effects:
            # A zero row after the levels: records of an unknown level index it and get nothing.
            padded = pt.concatenate([u, pt.zeros((1, t))], axis=0)
            mu = mu + padded[pm.Data(f"level_{eff.name}", eff.padded_level)]
        resid = pm.Data("y", np.where(np.isnan(y), 0.0, y)) - mu
        logp = observed_normal_op(resid, R, pm.Data("record_pattern", pattern),
                                  pm.Data("observed_patterns", patterns))[0]
        pm.Potential("records", logp)
    return model


def data_values(data: FitData, model_config: dict) -> dict[str, np.ndarray]:
    """The model's data that change when only the records change (for ``compiled.with_data``);
    empty with fixed covariances, which the model holds on the records' standardised scale."""
    if model_config.get("fixed_covariances"):
        return {}
    return {"y": np.where(np.isnan(data.y), 0.0, np.asarray(data.y, dtype=float))}


def _chains_pooled(idata, name: str) -> np.ndarray:
    values = np.asarray(idata.posterior[name].values)
    return values.reshape((-1,) + values.shape[2:])


def breeding_values(data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                    conditional_mean: bool = False) -> np.ndarray:
    """Breeding values of every animal of ``data.pedigree`` from the latent engine's draws.

    ``a = T D^{1/2} W L_G'`` recomputed in NumPy from the stored draws of ``w_animal`` and ``G``
    (``L_G`` = Cholesky factor of G, which is the factor the model used). The latent engine
    samples the breeding values, so these are posterior draws; ``rng`` and ``conditional_mean``
    are accepted for the shared interface and not used.

    Returns
    -------
    numpy.ndarray, shape (S, n_animals, t)
        Standardised scale, animals in pedigree order, S = at most ``max_draws`` evenly thinned
        pooled draws (chain-major).
    """
    from ..contracts.fit_folder import thin_indices
    from ..pedigree.recursion import down

    w = _chains_pooled(idata, "w_animal")
    G = _chains_pooled(idata, "G")
    keep = thin_indices(w.shape[0], max_draws)
    w, G = w[keep], G[keep]
    lay = generation_layout(data.pedigree)
    chol = np.linalg.cholesky(0.5 * (G + np.swapaxes(G, -1, -2)))
    m_gen = lay["sqrt_b"][None, :, None] * np.einsum("snk,sjk->snj", w, chol)
    m = m_gen[:, lay["rank"], :]  # back to pedigree order
    return down(data.pedigree, m)


class LatentEngine:
    """The latent engine behind the interface of :mod:`ped2g.fit.engine`."""

    name = "latent"

    def applies(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        return applicable(data)

    def prefers(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        return True, ""

    def build(self, data: FitData, model_config: dict):
        from .engine import BuiltModel

        return BuiltModel(model=build_model(data, model_config), extra_steps=[], nutpie_options=NUTPIE_OPTIONS,
                          numba_opt_level=None, missing_values="masked" if data.missing.any() else "none")

    def data_values(self, data: FitData, model_config: dict) -> dict[str, np.ndarray]:
        return data_values(data, model_config)

    def breeding_values(self, data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                        conditional_mean: bool = False) -> np.ndarray:
        return breeding_values(data, idata, rng, max_draws, conditional_mean)
