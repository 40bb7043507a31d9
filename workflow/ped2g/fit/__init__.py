"""The fit stage: a Bayesian multivariate animal model per population, in PyMC.

The model, on every trait jointly (docs/methods.md §2)::

    y = X b + Z a + sum_c Z_c u_c + e,   a ~ MVN(0, G (x) A),   u_c ~ MVN(0, C_c (x) I),
    e_r ~ MVN(0, R) independently per record r

with ``A`` the additive relationship matrix of the pruned pedigree. Everything is sampled on a
standardised scale (each trait centred and divided by its phenotypic SD, see
:class:`ped2g.fit.data.FitData`) and reported back in original units by :mod:`ped2g.fit.outputs`.

Modules
-------
data            :class:`FitData`, the prepared data of one population (the engines' input).
prepare         config + tables -> FitData (select, link, prune, design matrices, standardise).
priors          the one covariance prior used for every covariance matrix, and the fixed-effect prior.
batched_normal  log-density of n independent k-variate normals with per-record covariances.
scaled_pair_op  the marginal engine's likelihood (covariances lam_i G + R) as one numba-backed Op.
marginal        engine with the breeding values integrated out exactly.
augment         the marginal engine's Gibbs step for missing trait values (data augmentation).
latent          engine with the breeding values as (non-centred) parameters.
engine          the choice between the engines (``model.engine: auto | marginal | latent``).
sample          running NUTS (nutpie or PyMC) with seeds from :mod:`ped2g.rng`.
outputs         draws to original units; posterior.nc, parameters.csv, diagnostics.json, ...
command         ``ped2g fit``.

Engine interface
----------------
``ped2g.fit.marginal`` and ``ped2g.fit.latent`` each expose::

    applicable(data: FitData) -> tuple[bool, str]
        Whether the engine can fit these data and, if not (or if only with a caveat), why.

    build_model(data: FitData, model_config: dict) -> pymc.Model
        model_config is config["model"] (keys priors, fixed_covariances, ...). The model holds,
        on the standardised scale, the Deterministics
            "G"           (t, t)  additive genetic covariance matrix
            "R"           (t, t)  residual covariance matrix
            "beta"        (p, t)  fixed effects, rows in the order of FitData.x_names
            "cov_<name>"  (t, t)  one per extra random effect in FitData.random
        Covariances come from ped2g.fit.priors.covariance_prior and fixed effects from
        ped2g.fit.priors.fixed_effects_prior, so both engines have the same prior. Large arrays
        (records, index arrays, rotations) enter as pm.Data, not as constants in the graph.

    extra_steps(model, data: FitData) -> list        (optional)
        PyMC step methods for variables NUTS must not move (the marginal engine's Gibbs step for
        missing trait values); ped2g.fit.sample then runs PyMC's sampler with these steps
        before NUTS in every iteration.

    with_records(data: FitData, y, center, scale) -> FitData
        A copy of ``data`` with other standardised records (same animals, design and missing
        cells), reusing what does not depend on the records (the marginal engine's
        eigendecomposition). Used by the refitting null (ped2g.null.refit).

    data_values(data: FitData, model_config: dict) -> dict
        The model's ``pm.Data`` values that change when only the records change, for
        ``compiled.with_data``; empty when a model must be built per data set instead.

    breeding_values(data: FitData, idata, rng, max_draws=None, conditional_mean=False) -> np.ndarray
        Breeding values of every animal of data.pedigree, shape (S, n_animals, t), standardised
        scale (multiply by data.y_scale for original units), for S = at most max_draws evenly
        thinned pooled draws of idata.posterior (chain-major). An engine that integrates the
        breeding values out draws them from their exact conditional distribution given each
        draw; with conditional_mean=True it returns the conditional means instead (used for
        BLUP with known G and R). An engine that samples them returns its draws (and ignores
        conditional_mean).
"""
