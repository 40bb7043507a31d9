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
engine          the engine interface (:class:`~ped2g.fit.engine.Engine`, :class:`~ped2g.fit.engine.BuiltModel`),
                the engines by name and the choice between them (``model.engine``).
marginal        engine with the breeding values integrated out exactly (:class:`MarginalEngine`).
marginal_likelihood_op  the marginal engine's likelihood (covariances lam_i G + R) as one numba-backed Op.
augment         the marginal engine's Gibbs step for missing trait values (data augmentation).
latent          engine with the breeding values as (non-centred) parameters (:class:`LatentEngine`).
pedigree_op     the latent engine's PyTensor Ops around the pedigree recursion.
sample          running NUTS (nutpie or PyMC) with seeds from :mod:`ped2g.rng`.
outputs         draws to original units; the fit folder's tables and files.
pipeline        the stage without its command line: data -> engine -> draws -> checks -> fit folder.
command         ``ped2g fit``.

The engine interface is documented in :mod:`ped2g.fit.engine`.
"""
