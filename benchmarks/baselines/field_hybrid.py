"""Gibbs steps for the extra levels between NUTS transitions on the animal model's marginal
likelihood (benchmark candidate for field designs; docs/methods.md §2.12).

Same model and priors as the sparse engine (docs/methods.md §2.1, §2.4; signed scales;
standardised scale). The state is theta = (G, R, each extra covariance C_c, beta), the levels
``u_c`` of every extra random effect and the missing trait cells ``Y_M``. One iteration:

1. draw every random effect at once -- the breeding values ``a`` and each ``u_c`` -- from
   ``N(C^-1 r, C^-1)`` given theta and the observed cells (Henderson's equations of the whole
   model, missing cells left out: :func:`ped2g.fit.sparse_mme.effects`, one factorisation and a
   solve with a perturbed right-hand side);
2. draw each record's missing cells given ``a``, the ``u_c``, beta and R (a conditional normal per
   record, :func:`ped2g.fit.augment.draw_missing_cells`); then discard ``a``;
3. one NUTS transition for theta given the ``u_c`` and the completed records, with the breeding
   values integrated out: the records net of the extra levels, ``Y* = Y_c - sum_c Z_c u_c``, follow
   an animal model with every cell observed, whose likelihood goes by the sparse engine's
   canonical route (t one-trait systems of the pedigree), times ``prod_c N(u_c | 0, I (x) C_c)``.

Steps 1-2 draw ``(a, u, Y_M)`` from ``p(a, u, Y_M | theta, Y_O)`` and step 3 leaves
``p(theta | u, Y_M, Y_O)`` invariant with ``a`` integrated out: a partially collapsed Gibbs
sampler (van Dyk & Park 2008, *JASA* 103:790 [M]) that targets the exact joint posterior. Each
NUTS gradient costs t one-trait factorisations of the pedigree instead of one factorisation of the
whole field system, and step 1 costs one factorisation without the selected inverse; in exchange
each extra covariance is sampled given its levels (a centred parameterisation), which mixes well
when the data pin each level down (a cohort of many records) and slowly when they do not (a
permanent-environment level of an animal with two records; Papaspiliopoulos, Roberts & Skold 2007,
*Statistical Science* 22:59 [M]).

Used by ``benchmarks/field_design_benchmark.py --engines hybrid``; not part of the workflow.
"""

from __future__ import annotations

import numpy as np
from pymc.step_methods.compound import BlockedStep, Competence, StepMethodState
from pymc.util import get_random_generator

from ped2g.config import with_defaults
from ped2g.fit import augment, sparse_mme
from ped2g.fit.data import FitData

#: Model variable of the completed records net of the extra levels (n, t); updated by the step.
ADJUSTED_NAME = "adjusted_records"


def level_name(effect: str) -> str:
    return f"levels_{effect}"


class LevelDraw:
    """Steps 1-2 of the module docstring (no PyMC).

    ``draw(G, R, beta, covs, rng)`` returns ``(Y*, [u_c, ...])`` or None where a covariance is not
    positive definite to working precision (the caller keeps the current state).
    """

    def __init__(self, data: FitData, design: sparse_mme.Design | None = None, drawn: list[int] | None = None,
                 impute: bool = True):
        self.design = design if design is not None else sparse_mme.design_for(data)
        #: which extra effects' levels the step keeps (the others are integrated out by NUTS's
        #: likelihood), and whether it fills the missing cells (only when every effect is drawn)
        self.drawn = list(range(len(data.random))) if drawn is None else list(drawn)
        self.impute = impute
        if impute and len(self.drawn) != len(data.random):
            raise ValueError("the missing cells are drawn only when every extra effect's levels are")
        if self.design.canonical:
            raise ValueError("the level draw needs the design of the whole model (extra random effects)")
        miss = np.asarray(data.missing, dtype=bool)
        self.t = data.n_traits
        self.X = np.asarray(data.X, dtype=float)
        self.observed = (~miss).astype(float)
        self.y0 = np.where(miss, 0.0, np.asarray(data.y, dtype=float))
        self.animal = np.asarray(data.record_animal, dtype=np.int64)
        self.effects = list(data.random)
        self.offsets = np.concatenate([[0], np.cumsum(self.design.n_levels)]).astype(np.int64)
        self.rows = np.flatnonzero(miss.any(axis=1))
        self.mask_rows = miss[self.rows]
        self.patterns = augment._patterns(miss, self.rows)

    def initial(self) -> tuple[np.ndarray, list[np.ndarray]]:
        """Levels at 0 and the records with missing cells at 0 (the standardised trait means)."""
        return self.y0.copy(), [np.zeros((int(self.effects[c].n_levels), self.t)) for c in self.drawn]

    def draw(self, G, R, beta, covs, rng: np.random.Generator):
        t = self.t
        resid = (self.y0 - self.X @ beta) * self.observed
        noise = rng.standard_normal((1, self.design.n_unknowns))
        covs = np.asarray(covs, dtype=float).reshape(1, -1, t, t)
        blocks, ok = sparse_mme.effects(self.design, resid[None], np.asarray(G)[None], np.asarray(R)[None],
                                        covs if covs.shape[1] else None, noise)
        if not ok[0]:
            return None
        blocks = blocks[0]
        a = blocks[self.offsets[0]:self.offsets[1]]
        levels = [blocks[self.offsets[1 + c]:self.offsets[2 + c]] for c in range(len(self.effects))]
        extra = np.zeros_like(self.y0)
        for c in self.drawn:
            extra += self.effects[c].take(levels[c])
        if not self.impute:
            return self.y0 - extra, [np.ascontiguousarray(levels[c]) for c in self.drawn]
        completed = self.y0.copy()
        if len(self.rows):
            mean = (self.X @ beta + a[self.animal] + extra)[self.rows]
            filled = augment.draw_missing_cells(self.y0[self.rows], mean, R, self.patterns, rng)
            completed[self.rows] = np.where(self.mask_rows, filled, self.y0[self.rows])
        return completed - extra, [np.ascontiguousarray(levels[c]) for c in self.drawn]


class LevelStep(BlockedStep):
    """PyMC step method for steps 1-2: the extra levels and the completed records net of them."""

    name = "extra_levels"
    _state_class = StepMethodState
    stats_dtypes_shapes = {}

    def __init__(self, vars, core: LevelDraw, theta_fn, names: list[str], model=None, rng=None):
        self.vars = vars
        self.core = core
        self.theta_fn = theta_fn
        self.names = names
        self.not_stored = (ADJUSTED_NAME, *names)
        self.rng = get_random_generator(rng)

    def step(self, point):
        G, R, beta, *covs = self.theta_fn(point)
        drawn = self.core.draw(G, R, beta, np.array(covs), self.rng)
        if drawn is None:
            return point, [{}]
        adjusted, levels = drawn
        point = dict(point)
        point[ADJUSTED_NAME] = adjusted
        for name, u in zip(self.names, levels):
            point[name] = u
        return point, [{}]

    @staticmethod
    def competence(var, has_grad):
        return Competence.INCOMPATIBLE


def build(data: FitData, model_config: dict, design: sparse_mme.Design | None = None,
          drawn: list[str] | None = None):
    """(model, [LevelStep]): the PyMC model of step 3 and the step of steps 1-2.

    ``drawn`` names the extra effects whose levels the Gibbs step draws (default: all). With some
    left out, those stay integrated out in NUTS's likelihood, which then goes by the general route
    on the observed cells (missing cells dropped exactly, not drawn), with the records net of the
    drawn levels."""
    import pymc as pm
    import pytensor.tensor as pt

    from ped2g.fit.priors import covariance_prior, shared_priors
    from ped2g.fit.sparse_likelihood_op import sparse_mme_logp

    if not data.random:
        raise ValueError("the hybrid candidate is for designs with extra random effects")
    names_all = [e.name for e in data.random]
    drawn = names_all if drawn is None else list(drawn)
    unknown = sorted(set(drawn) - set(names_all))
    if unknown or not drawn:
        raise ValueError(f"drawn effects {drawn} must be a non-empty subset of {names_all}")
    drawn_idx = [names_all.index(n) for n in drawn]
    kept = [e for e in data.random if e.name not in drawn]
    t = data.n_traits
    core = LevelDraw(data, design, drawn_idx, impute=not kept)
    if kept:
        nuts_design = sparse_mme.build_design(data.pedigree, data.record_animal, ~np.asarray(data.missing),
                                              [(e.level, e.n_levels) for e in kept])
    else:
        nuts_design = sparse_mme.build_design(data.pedigree, data.record_animal,
                                              np.ones((data.n_records, t), dtype=bool), [])
        if not nuts_design.canonical:
            raise ValueError("the animal model of the completed records has no canonical route (one trait?)")
    priors = with_defaults(model_config, "model")["priors"]
    y_start, u_start = core.initial()
    coords = {"trait": data.traits, "trait2": data.traits, "x": data.x_names}
    names = [level_name(n) for n in drawn]
    with pm.Model(coords=coords) as model:
        G, _, R, _, beta = shared_priors(data, model_config, signed_sd=True)
        covs = {eff.name: covariance_prior(f"cov_{eff.name}", t, priors, signed_sd=True)[0] for eff in data.random}
        X = pm.Data("X", core.X)
        adjusted = pm.Flat(ADJUSTED_NAME, shape=y_start.shape, initval=y_start)
        for name, effect, u0 in zip(names, drawn, u_start):
            u = pm.Flat(name, shape=u0.shape, initval=u0)
            chol = pt.linalg.cholesky(covs[effect])
            pm.Potential(f"{name}_prior", pm.logp(pm.MvNormal.dist(mu=np.zeros(t), chol=chol), u).sum())
        structure = [pm.Data(f"mme_{n}", arr) for n, arr in zip(sparse_mme.INPUT_NAMES,
                                                                  nuts_design.likelihood_inputs())]
        resid = adjusted - X @ beta
        if kept:
            resid = resid * pm.Data("observed", (~np.asarray(data.missing)).astype(float))
            kept_covs = pt.stack([covs[e.name] for e in kept])
        else:
            kept_covs = pt.zeros((0, t, t))
        pm.Potential("loglik", sparse_mme_logp(resid, G, R, kept_covs, structure, canonical=nuts_design.canonical))
    outs = [model["G"], model["R"], model["beta"], *[model[f"cov_{e.name}"] for e in data.random]]
    theta_fn = model.compile_fn(model.replace_rvs_by_values(outs), inputs=model.value_vars,
                                on_unused_input="ignore", point_fn=True, mode="FAST_COMPILE")
    step_vars = [model.rvs_to_values[model[ADJUSTED_NAME]], *[model.rvs_to_values[model[n]] for n in names]]
    return model, [LevelStep(step_vars, core, theta_fn, names, model=model)]
