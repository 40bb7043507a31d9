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
than integrated out, as in the marginal engine. Missing trait cells simply drop out (each record
contributes ``(R_oo)^-1`` of its observed traits), so no missing-value step is needed.

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

#: Bytes per non-zero of the factor held during one evaluation: L's values, its selected inverse
#: and the row indices (8 each), plus the coefficient matrix's entries and terms (about as many).
BYTES_PER_FACTOR_NONZERO = 40
#: Share of the available memory the engine plans to fill at most.
MEMORY_SHARE = 0.8


def observed_residual_mask(data: FitData) -> np.ndarray:
    return (~data.missing).astype(float)


def build_model(data: FitData, model_config: dict, design: sparse_mme.Design | None = None):
    """The PyMC model with every random effect integrated out (module docstring).

    Free variables: the covariance priors of G, R and each extra effect, and ``beta`` (p, t).
    Deterministics ``G``, ``R``, ``beta`` and ``cov_<name>``. The records, the design matrix and
    every structural array of the mixed-model equations enter as ``pm.Data``.
    """
    import pymc as pm
    import pytensor.tensor as pt

    from .priors import covariance_prior, shared_priors
    from .sparse_likelihood_op import sparse_mme_logp

    design = design if design is not None else sparse_mme.design_for(data)
    t = data.n_traits
    priors = with_defaults(model_config, "model")["priors"]
    coords = {"trait": data.traits, "trait2": data.traits, "x": data.x_names}
    with pm.Model(coords=coords) as model:
        G, _, R, _, beta = shared_priors(data, model_config, signed_sd=True)
        covs = [covariance_prior(f"cov_{eff.name}", t, priors, signed_sd=True)[0] for eff in data.random]
        covs_t = pt.stack(covs) if covs else pt.zeros((0, t, t))
        y = pm.Data("y", np.where(data.missing, 0.0, data.y))
        X = pm.Data("X", np.asarray(data.X, dtype=float))
        observed = pm.Data("observed", observed_residual_mask(data))
        resid = (y - X @ beta) * observed
        arrays = design.likelihood_inputs()
        if max(int(np.abs(a).max(initial=0)) for a in arrays if a.dtype.kind == "i") >= 2**31:
            raise ValueError("the sparse design is too large for 32-bit indices")
        structure = [pm.Data(f"mme_{name}", arr) for name, arr in zip(sparse_mme.INPUT_NAMES, arrays)]
        pm.Potential("loglik", sparse_mme_logp(resid, G, R, covs_t, structure, canonical=design.canonical))
    return model


def data_values(data: FitData, model_config: dict) -> dict[str, np.ndarray]:
    """The model's data that change when only the records change; empty with fixed covariances
    (held on the records' standardised scale)."""
    if model_config.get("fixed_covariances"):
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

    design = design if design is not None else sparse_mme.design_for(data)
    post = idata.posterior
    index = thin_indices(post.sizes["chain"] * post.sizes["draw"], max_draws)
    G = _pooled(idata, "G", index)
    R = _pooled(idata, "R", index)
    beta = _pooled(idata, "beta", index)
    covs = (np.stack([_pooled(idata, f"cov_{eff.name}", index) for eff in data.random], axis=1)
            if data.random else None)
    y0 = np.where(data.missing, 0.0, data.y)
    n_a = data.pedigree.n
    out = np.empty((len(index), n_a, data.n_traits))
    for lo in range(0, len(index), chunk):
        sl = slice(lo, min(lo + chunk, len(index)))
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
        self._design: tuple[FitData, sparse_mme.Design] | None = None

    def design(self, data: FitData) -> sparse_mme.Design:
        from .marginal import _same_design

        if self._design is not None and (self._design[0] is data or _same_design(self._design[0], data)):
            return self._design[1]
        design = sparse_mme.design_for(data)
        self._design = (data, design)
        return design

    def applies(self, data: FitData, model_config: dict) -> tuple[bool, str]:
        from ..machine import available_memory

        design = self.design(data)
        factored = design.univariate if design.canonical else design
        need = BYTES_PER_FACTOR_NONZERO * float(factored.factor_nnz)
        memory = self.memory if self.memory is not None else available_memory()
        if memory is not None and need > MEMORY_SHARE * memory:
            return False, (f"the sparse factor has {factored.factor_nnz:,} non-zeros, about {need / 1e9:.1f} GB, "
                           f"and this process has {memory / 1e9:.1f} GB available")
        if design.canonical:
            return True, (f"sparse mixed-model equations by the canonical route (no extra random effect, no "
                          f"missing cell): {design.t} one-trait systems of {factored.n_unknowns:,} unknowns, "
                          f"{factored.factor_nnz:,} non-zeros in each factor")
        return True, (f"sparse mixed-model equations: {design.n_unknowns:,} random-effect unknowns, "
                      f"{design.factor_nnz:,} non-zeros in the factor")

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

        start = time.perf_counter()
        design = self.design(data)
        design_seconds = time.perf_counter() - start
        return BuiltModel(model=build_model(data, model_config, design), extra_steps=[], nutpie_options=None,
                          numba_opt_level=None, missing_values="masked" if data.missing.any() else "none",
                          timings={"sparse_design_seconds": design_seconds})

    def data_values(self, data: FitData, model_config: dict) -> dict[str, np.ndarray]:
        return data_values(data, model_config)

    def breeding_values(self, data: FitData, idata, rng: np.random.Generator, max_draws: int | None = None,
                        conditional_mean: bool = False) -> np.ndarray:
        return breeding_values(data, idata, rng, max_draws, conditional_mean, design=self.design(data))
