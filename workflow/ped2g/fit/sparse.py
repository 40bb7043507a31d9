"""The sparse engine: every random effect integrated out through the mixed-model equations
(docs/methods.md §2.14).

Model as in docs/methods.md §2.1 (standardised scale). The breeding values and every extra random
effect are integrated out exactly; the log-likelihood of the observed cells given the fixed effects
and the covariance matrices comes from one sparse ``L D L'`` factorisation of Henderson's
coefficient matrix per evaluation, and its gradient from the selected inverse of that matrix
(:mod:`ped2g.fit.sparse_mme`, wrapped as one PyTensor Op in
:mod:`ped2g.fit.sparse_likelihood_op`). What NUTS samples: G, R, each extra effect's covariance
(priors of :mod:`ped2g.fit.priors`, through signed scales and canonical partial correlations, so
that a variance whose posterior reaches zero does not leave NUTS a long tail of its log-SD) and
the fixed effects ``beta`` -- kept as parameters rather
than integrated out, as in the marginal engine. Missing trait cells can simply drop out (each
record contributes ``(R_oo)^-1`` of its observed traits; ``model.missing_values: nuts``, and always
with extra random effects); by default (``auto``) an animal model keeps the canonical route below
on completed records and a Gibbs step draws the missing cells (:mod:`ped2g.fit.sparse_augment`,
:func:`missing_route`).

With no extra random effect and every cell observed, the likelihood takes the canonical route
(docs/methods.md §2.14): one ``t x t`` transformation splits the model into ``t`` one-trait
models, each with its own factorisation of an ``n``-unknown system (8.6 times faster per gradient
than the ``t n``-unknown system at 100,000 animals and 4 traits).

Cost: no dense matrix anywhere; memory and time follow the non-zeros of the factor, which depend
on the pedigree's structure (benchmarks/sparse_likelihood.py). Breeding values are drawn
afterwards from their exact conditional distribution given each posterior draw,
``N(C^-1 r, C^-1)``, with the same factorisation.

``model.engine: auto`` takes it (:meth:`SparseEngine.prefers`, docs/methods.md §2.9) for every
design with extra random effects (maternal, permanent-environment, cohort, ...), and for any design
the marginal engine cannot fit in memory. On the invented field design of
benchmarks/field_design_benchmark.py (benchmarks/README.md) it samples 36 parameters where the
marginal engine samples every extra level and missing cell (about 5,100), takes half the
gradients per iteration and gave 46 times the effective samples per second. Without extra random
effects ``auto`` keeps the marginal engine, whose gradient costs O(records x traits^2) after one
eigendecomposition: measured side by side (benchmarks/fit_benchmark.py, 4 traits), it gave 30.6
effective samples per second everything included at n = 2,000 against at most 4.1 here, and 9.9
against at most 0.06 at n = 8,000.
"""

from __future__ import annotations

import numpy as np

from ..config import with_defaults
from .data import FitData
from . import sparse_mme
from .sparse_augment import complete_design

#: Bytes per non-zero of the factor held during one evaluation: L's values, its selected inverse
#: and the row indices (8 each), plus the coefficient matrix's entries and terms (about as many).
BYTES_PER_FACTOR_NONZERO = 40
#: Share of the available memory the engine plans to fill at most.
MEMORY_SHARE = 0.8


def observed_residual_mask(data: FitData) -> np.ndarray:
    return (~data.missing).astype(float)


def build_model(data: FitData, model_config: dict, design: sparse_mme.Design | None = None,
                missing_step: bool = False):
    """The PyMC model with every random effect integrated out (module docstring).

    Free variables: the covariance priors of G, R and each extra effect, and ``beta`` (p, t).
    Deterministics ``G``, ``R``, ``beta`` and ``cov_<name>``. The records, the design matrix and
    every structural array of the mixed-model equations enter as ``pm.Data``. With
    ``missing_step`` (``design`` then the complete-records design, :mod:`ped2g.fit.sparse_augment`)
    the model also holds the completed records and the missing cells as variables that the Gibbs
    step of :meth:`SparseEngine.build` updates, not NUTS.
    """
    import pymc as pm
    import pytensor.tensor as pt

    from . import augment
    from .priors import covariance_prior, shared_priors
    from .sparse_likelihood_op import sparse_mme_logp

    if design is None:
        design = complete_design(data) if missing_step else sparse_mme.design_for(data)
    t = data.n_traits
    priors = with_defaults(model_config, "model")["priors"]
    coords = {"trait": data.traits, "trait2": data.traits, "x": data.x_names}
    with pm.Model(coords=coords) as model:
        G, _, R, _, beta = shared_priors(data, model_config, signed_sd=True)
        covs = [covariance_prior(f"cov_{eff.name}", t, priors, signed_sd=True)[0] for eff in data.random]
        covs_t = pt.stack(covs) if covs else pt.zeros((0, t, t))
        X = pm.Data("X", np.asarray(data.X, dtype=float))
        if missing_step:
            y0 = np.where(data.missing, 0.0, data.y)
            y = pm.Flat(augment.ROTATED_NAME, shape=y0.shape, initval=y0)
            n_missing = int(data.missing.sum())
            pm.Flat(augment.MISSING_NAME, shape=n_missing, initval=np.zeros(n_missing))
            resid = y - X @ beta
        else:
            y = pm.Data("y", np.where(data.missing, 0.0, data.y))
            observed = pm.Data("observed", observed_residual_mask(data))
            resid = (y - X @ beta) * observed
        arrays = design.likelihood_inputs()
        if max(int(np.abs(a).max(initial=0)) for a in arrays if a.dtype.kind == "i") >= 2**31:
            raise ValueError("the sparse design is too large for 32-bit indices")
        structure = [pm.Data(f"mme_{name}", arr) for name, arr in zip(sparse_mme.INPUT_NAMES, arrays)]
        pm.Potential("loglik", sparse_mme_logp(resid, G, R, covs_t, structure, canonical=design.canonical))
    return model


def missing_route(data: FitData, model_config: dict) -> tuple[str, str]:
    """How missing trait cells are handled, and why: ``"none"`` (no missing cell), ``"masked"``
    (dropped exactly, general route) or ``"gibbs"`` (the canonical route on completed records, the
    missing cells drawn by a Gibbs step; :mod:`ped2g.fit.sparse_augment`).

    The Gibbs step applies to animal models of two or more traits (no extra random effect); there
    ``auto`` and ``gibbs`` take it, and ``nuts`` keeps the exact route with NUTS alone. Measured side
    by side on ``fit_benchmark.py``'s design (4 traits, 10% of cells missing; benchmarks/README.md),
    the Gibbs route gave 1.3 times the masked route's effective samples of G per second at 500
    animals and 1.7 times at 2,000, everything included: the masked route's general system of
    ``t n`` unknowns costs more per gradient than ``t`` one-trait ones and the Gibbs step (3.8 times
    at 2,000 animals), and the gap grows with the pedigree (8.6 times at 100,000). Its chains mix
    more slowly the larger the share of a trait that is missing (fewer effective samples per draw),
    which the fit's convergence checks catch."""
    from ..errors import UserError
    from .marginal import MISSING_MODES

    requested = with_defaults(model_config, "model")["missing_values"]
    if requested not in MISSING_MODES:
        raise UserError(f"config key 'model.missing_values' is {requested!r}; allowed: {', '.join(MISSING_MODES)}")
    if not data.missing.any():
        return "none", ""
    masked = "missing cells dropped exactly (each record enters with R of its observed traits)"
    if requested == "nuts":
        return "masked", masked + " (model.missing_values: nuts)"
    if data.random:
        if requested == "gibbs":
            return "masked", ("model.missing_values asks for a Gibbs step, which the sparse engine has only for "
                              "designs without extra random effects; missing cells dropped exactly instead")
        return "masked", masked
    if data.n_traits < 2:
        return "masked", "one trait: a record with a missing cell has no value and drops out"
    return "gibbs", (f"missing cells drawn by a Gibbs step between NUTS transitions (model.missing_values: "
                     f"{requested}), so that the canonical route applies")


def data_values(data: FitData, model_config: dict) -> dict[str, np.ndarray]:
    """The model's data that change when only the records change; empty with fixed covariances
    (held on the records' standardised scale) and with the Gibbs step for missing cells (the
    records are the initial value of a sampled variable), where callers build a model per data
    set."""
    if model_config.get("fixed_covariances") or missing_route(data, model_config)[0] == "gibbs":
        return {}
    return {"y": np.where(data.missing, 0.0, np.asarray(data.y, dtype=float))}


def _pooled(idata, name: str, index: np.ndarray) -> np.ndarray:
    arr = np.asarray(idata.posterior[name].values)
    return arr.reshape(-1, *arr.shape[2:])[index]


def breeding_values(data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                    conditional_mean: bool = False, design: sparse_mme.Design | None = None,
                    chunk: int = 64) -> np.ndarray:
    """Breeding values of every pedigree animal, (S, n_animals, t), standardised scale.

    Per posterior draw, from ``N(C^-1 r, C^-1)`` given G, R, each extra covariance and beta (the
    extra effects integrated out with them); with ``conditional_mean`` the means ``C^-1 r`` (the
    BLUP with known covariances). Draws are processed in chunks of ``chunk`` inside one compiled
    loop.
    """
    from ..contracts.fit_folder import thin_indices

    post = idata.posterior
    gibbs = "missing" in post and data.missing.any()
    if design is None:
        design = complete_design(data) if gibbs else sparse_mme.design_for(data)
    index = thin_indices(post.sizes["chain"] * post.sizes["draw"], max_draws)
    G = _pooled(idata, "G", index)
    R = _pooled(idata, "R", index)
    beta = _pooled(idata, "beta", index)
    covs = (np.stack([_pooled(idata, f"cov_{eff.name}", index) for eff in data.random], axis=1)
            if data.random else None)
    y0 = np.where(data.missing, 0.0, data.y)
    if gibbs:
        # each draw's completed records: p(u | theta, Y_O, Y_M) with Y_M from the joint posterior
        # is a draw of p(u | theta, Y_O)
        from .sparse_augment import SparseMissingDraw

        filler = SparseMissingDraw(data, design)
        missing = _pooled(idata, "missing", index)
    n_a = data.pedigree.n
    out = np.empty((len(index), n_a, data.n_traits))
    for lo in range(0, len(index), chunk):
        sl = slice(lo, min(lo + chunk, len(index)))
        if gibbs:
            ys = np.stack([filler.completed(m) for m in missing[sl]])
            resid = ys - np.einsum("rp,spt->srt", data.X, beta[sl])
        else:
            resid = (y0[None] - np.einsum("rp,spt->srt", data.X, beta[sl])) * (~data.missing)[None]
        noise = None if conditional_mean else rng.standard_normal((sl.stop - sl.start, design.n_unknowns))
        blocks, ok = sparse_mme.effects(design, resid, G[sl], R[sl], None if covs is None else covs[sl], noise)
        if not ok.all():
            raise ValueError("a posterior draw has a covariance matrix that is not positive definite")
        out[sl] = blocks[:, :n_a]
    return out


class SparseEngine:
    """The sparse engine behind the interface of :mod:`ped2g.fit.engine`.

    One object per population: the design (ordering, symbolic factorisation, index maps) is
    computed once and reused for other records on the same design (the refitting null).
    """

    name = "sparse"

    def __init__(self, memory: float | None = None):
        self.memory = memory
        self._design: tuple[FitData, bool, sparse_mme.Design] | None = None

    def design(self, data: FitData, missing_step: bool = False) -> sparse_mme.Design:
        """The design of ``data`` (computed once per design): that of the observed cells, or with
        ``missing_step`` that of the completed records."""
        from .marginal import _same_design

        if self._design is not None and self._design[1] == missing_step and (
                self._design[0] is data or _same_design(self._design[0], data)):
            return self._design[2]
        design = complete_design(data) if missing_step else sparse_mme.design_for(data)
        self._design = (data, missing_step, design)
        return design

    def applies(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        from ..machine import available_memory

        route, why_route = missing_route(data, model_config)
        design = self.design(data, route == "gibbs")
        factored = design.univariate if design.canonical else design
        need = BYTES_PER_FACTOR_NONZERO * float(factored.factor_nnz)
        memory = self.memory if self.memory is not None else available_memory()
        if memory is not None and need > MEMORY_SHARE * memory:
            return False, (f"the sparse factor has {factored.factor_nnz:,} non-zeros, about {need / 1e9:.1f} GB, "
                           f"and this process has {memory / 1e9:.1f} GB available")
        if design.canonical:
            cells = "no missing cell" if route == "none" else why_route
            return True, (f"sparse mixed-model equations by the canonical route (no extra random effect; {cells}): "
                          f"{design.t} one-trait systems of {factored.n_unknowns:,} unknowns, "
                          f"{factored.factor_nnz:,} non-zeros in each factor")
        return True, (f"sparse mixed-model equations: {design.n_unknowns:,} random-effect unknowns, "
                      f"{design.factor_nnz:,} non-zeros in the factor" + (f"; {why_route}" if why_route else ""))

    def prefers(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        """Whether ``auto`` takes it (module docstring): for extra random effects, which it integrates
        out instead of sampling every level, and when the marginal engine cannot fit the data in
        memory. The text is the reason either way."""
        from .marginal import applicable

        ok, why = applicable(data, model_config, self.memory)
        if not ok:
            return True, f"the marginal engine does not apply ({why})"
        if data.random:
            levels = sum(int(e.n_levels) for e in data.random)
            return True, (f"the extra random effects ({', '.join(e.name for e in data.random)}; {levels:,} levels) "
                          "are integrated out here instead of sampled level by level (faster per effective "
                          "sample on the field design measured, benchmarks/README.md)")
        return False, ("without extra random effects the marginal engine fits in memory and its gradient is "
                       "far cheaper (O(records x traits^2) after one eigendecomposition; measured: at least 7 "
                       "times the effective samples per second at 2,000 animals and 170 times at 8,000, "
                       "benchmarks/README.md)")

    def build(self, data: FitData, model_config: dict):
        import time

        from .engine import BuiltModel

        route, _ = missing_route(data, model_config)
        start = time.perf_counter()
        design = self.design(data, route == "gibbs")
        design_seconds = time.perf_counter() - start
        model = build_model(data, model_config, design, missing_step=route == "gibbs")
        steps = []
        if route == "gibbs":
            from . import augment
            from .sparse_augment import SparseMissingDraw

            steps = [augment.make_step(model, SparseMissingDraw(data, design), data)]
        return BuiltModel(model=model, extra_steps=steps, nutpie_options=None, numba_opt_level=None,
                          missing_values=route, timings={"sparse_design_seconds": design_seconds})

    def data_values(self, data: FitData, model_config: dict) -> dict[str, np.ndarray]:
        return data_values(data, model_config)

    def breeding_values(self, data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                        conditional_mean: bool = False) -> np.ndarray:
        gibbs = "missing" in idata.posterior and data.missing.any()
        return breeding_values(data, idata, rng, max_draws, conditional_mean, design=self.design(data, gibbs))
